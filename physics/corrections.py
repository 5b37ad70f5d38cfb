"""Checked redshifts written back to a survey catalogue beside the blind ones.

`record_correction` appends a checked z (who, when, note) to ``<catalog>.parts/corrections.json``
under the catalogue's lock and rewrites the catalogue with `CORRECTION_COLUMNS`; the blind ``z``
is never changed, and a rerun of the batch keeps the corrections.  `catalog_row` reads one row.
"""

import json
import os

import numpy as np

from zline.physics._survey import catalog_lock

__all__ = ["CORRECTION_COLUMNS", "catalog_row", "record_correction"]

#: Columns a checked redshift adds to a catalogue row; the blind ``z`` is never changed.
CORRECTION_COLUMNS = ("z_checked", "z_checked_err", "checked_by", "checked_at", "check_note")


def parts_directory(catalog):
    """The folder of per-spectrum records of ``catalog``: ``<catalog>.parts``."""
    return os.fspath(catalog) + ".parts"


def _write_json_atomic(path, obj, kind="batch-record"):
    from zline.physics._atomic import atomic_path  # noqa: PLC0415

    with atomic_path(path, overwrite=True, kind=kind) as tmp, open(tmp, "w") as fh:
        json.dump(obj, fh)  # no fsync: after a power cut an empty record is re-measured


def _corrections_path(catalog):
    return os.path.join(parts_directory(catalog), "corrections.json")


def _load_corrections(catalog):
    path = _corrections_path(catalog)
    if not os.path.exists(path):
        return []
    try:
        with open(path) as fh:
            data = json.load(fh)
    except (OSError, ValueError) as exc:
        raise ValueError(f"{path}: the correction log is not readable JSON ({exc}); it holds the "
                         f"checked redshifts of this catalogue: repair or move it") from None
    if not isinstance(data, list):
        raise ValueError(f"{path}: expected a JSON list of corrections, found {type(data).__name__}")
    return data


def _merge_corrections(table, corrections):
    """Add the correction columns (latest correction per file wins); history goes to the meta."""
    n = len(table)
    defaults = {"z_checked": np.full(n, np.nan), "z_checked_err": np.full(n, np.nan),
                "checked_by": np.full(n, "", dtype=object), "checked_at": np.full(n, "", dtype=object),
                "check_note": np.full(n, "", dtype=object)}
    cols = {k: (np.array(table[k], dtype=float) if k.startswith("z_") else np.array(table[k], dtype=object))
            if k in table.colnames else v for k, v in defaults.items()}
    files = list(table["file"])
    for c in corrections:
        if c["file"] not in files:
            continue
        i = files.index(c["file"])
        cols["z_checked"][i] = c["z"]
        cols["z_checked_err"][i] = np.nan if c["z_err"] is None else c["z_err"]
        cols["checked_by"][i] = c["who"]
        cols["checked_at"][i] = c["when"]
        cols["check_note"][i] = c["note"]
    if not corrections and "z_checked" not in table.colnames:
        return table
    for k in CORRECTION_COLUMNS:
        table[k] = cols[k] if k.startswith("z_") else np.array([str(v) for v in cols[k]], dtype=str)
    table["z_checked"].description = "redshift checked by a person (e.g. in the line identifier)"
    table["z_checked_err"].description = "1-sigma error of z_checked"
    table.meta["zline_corrections"] = list(corrections)
    return table


def catalog_row(catalog, row):
    """One row of a survey catalogue as a dict (``file``, ``hdu``, ``z`` ... ).

    Parameters
    ----------
    catalog : str or path-like
        ECSV catalogue written by `measure_survey`.
    row : int or str
        Row index, or the spectrum's file (absolute path or a unique base name).
    """
    from astropy.table import Table  # noqa: PLC0415

    catalog = os.fspath(catalog)
    table = Table.read(catalog, format="ascii.ecsv")
    files = [str(f) for f in table["file"]]
    if isinstance(row, (int, np.integer)):
        if not -len(table) <= row < len(table):
            raise IndexError(f"{catalog}: row {row} is out of range (the catalogue has {len(table)} rows)")
        index = int(row)
    else:
        hits = [i for i, f in enumerate(files) if f == str(row) or os.path.basename(f) == str(row)]
        if len(hits) != 1:
            what = "no row" if not hits else f"{len(hits)} rows"
            raise KeyError(f"{catalog}: {what} for file {row!r}; give the absolute path or a row index")
        index = hits[0]
    out = {k: table[k][index].item() if hasattr(table[k][index], "item") else table[k][index]
           for k in table.colnames}
    out["row"] = index
    return out


def record_correction(catalog, file, z, z_err=None, who=None, note=""):
    """Write a checked redshift for one spectrum back to a survey catalogue.

    The blind ``z`` stays as measured; the checked value goes into `CORRECTION_COLUMNS`, and the
    full history (who, when, old and new z) into ``meta["zline_corrections"]`` and a log in
    ``<catalog>.parts/corrections.json``, so a later ``zline batch`` rerun keeps it.  Both files are
    replaced atomically, under the catalogue's lock (waiting up to 10 s for a batch run to end;
    then `CatalogLockedError`).

    Returns
    -------
    dict
        The correction recorded.
    """
    import datetime  # noqa: PLC0415
    import getpass  # noqa: PLC0415

    from astropy.table import Table  # noqa: PLC0415

    from zline.physics.tables import write_table  # noqa: PLC0415

    catalog = os.fspath(catalog)
    entry = catalog_row(catalog, file)
    if not np.isfinite(z) or z <= -1:
        raise ValueError(f"record_correction: z must be a finite number > -1; got {z!r}")
    try:
        default_who = getpass.getuser()
    except (KeyError, OSError):  # pragma: no cover - no user database
        default_who = "unknown"
    correction = {"file": entry["file"], "z": float(z),
                  "z_err": None if z_err is None or not np.isfinite(z_err) else float(z_err),
                  "z_blind": float(entry["z"]), "who": who or default_who,
                  "when": datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds"),
                  "note": str(note)}
    # a batch run on this catalogue would rewrite it: wait a little for it, else refuse
    with catalog_lock(catalog, parts_directory(catalog), wait=10.0, who="a checked redshift"):
        log = _load_corrections(catalog) + [correction]
        _write_json_atomic(_corrections_path(catalog), log, kind="corrections")
        table = Table.read(catalog, format="ascii.ecsv")
        _merge_corrections(table, log)
        write_table(table, catalog, format="ecsv", overwrite=True, kind="catalog")
    return correction
