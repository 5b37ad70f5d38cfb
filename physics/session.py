"""Save and load a measuring session as versioned JSON.

File layout (``"format": "zline-session"``, ``"version": 1``)::

    {
      "format": "zline-session",
      "version": 1,
      "locks":    [ {"label": ..., "rest": {"value": 6564.61, "unit": "Angstrom"}, ...}, ... ],
      "fits":     [ {plain dict of a LineFit}, ... ]   or  {label: {...}, ...},
      "z":        null | number | {plain dict of a RedshiftSolution},
      "settings": { any JSON values; Quantities as {"quantity": value, "unit": "..."} },
      "spectrum": null | "path or description"
    }

The file is plain JSON: no pickle, no code is ever evaluated.  Writing is atomic (a temporary file
in the same folder, then a rename) and never replaces an existing file unless ``overwrite=True``
*and* that file is a zline session itself (anything else is refused whatever ``overwrite`` says).

A session of uploaded data records the upload in ``settings``: ``source_name`` (the upload's file
name) and ``source_sha256`` (the SHA-256 of its bytes; `source_settings` makes both).
`check_source` compares the file a restore re-opens with that digest and refuses another file.
"""

from __future__ import annotations

import json
import math
import os
from pathlib import Path

import astropy.units as u
import numpy as np

from zline.physics.fitting import LineFit
from zline.physics.identify import Identifications, Lock, RedshiftSolution

__all__ = ["save_session", "load_session", "SessionFormatError", "SessionSourceError",
           "SESSION_FORMAT", "SESSION_VERSION", "SESSION_KEYS", "SOURCE_KEYS", "source_settings",
           "check_source"]

SESSION_FORMAT = "zline-session"
SESSION_VERSION = 1
SESSION_KEYS = {
    "locks": "list of Lock (or their dicts), or an Identifications",
    "fits": "list or {label: ...} dict of LineFit (or their dicts)",
    "z": "None, a number, a RedshiftSolution or its dict",
    "settings": "dict of JSON values and Quantities",
    "spectrum": "None or a string naming the spectrum",
}


#: Settings keys that identify the data a session was saved on.
SOURCE_KEYS = ("source_name", "source_sha256")


class SessionFormatError(ValueError):
    """A session file that cannot be read: names the file, the key, what was expected and found."""


class SessionSourceError(ValueError):
    """The spectrum a session is re-opened on is not the one it was saved on."""


# --------------------------------------------------------------------------------------------
# encoding


def _encode(value, where):
    if isinstance(value, u.Quantity):
        v = value.value
        return {"quantity": v.tolist() if np.ndim(v) else _num(float(v)),
                "unit": value.unit.to_string()}
    if isinstance(value, (LineFit, Lock, RedshiftSolution)):
        return _encode(value.to_dict(), where)
    if isinstance(value, dict):
        out = {}
        for k, v in value.items():
            if not isinstance(k, str):
                raise TypeError(f"save_session: key {k!r} in {where} must be a string")
            out[k] = _encode(v, f"{where}.{k}")
        return out
    if isinstance(value, (list, tuple)):
        return [_encode(v, f"{where}[{i}]") for i, v in enumerate(value)]
    if isinstance(value, np.ndarray):
        return _encode(value.tolist(), where)
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return _num(float(value))
    if value is None or isinstance(value, str):
        return value
    raise TypeError(f"save_session: {where} holds a {type(value).__name__}, which cannot be "
                    f"stored; expected JSON values, Quantities, Locks, LineFits or solutions")


def _num(x):
    return x if math.isfinite(x) else None


def _encode_state(state):
    if not isinstance(state, dict):
        raise TypeError(f"save_session: 'state' must be a dict, got {type(state).__name__}")
    unknown = sorted(set(state) - set(SESSION_KEYS))
    if unknown:
        raise ValueError(f"save_session: unknown state keys {unknown}; expected some of: "
                         f"{', '.join(sorted(SESSION_KEYS))}")
    doc = {"format": SESSION_FORMAT, "version": SESSION_VERSION}
    locks = state.get("locks", [])
    if isinstance(locks, Identifications):
        locks = list(locks)
    doc["locks"] = [_encode(lock, f"locks[{i}]") for i, lock in enumerate(locks)]
    doc["fits"] = _encode(state.get("fits", []), "fits")
    doc["z"] = _encode(state.get("z"), "z")
    settings = state.get("settings", {})
    if not isinstance(settings, dict):
        raise TypeError(f"save_session: 'settings' must be a dict, got {type(settings).__name__}")
    doc["settings"] = _encode(settings, "settings")
    spectrum = state.get("spectrum")
    if spectrum is not None and not isinstance(spectrum, (str, os.PathLike)):
        raise TypeError(f"save_session: 'spectrum' must be None or a string, got "
                        f"{type(spectrum).__name__}")
    doc["spectrum"] = None if spectrum is None else os.fspath(spectrum)
    return doc


