"""Atomic file writes that never replace a file zline did not write.

`atomic_path` yields a temporary path beside the target; on success the file is published in one
step, so a reader never sees a half-written file and a failed write leaves nothing behind.

An existing target is replaced only when both hold:

* the caller asks (``overwrite=True``), and
* the file on disk is a zline file of the same kind (`KINDS`), recognised from its content by
  `zline_kind`: a session's ``"format": "zline-session"``, a table whose meta says zline wrote
  it, a batch catalogue beside its ``.parts`` folder, a demo spectrum's ``ORIGIN`` card ...

Anything else (a spectrum, somebody's ECSV, a notebook) is refused with `NotZlineFileError`,
whatever ``overwrite`` says.  Without ``overwrite`` publishing is create-only (a hard link, which
fails if the name appeared meanwhile).
"""

import contextlib
import hashlib
import json
import os
import re
import tempfile

__all__ = ["atomic_path", "file_sha256", "zline_kind", "describe_file", "NotZlineFileError", "KINDS",
           "check_replaceable", "TABLE_MARKER", "LATEX_MARKER", "CSV_HEADER"]

#: Kinds of file zline writes -> what they are called in messages.
KINDS = {
    "session": "a zline session (JSON)",
    "line-table": "a zline line table",
    "catalog": "a zline batch catalogue (ECSV beside its .parts folder)",
    "measure-output": "a zline measure result (text or JSON)",
    "demo-spectrum": "a zline demo spectrum (FITS)",
    "batch-record": "a zline batch record (JSON in CATALOG.parts)",
    "corrections": "a zline correction log (JSON in CATALOG.parts)",
}

#: Meta key (ECSV) / header keyword (FITS) that names the kind of a table zline wrote.
TABLE_MARKER = "zline_file"

#: First line of every LaTeX/AASTeX table zline writes (a TeX comment).
LATEX_MARKER = "% zline line table"

#: Leading columns of a zline line table written as CSV.
CSV_HEADER = "label,species,rest,observed,observed_err,"

_HEAD = 1 << 16  # bytes read to recognise a text file
_RECORD_NAME = re.compile(r"[0-9a-f]{32}\.json")
_JSON_MAX = 64 << 20  # larger JSON files are not read whole


class NotZlineFileError(FileExistsError):
    """The target exists and is not a zline file of the kind being written: never replaced."""


