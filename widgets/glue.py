"""Session, table, catalogue and scan glue of the line identifier: calls into zline.physics.

`ConfirmStep` is the
one rule every writing button follows (an existing file is replaced only on a second press).
"""

import os
import time

import astropy.units as u
import numpy as np
from astropy.table import Table

from zline.physics import batch, session, tables
from zline.physics._atomic import NotZlineFileError
from zline.physics.kinematics import velocity_from
from zline.physics.scan_kinds import KIND_SETS

__all__ = ["ConfirmStep", "save", "export", "restore_into", "catalog_entry",
           "write_to_catalog", "CONFIRM_SECONDS"]

_KMS = u.km / u.s
CONFIRM_SECONDS = 6.0


class ConfirmStep:
    """Two presses to replace a file: the first arms, a second within ``seconds`` confirms.

    ``clock`` returns seconds (monotonic); tests may pass their own.
    """

    def __init__(self, seconds=CONFIRM_SECONDS, clock=time.monotonic):
        self.seconds, self.clock = float(seconds), clock
        self._armed = None

    def confirmed(self, key):
        """True when ``key`` was armed less than ``seconds`` ago (and disarm); else arm it."""
        now = self.clock()
        if self._armed is not None and self._armed[0] == key and now - self._armed[1] <= self.seconds:
            self._armed = None
            return True
        self._armed = (key, now)
        return False


def session_state(w):
    """The dict `zline.physics.session.save_session` stores for widget ``w``."""
    fits = [e.lock.fit if e.lock.fit is not None else e.fit_record for e in w._book]
    lo, hi = w.plot.view_range()
    settings = {"z": w.z, "velocity": w.velocity * _KMS, "convention": w.convention,
                "medium": w._medium, "line_set": w._set_name, "mode": w.mode,
                "view": [lo, hi] * w._xunit}
    if w._source_sha256 is not None:  # an upload: its name and digest, never a path
        settings["source_name"] = w._source_name
        settings["source_sha256"] = w._source_sha256
        source = None
    else:
        source = w._source_path
        if source is not None:  # the file's digest, so a restore re-opens the same data
            settings.update(session.source_settings(source))
    return {"locks": list(w.locks), "fits": fits,
            "z": w._solution if w._solution is not None else w.z,
            "settings": settings, "spectrum": source}


def _say_refused(w, exc, exists_text):
    """Show why a write was refused: a file zline did not write is never replaced, so offering
    overwrite=True would mislead; say the writer's own reason instead."""
    w._say(str(exc) if isinstance(exc, NotZlineFileError) else exists_text, level="error")


def save(w, path, overwrite=False):
    try:
        written = session.save_session(path, session_state(w), overwrite=overwrite)
    except FileExistsError as exc:
        _say_refused(w, exc, f"{os.fspath(path)} exists already; nothing was written (pass "
                             f"overwrite=True to replace it)")
        raise
    w._say(f"saved {len(w._book)} lock(s) to {written}")
    return written


def export(w, path, format="ecsv", overwrite=False):
    if format not in tables.TABLE_FORMATS:
        raise ValueError(f"export: unknown format {format!r}; options: {sorted(tables.TABLE_FORMATS)}")
    if not len(w._book):
        raise ValueError("export: lock at least one line first; the table has one row per lock")
    target = os.fspath(path)
    table = tables.line_table_for_paper(list(w.locks), solution=w._solution, spectrum=w.spectrum,
                                        settings={"medium": w._medium, "convention": w.convention})
    table.meta.setdefault("line_set", w._set_name)
    try:
        written = tables.write_table(table, target, format=format, overwrite=overwrite)
    except FileExistsError as exc:
        _say_refused(w, exc, f"{target} exists already; nothing was written. Choose another file "
                             f"name (or pass overwrite=True).")
        raise
    w._say(f"wrote {len(table)} line(s) as {format} to {written}")
    return written


def write_with_confirm(w, confirm, path, write, what):
    """Button rule: write; if the file exists, say so and replace it only on a second press."""
    target = os.path.abspath(os.fspath(path))
    if not os.path.exists(target):
        return write(overwrite=False)
    if confirm.confirmed((what, target)):
        return write(overwrite=True)
    w._say(f"{path} exists — press '{what}' again within {confirm.seconds:.0f} s to replace it; "
           f"nothing was written", level="warning")
    return None