def save_session(path, state: dict, overwrite: bool = False) -> Path:
    """Write a session file.

    Parameters
    ----------
    path : str or path-like
        Destination (conventionally ``*.json``).
    state : dict
        Keys from `SESSION_KEYS`: ``locks``, ``fits``, ``z``, ``settings``, ``spectrum``.
    overwrite : bool
        Replace an existing file.

    Returns
    -------
    pathlib.Path
        The path written.

    Raises
    ------
    FileExistsError
        ``path`` exists and ``overwrite`` is False.
    zline.physics._atomic.NotZlineFileError
        ``path`` exists and is not a zline session (never replaced; a `FileExistsError` too).
    TypeError, ValueError
        ``state`` holds something that cannot be stored.
    """
    path = Path(path)
    doc = _encode_state(state)
    _check_source_settings(doc["settings"], "save_session", "state['settings']")
    text = json.dumps(doc, indent=2, allow_nan=False) + "\n"
    if path.exists() and not overwrite:
        raise FileExistsError(f"save_session: {str(path)!r} exists; pass overwrite=True to "
                              f"replace it")
    from zline.physics._atomic import atomic_path

    exists = f"save_session: {str(path)!r} exists; pass overwrite=True to replace it"
    with atomic_path(path, overwrite=overwrite, exists_message=exists, fsync=True,
                     kind="session") as tmp:
        with open(tmp, "w", encoding="utf-8") as fh:
            fh.write(text)
    return path


# --------------------------------------------------------------------------------------------
# decoding


def _fail(path, key, expected, found):
    shown = repr(found)
    if len(shown) > 80:
        shown = shown[:77] + "..."
    raise SessionFormatError(f"session file {str(path)!r}: key {key!r}: expected {expected}, "
                             f"found {shown}")


def _decode(value, path, key):
    if isinstance(value, dict):
        if set(value) == {"quantity", "unit"}:
            try:
                unit = u.Unit(value["unit"])
            except (ValueError, TypeError):
                _fail(path, f"{key}.unit", "a unit string", value["unit"])
            q = value["quantity"]
            if q is None:
                q = float("nan")
            elif isinstance(q, list):
                q = [float("nan") if x is None else x for x in q]
            try:
                return u.Quantity(q, unit)
            except (TypeError, ValueError):
                _fail(path, f"{key}.quantity", "a number or a list of numbers", value["quantity"])
        return {k: _decode(v, path, f"{key}.{k}") for k, v in value.items()}
    if isinstance(value, list):
        return [_decode(v, path, f"{key}[{i}]") for i, v in enumerate(value)]
    return value