def file_sha256(source):
    """SHA-256 hex digest of a file (read in 1 MiB blocks) or of ``bytes``."""
    h = hashlib.sha256()
    if isinstance(source, (bytes, bytearray, memoryview)):
        h.update(source)
        return h.hexdigest()
    with open(source, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def _umask():
    mask = os.umask(0)
    os.umask(mask)
    return mask


def _head(path, n=_HEAD):
    try:
        with open(path, "rb") as fh:
            return fh.read(n)
    except OSError:
        return b""


def _json(path):
    try:
        if os.path.getsize(path) > _JSON_MAX:
            return None
        with open(path, encoding="utf-8") as fh:
            return json.load(fh)
    except (OSError, ValueError):
        return None


def _ecsv_meta(path):
    """The ``meta`` mapping of an ECSV file's header ({} if unreadable)."""
    lines = []
    try:
        with open(path, encoding="utf-8", errors="replace") as fh:
            for i, line in enumerate(fh):
                if not line.startswith("#") or i > 1_000_000:
                    break
                if i:
                    lines.append(line[2:] if line.startswith("# ") else line[1:])
    except OSError:
        return {}
    import yaml  # noqa: PLC0415 - astropy's own dependency; only needed here

    class _Loader(yaml.SafeLoader):
        pass

    # astropy's own tags (units, arrays) are not needed to recognise the file
    _Loader.add_multi_constructor("!", lambda loader, suffix, node: None)
    try:
        header = yaml.load("".join(lines), Loader=_Loader)  # noqa: S506 - safe loader subclass
    except yaml.YAMLError:
        return {}
    meta = header.get("meta") if isinstance(header, dict) else None
    if isinstance(meta, list):  # !!omap comes back as a list of pairs
        meta = dict(meta)
    return meta if isinstance(meta, dict) else {}


def _fits_cards(path):
    """Primary and first-extension headers as dicts (None if not FITS)."""
    if not _head(path, 9).startswith(b"SIMPLE  ="):
        return None
    from astropy.io import fits  # noqa: PLC0415

    cards = []
    try:
        with fits.open(path, memmap=False, lazy_load_hdus=True) as hdul:
            for i in range(2):
                try:
                    cards.append({k.upper(): v for k, v in hdul[i].header.items()})
                except IndexError:
                    break
    except Exception:  # noqa: BLE001 - a damaged FITS file is simply not recognised
        return []
    return cards


def zline_kind(path):
    """The kind (a key of `KINDS`) of a file zline wrote, recognised from its content; else None.

    Parameters
    ----------
    path : str or path-like
        An existing file.
    """
    path = os.fspath(path)
    if not os.path.isfile(path):
        return None
    if _RECORD_NAME.fullmatch(os.path.basename(path)) \
            and os.path.dirname(os.path.abspath(path)).endswith(".parts"):
        return "batch-record"  # named by its key in a folder only zline writes (even if damaged)
    head = _head(path)
    stripped = head.lstrip()
    if head.startswith(b"SIMPLE  ="):
        cards = _fits_cards(path) or []
        if any(str(hdr.get("ORIGIN", "")) == "zline demo-data" for hdr in cards):
            return "demo-spectrum"
        for hdr in cards[1:]:
            marker = hdr.get(TABLE_MARKER.upper())
            if marker == "line-table" or (marker is None and "ZLINE_VERSION" in hdr
                                          and "CONSTANTS" in hdr):
                return "line-table"
        return None
    if head.startswith(b"# %ECSV"):
        meta = _ecsv_meta(path)
        if "zline_batch" in meta:
            return "catalog" if os.path.isdir(path + ".parts") else None
        if meta.get(TABLE_MARKER) == "line-table" or ("zline_version" in meta
                                                      and "constants" in meta):
            return "line-table"
        return None
    if head.startswith(LATEX_MARKER.encode()):
        return "line-table"
    if head.startswith(CSV_HEADER.encode()):
        return "line-table"
    if head.startswith(b"line set    ") and b"\nconvention  " in head:
        return "measure-output"
    if stripped[:1] in (b"{", b"["):
        doc = _json(path)
        if isinstance(doc, dict):
            if doc.get("format") == "zline-session":
                return "session"
            if {"z", "z_err", "line_set", "convention", "lines"} <= set(doc):
                return "measure-output"
            if {"file", "flags", "error"} <= set(doc):
                return "batch-record"
        if isinstance(doc, list) and all(isinstance(c, dict) and {"file", "z", "who"} <= set(c)
                                         for c in doc):
            return "corrections"
    return None


def describe_file(path):
    """A few words on what an existing file is, for messages ("a FITS file", "JSON" ...)."""
    path = os.fspath(path)
    if os.path.isdir(path):
        return "a directory"
    kind = zline_kind(path)
    if kind is not None:
        return KINDS[kind]
    head = _head(path, 4096)
    if head.startswith(b"SIMPLE  ="):
        return "a FITS file zline did not write"
    if head.startswith(b"# %ECSV"):
        if "zline_batch" in _ecsv_meta(path):
            return "a zline batch catalogue whose .parts folder is gone (remove it or choose " \
                   "another name)"
        return "an ECSV table zline did not write"
    if head.lstrip()[:1] in (b"{", b"["):
        return "a JSON or other text file zline did not write"
    if not head:
        return "an empty file"
    return "a file zline did not write"


def _refuse(path, kind):
    return NotZlineFileError(
        f"{path!r} exists and is {describe_file(path)}, not {KINDS[kind]}; zline replaces only "
        f"its own files of the same kind: choose another name")


def check_replaceable(path, kind):
    """Raise `NotZlineFileError` unless ``path`` is missing or a zline file of ``kind``."""
    path = os.fspath(path)
    if kind not in KINDS:
        raise ValueError(f"atomic_path: unknown kind {kind!r}; options: {', '.join(sorted(KINDS))}")
    if os.path.lexists(path) and (os.path.islink(path) or zline_kind(path) != kind):
        raise _refuse(path, kind)


@contextlib.contextmanager
def atomic_path(path, overwrite=False, exists_message=None, fsync=False, kind=None):
    """Context manager yielding a temporary path to write; on success it becomes ``path``.

    Parameters
    ----------
    path : str or path-like
        Final file name.
    overwrite : bool
        Replace an existing ``path`` -- only if it is a zline file of ``kind``.  When False an
        existing file raises `FileExistsError`.
    exists_message : str, optional
        Message of that `FileExistsError` (default names the file and ``overwrite=True``).
    fsync : bool
        Flush the written data to disk before publishing.
    kind : str
        What is written, a key of `KINDS`; required with ``overwrite=True``.

    Raises
    ------
    FileExistsError
        ``path`` exists and ``overwrite`` is False.
    NotZlineFileError
        ``path`` exists and is not a zline file of ``kind`` (a `FileExistsError` too); checked
        before anything is written and again just before publishing.
    """
    path = os.fspath(path)
    if overwrite:
        if kind is None:
            raise TypeError("atomic_path: overwrite=True needs kind=...; zline replaces only its "
                            "own files of the same kind")
        check_replaceable(path, kind)
    elif kind is not None and kind not in KINDS:
        raise ValueError(f"atomic_path: unknown kind {kind!r}; options: {', '.join(sorted(KINDS))}")
    message = exists_message or f"{path!r} exists; pass overwrite=True to replace it"
    if not overwrite and os.path.lexists(path):
        raise FileExistsError(message)
    directory = os.path.dirname(os.path.abspath(path))
    fd, tmp = tempfile.mkstemp(prefix=f".{os.path.basename(path)}.", suffix=".tmp", dir=directory)
    os.close(fd)
    try:
        yield tmp
        os.chmod(tmp, 0o666 & ~_umask())  # an ordinary file's permissions, not mkstemp's 0600
        if fsync:
            with open(tmp, "rb+") as fh:
                os.fsync(fh.fileno())
        if overwrite:
            check_replaceable(path, kind)  # the name may have been taken meanwhile
            os.replace(tmp, path)
        else:
            try:
                os.link(tmp, path)
            except FileExistsError:
                raise FileExistsError(message) from None
            except OSError:  # file systems without hard links
                if os.path.lexists(path):
                    raise FileExistsError(message) from None
                os.replace(tmp, path)
    finally:
        if os.path.exists(tmp):
            os.unlink(tmp)