def restore_into(w, doc):
    """Put the locks, view and mode of a loaded session document into a new widget."""
    from .state import MODES, Entry
    fits = doc.get("fits") or []
    if isinstance(fits, dict):
        fits = [fits.get(lock.label) for lock in doc["locks"]]
    entries = []
    for k, lock in enumerate(doc["locks"]):
        hits = np.flatnonzero(w._labels == lock.label)
        strength = float(w._strength[hits[0]]) if hits.size else 0.0
        record = fits[k] if k < len(fits) and isinstance(fits[k], dict) else None
        entries.append(Entry(lock, strength, "", record))
    w._book.entries = entries
    settings = doc.get("settings") or {}
    view = settings.get("view")
    if isinstance(view, u.Quantity) and view.size == 2:
        lo, hi = view.to_value(w._xunit, equivalencies=u.spectral())
        with w.plot.xs.hold_trait_notifications():
            w.plot.xs.min, w.plot.xs.max = float(lo), float(hi)
    if settings.get("mode") in MODES:
        w.mode = settings["mode"]
    if settings.get("source_sha256") and w._source_path is None:  # restored from upload bytes
        w._source_name = settings.get("source_name", w._source_name)
        w._source_sha256 = settings["source_sha256"]
    w._locks_changed()


def catalog_entry(catalog, row, lines):
    """(file, z, line set, row number) of a catalogue row, z = the checked value if any."""
    entry = batch.catalog_row(catalog, row)
    z = entry.get("z_checked")
    if z is None or not np.isfinite(z):
        z = entry["z"]
    if not np.isfinite(z):
        z = 0.0  # a row without a candidate (e.g. a bad file): open at rest
    if lines is None:  # the set the batch searched, else the one of the kind the row reads
        meta = Table.read(os.fspath(catalog), format="ascii.ecsv").meta.get("zline_batch", {})
        lines = meta.get("lines") or KIND_SETS.get(str(entry.get("class") or ""))
    return entry["file"], float(z), lines, entry["row"]


def write_to_catalog(w, catalog=None, who=None, note=""):
    opened = getattr(w, "_catalog", None)
    if catalog is None and opened is None:
        raise ValueError("write_to_catalog: this widget was not opened with from_catalog; "
                         "pass catalog=<path of the ECSV catalogue>")
    catalog = os.fspath(catalog) if catalog is not None else opened[0]
    file = opened[1] if opened is not None else w._source_name
    z, z_err = float(w.z), None
    if w._solution is not None and np.isclose(float(w._solution.z), z, rtol=0, atol=1e-12):
        z_err = float(w._solution.z_err)
    try:
        done = batch.record_correction(catalog, file, z, z_err, who=who, note=note)
    except (ValueError, KeyError, IndexError, OSError) as exc:
        w._say(f"could not write to the catalogue: {exc}", level="error")
        raise
    w._say(f"wrote z = {z:.6f} to {os.path.basename(catalog)} (by {done['who']})")
    return done


_FIT_COLUMNS = ("flux", "fwhm", "fwhm_kms", "ew", "snr")


def residuals(w):
    """Velocity of each lock relative to the current z and velocity (km/s)."""
    if not len(w._book):
        return np.zeros(0) * _KMS
    observed = u.Quantity([e.lock.observed.to(w._xunit, equivalencies=u.spectral()) for e in w._book])
    rest = u.Quantity([e.lock.rest.to(w._xunit, equivalencies=u.spectral()) for e in w._book])
    v = velocity_from(observed, rest, convention=w.convention, z=w.z)
    return (v - w.velocity * _KMS).to(_KMS)


def has_fit(entry):
    return entry.lock.fit is not None or bool(entry.fit_record)


def _fit_value(entry, attr):
    if entry.lock.fit is not None:
        return getattr(entry.lock.fit, attr, None)
    item = (entry.fit_record or {}).get(attr)
    if isinstance(item, dict) and "value" in item and "unit" in item:
        return u.Quantity(item["value"], u.Unit(item["unit"]))
    return item if isinstance(item, (int, float)) else None