def load_session(path) -> dict:
    """Read a session file written by `save_session`.

    Parameters
    ----------
    path : str or path-like

    Returns
    -------
    dict
        ``format``, ``version``, ``locks`` (list of `~zline.physics.identify.Lock`), ``fits``
        (plain dicts with unit strings), ``z`` (None, a number or a plain dict), ``settings``
        (Quantities restored), ``spectrum``.

    Raises
    ------
    FileNotFoundError
        No such file.
    SessionFormatError
        Not JSON, not a zline session, an unsupported version, or a key of the wrong kind.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise FileNotFoundError(f"load_session: no session file {str(path)!r}") from None
    except UnicodeDecodeError as exc:
        raise SessionFormatError(f"session file {str(path)!r}: not UTF-8 text ({exc.reason} at "
                                 f"byte {exc.start}); expected a JSON session") from None
    try:
        doc = json.loads(text)
    except json.JSONDecodeError as exc:
        raise SessionFormatError(f"session file {str(path)!r}: not valid JSON ({exc.msg} at "
                                 f"line {exc.lineno}, column {exc.colno})") from None
    if not isinstance(doc, dict):
        _fail(path, "(top level)", "a JSON object", type(doc).__name__)
    if doc.get("format") != SESSION_FORMAT:
        _fail(path, "format", repr(SESSION_FORMAT), doc.get("format"))
    version = doc.get("version")
    if not isinstance(version, int) or isinstance(version, bool):
        _fail(path, "version", "an integer", version)
    if version > SESSION_VERSION:
        _fail(path, "version", f"at most {SESSION_VERSION} (this zline); the file was written "
              f"by a newer zline", version)
    if version < 1:
        _fail(path, "version", "a version >= 1", version)
    allowed = set(SESSION_KEYS) | {"format", "version"}
    extra = sorted(set(doc) - allowed)
    if extra:
        _fail(path, extra[0], f"only the keys {sorted(allowed)}", extra[0])

    locks_raw = doc.get("locks", [])
    if not isinstance(locks_raw, list):
        _fail(path, "locks", "a list of lock objects", locks_raw)
    locks = []
    for i, item in enumerate(locks_raw):
        if not isinstance(item, dict):
            _fail(path, f"locks[{i}]", "an object", item)
        for k in ("rest", "observed", "observed_err"):
            q = item.get(k)
            if not (isinstance(q, dict) and isinstance(q.get("value"), (int, float))
                    and not isinstance(q.get("value"), bool) and isinstance(q.get("unit"), str)):
                _fail(path, f"locks[{i}].{k}", "{'value': number, 'unit': string}", q)
        try:
            locks.append(Lock.from_dict(item))
        except (ValueError, TypeError, u.UnitsError) as exc:
            raise SessionFormatError(f"session file {str(path)!r}: key 'locks[{i}]': "
                                     f"{exc}") from None

    fits = doc.get("fits", [])
    if not isinstance(fits, (list, dict)):
        _fail(path, "fits", "a list or an object", fits)
    z = doc.get("z")
    if z is not None and not isinstance(z, (int, float, dict)) or isinstance(z, bool):
        _fail(path, "z", "null, a number or an object", z)
    settings = doc.get("settings", {})
    if not isinstance(settings, dict):
        _fail(path, "settings", "an object", settings)
    spectrum = doc.get("spectrum")
    if spectrum is not None and not isinstance(spectrum, str):
        _fail(path, "spectrum", "null or a string", spectrum)
    try:
        _check_source_settings(settings, f"session file {str(path)!r}", "key 'settings")
    except ValueError as exc:
        raise SessionFormatError(str(exc)) from None
    return {"format": SESSION_FORMAT, "version": version, "locks": locks,
            "fits": _decode(fits, path, "fits"), "z": _decode(z, path, "z"),
            "settings": _decode(settings, path, "settings"), "spectrum": spectrum}


# --------------------------------------------------------------------------------------------
# the data a session belongs to


def _check_source_settings(settings, who, where):
    name, digest = settings.get("source_name"), settings.get("source_sha256")
    if name is not None and not isinstance(name, str):
        raise ValueError(f"{who}: {where}.source_name': expected the upload's file name (a "
                         f"string), found {name!r}")
    if digest is not None and not (isinstance(digest, str) and len(digest) == 64
                                   and all(c in "0123456789abcdef" for c in digest)):
        raise ValueError(f"{who}: {where}.source_sha256': expected 64 lower-case hex digits "
                         f"(a SHA-256), found {str(digest)[:80]!r}")


def source_settings(data, name=None):
    """The settings entries that tie a session to its data: ``source_name``, ``source_sha256``.

    Parameters
    ----------
    data : bytes, str or path-like
        The uploaded bytes, or a file.
    name : str, optional
        The name to record (default: the file's base name; required for bytes).

    Examples
    --------
    >>> s = source_settings(b"SIMPLE  =", name="galaxy.fits")
    >>> s["source_name"], s["source_sha256"][:12]
    ('galaxy.fits', '5dc2ad957f14')
    """
    from zline.physics._atomic import file_sha256

    if isinstance(data, (bytes, bytearray, memoryview)):
        if not name:
            raise ValueError("source_settings: bytes need name=... (the upload's file name)")
        return {"source_name": str(name), "source_sha256": file_sha256(bytes(data))}
    return {"source_name": str(name) if name else os.path.basename(os.fspath(data)),
            "source_sha256": file_sha256(data)}


def check_source(doc, data, session=None):
    """Refuse to re-open a session on data other than the data it was saved on.

    Parameters
    ----------
    doc : dict
        A session read by `load_session` (or its ``settings`` dict).
    data : bytes, str or path-like
        What the restore is about to open: the file, or the bytes of an upload.
    session : str or path-like, optional
        The session file, named in the message.

    Raises
    ------
    SessionSourceError
        The session records a ``source_sha256`` and ``data`` has another SHA-256.
    FileNotFoundError
        ``data`` names no file.

    A session without ``source_sha256`` (saved by an older zline) is not checked.
    """
    from zline.physics._atomic import file_sha256

    settings = doc.get("settings", doc) if isinstance(doc, dict) else {}
    expected = settings.get("source_sha256") if isinstance(settings, dict) else None
    if not expected:
        return
    if isinstance(data, (bytes, bytearray, memoryview)):
        actual, what = file_sha256(bytes(data)), "the data given"
    else:
        path = os.fspath(data)
        if not os.path.isfile(path):
            raise FileNotFoundError(f"restore: the spectrum file {path!r} of the session does not "
                                    f"exist; pass the data it was saved on")
        actual, what = file_sha256(path), repr(path)
    if actual != expected:
        saved = settings.get("source_name") or "its data"
        where = f"session {os.fspath(session)!r}" if session is not None else "the session"
        raise SessionSourceError(
            f"{where} was saved on {saved!r} (SHA-256 {expected[:12]}...), but {what} has SHA-256 "
            f"{actual[:12]}...: a different file; its locks would land on the wrong data. Open the "
            f"file the session was saved on")