def lock_table(w):
    """The QTable of `LineIdentifier.table`."""
    from astropy.table import QTable
    t = QTable()
    xu, entries = w._xunit, list(w._book)
    n = len(entries)
    t["label"] = [e.lock.label for e in entries] if n else np.zeros(0, dtype=str)
    t["species"] = [e.lock.species for e in entries] if n else np.zeros(0, dtype=str)
    for name in ("rest", "observed", "observed_err"):
        t[name] = u.Quantity([getattr(e.lock, name).to(xu, equivalencies=u.spectral())
                              for e in entries]) if n else np.zeros(0) * xu
    t["residual_kms"] = residuals(w)
    t["fitted"] = np.array([has_fit(e) for e in entries], dtype=bool)
    for name in _FIT_COLUMNS:
        for suffix in ("", "_err"):
            attr = name + suffix
            values = [_fit_value(e, attr) for e in entries]
            unit = next((v.unit for v in values if isinstance(v, u.Quantity)), None)
            if all(v is None for v in values) and name == "snr" and suffix:
                continue
            col = [np.nan if v is None else (v.to_value(unit) if isinstance(v, u.Quantity) else float(v))
                   for v in values]
            t["fit_" + attr] = np.array(col, dtype=float) * (unit if unit is not None else 1)
    t["note"] = [e.lock.note for e in entries] if n else np.zeros(0, dtype=str)
    t.meta.update(z=w.z, velocity=w.velocity * _KMS, convention=w.convention, medium=w._medium,
                  line_set=w._set_name, file=w._source_name)
    if w._solution is not None:
        t.meta.update(z_err=float(w._solution.z_err), chi2_dof=float(w._solution.chi2_dof))
    return t


class SessionMixin:
    """Scan, files, sessions and the survey catalogue for `LineIdentifier`."""

    def export(self, path, format="ecsv", overwrite=False):
        """Write the line table of the locks for a paper (`zline.physics.tables`).

        An existing file is left alone unless ``overwrite=True`` (FileExistsError, also shown in
        the status area). Returns the path written.
        """
        return export(self, path, format=format, overwrite=overwrite)

    def save(self, path, overwrite=False):
        """Save the session (locks with their fits, z or the solution, settings, spectrum path,
        and for an upload its file name and SHA-256). Returns the path written."""
        return save(self, path, overwrite=overwrite)

    @classmethod
    def restore(cls, path, spectrum=None, lines=None, **kwargs):
        """Re-open a session saved with `save` (``spectrum=`` for an upload, ``lines=`` for a
        custom line table); ``kwargs`` go to `LineIdentifier`."""
        doc = session.load_session(path)
        settings = doc.get("settings") or {}
        source = spectrum if spectrum is not None else doc.get("spectrum")
        if source is None:
            if settings.get("source_sha256"):
                raise ValueError(
                    f"restore: the session {os.fspath(path)!r} was saved on the uploaded file "
                    f"{settings.get('source_name')!r} (SHA-256 {settings['source_sha256'][:12]}...); "
                    f"pass spectrum=<that file or its bytes>")
            raise ValueError(f"restore: the session {os.fspath(path)!r} names no spectrum file; pass spectrum=...")
        if isinstance(source, (bytes, bytearray, memoryview, str, os.PathLike)):
            session.check_source(doc, source, session=path)  # refuses other data than was saved
        line_set = lines if lines is not None else settings.get("line_set", "galaxy-emission")
        if isinstance(line_set, str) and line_set == "custom":
            raise ValueError(f"restore: the session {os.fspath(path)!r} used a custom line table; "
                             f"pass lines=<that table>")
        kwargs.setdefault("medium", settings.get("medium"))
        w = cls(source, lines=line_set, z=float(settings.get("z", 0.0)),
                velocity=settings.get("velocity", 0.0 * _KMS),
                convention=settings.get("convention", "optical"), **kwargs)
        restore_into(w, doc)
        w._say(f"restored {len(w._book)} lock(s) from {os.fspath(path)}")
        return w

    @classmethod
    def from_catalog(cls, catalog, row, lines=None, **kwargs):
        """Open one spectrum of a ``zline batch`` catalogue (row index or file) at its z."""
        file, z, lines, number = catalog_entry(catalog, row, lines)
        w = cls(file, lines=lines, z=z, **kwargs)
        w._catalog = (os.fspath(catalog), file)
        w._say(f"opened row {number} of {os.path.basename(os.fspath(catalog))} at z = {z:.6f}")
        return w

    def write_to_catalog(self, catalog=None, who=None, note=""):
        """Write the solved z back beside the catalogue's blind z (`zline.physics.batch.record_correction`).

        Without a solution the overlay's z is written with no error. Returns the correction.
        """
        return write_to_catalog(self, catalog, who=who, note=note)

    def _on_export_format(self, change):
        stem, ext = os.path.splitext(self.ui.export_path.value)
        new = {"latex": ".tex", "aastex": ".tex"}.get(change["new"], "." + str(change["new"]))
        if ext.lower() in (".ecsv", ".fits", ".csv", ".tex"):
            self.ui.export_path.value = stem + new

    def _on_upload(self, change):
        files = change["new"]
        if not files:
            return
        f = files[0]
        try:
            self.load(bytes(f["content"]), name=f.get("name", "upload"))
        except Exception:    # noqa: BLE001 - load() already put the reason in the status area
            return
