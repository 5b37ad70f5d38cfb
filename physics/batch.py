"""Survey batches: blind redshifts of many spectra into one catalogue, resumable and parallel.

`measure_survey` expands files, directories and globs, runs `zline.physics.scan.scan_redshift`
on every spectrum (local processes, in-process, or a ``dask.distributed`` cluster) and merges
the results into an ECSV catalogue with one row per spectrum.

No work is lost: as soon as a spectrum is done its result is written atomically as a small JSON
record in ``<catalog>.parts/``, named by a hash of (absolute path, modification time, size,
settings).  A rerun loads the records already there and measures only the rest; a file that
failed (flag ``bad_file`` or ``scan_failed``) and has not changed since is not tried again unless
``retry_failed=True``.  Interrupting a run (Ctrl-C, crash) keeps every record already written.
The catalogue itself is written atomically at the end, rows sorted by file.

Nothing is lost to another run or overwritten: a run holds a lock on ``<catalog>.parts/lock``
(a second run on the same catalogue stops at once with
`~zline.physics._survey.CatalogLockedError`, naming the first); an existing catalogue is
replaced only if zline wrote it as a catalogue (an ECSV beside its ``.parts`` folder), and only
with ``overwrite=True`` when the new one would drop spectra the old one has.  Pool workers end
by themselves when the run that started them dies.  Every assumption the reader made about a
file (``spectrum.meta["zline"]["assumptions"]``) sets the row's ``assumed`` flag and is listed in
its ``assumptions`` column.

`write_synthetic_spectra` makes invented, seeded emission-line spectra at known redshifts for
tests and benchmarks of the batch mechanics.
"""

import functools
import glob
import hashlib
import json
import os
import sys

import numpy as np

from zline.physics._survey import CatalogLockedError, catalog_lock, progress_bar, watch_parent
from zline.physics._synthetic import write_synthetic_spectra
from zline.physics.corrections import (CORRECTION_COLUMNS, _load_corrections, _merge_corrections,
                                       _write_json_atomic, catalog_row, parts_directory,
                                       record_correction)

__all__ = ["BATCH_VERSION", "FLAGS", "AMBIGUOUS_RATIO", "LOW_SNR_SCORE", "SPECTRUM_SUFFIXES",
           "expand_inputs", "record_key", "measure_one", "measure_survey", "parts_directory",
           "text_progress", "progress_bar", "write_synthetic_spectra", "catalog_row",
           "record_correction", "CORRECTION_COLUMNS", "CatalogLockedError"]


#: Version of the record format; part of every record key.
BATCH_VERSION = 2

#: Row flags and their meaning.
FLAGS = {
    "ambiguous": "second candidate's score within AMBIGUOUS_RATIO of the best",
    "low_snr": "best score below LOW_SNR_SCORE",
    "bad_file": "the file could not be read as a spectrum (see 'error')",
    "scan_failed": "the spectrum was read but the redshift scan refused it (see 'error')",
    "no_redshift": "no reading is convincing (confidence below "
    "zline.physics.scan.NO_REDSHIFT_CONFIDENCE): a sky fibre, noise, or too faint",
    "assumed": "the reader assumed something about the axis, units, medium or a damaged file "
               "(see 'assumptions')",
}

#: A second candidate scoring at least this fraction of the best makes the row ``ambiguous``.
AMBIGUOUS_RATIO = 0.8

#: A best score below this is flagged ``low_snr``.
LOW_SNR_SCORE = 5.0

#: File name endings picked up when a directory is given.
SPECTRUM_SUFFIXES = (".fits", ".fits.gz", ".fit", ".fts", ".fit.gz", ".fts.gz")

_FAILED = ("bad_file", "scan_failed")


def expand_inputs(inputs):
    """Expand files, directories and glob patterns into a sorted list of absolute paths.

    Parameters
    ----------
    inputs : str, path-like or iterable of them
        A directory contributes its files ending in one of `SPECTRUM_SUFFIXES` (not recursive);
        a pattern with ``*``, ``?`` or ``[`` is expanded with `glob.glob`; anything else is taken
        as a file (it need not be readable: a bad file becomes a row of the catalogue).

    Returns
    -------
    list of str
        Absolute, deduplicated, sorted.

    Raises
    ------
    ValueError
        No inputs, or an input that matches nothing (the message names it).
    """
    if isinstance(inputs, (str, os.PathLike)):
        inputs = [inputs]
    inputs = [os.fspath(i) for i in inputs]
    if not inputs:
        raise ValueError("measure_survey: 'inputs' is empty; expected files, directories or globs")
    found = set()
    for item in inputs:
        if os.path.isdir(item):
            names = [os.path.join(item, n) for n in os.listdir(item)
                     if n.lower().endswith(SPECTRUM_SUFFIXES)]
            names = [n for n in names if os.path.isfile(n)]
            if not names:
                raise ValueError(f"measure_survey: directory {item!r} holds no file ending in "
                                 f"{', '.join(SPECTRUM_SUFFIXES)}")
        elif any(c in item for c in "*?["):
            names = [n for n in glob.glob(item) if os.path.isfile(n)]
            if not names:
                raise ValueError(f"measure_survey: pattern {item!r} matches no file")
        elif os.path.exists(item):
            names = [item]
        else:
            raise ValueError(f"measure_survey: input {item!r} does not exist "
                             f"(expected a file, a directory or a glob pattern)")
        found.update(os.path.abspath(n) for n in names)
    return sorted(found)


def _settings(z_min, z_max, lines, klass=None, v_min_kms=None, v_max_kms=None, mask_sky=True,
              template=None):
    from zline.physics.catalog import LINE_SETS  # noqa: PLC0415
    from zline.physics.scan import KINDS  # noqa: PLC0415

    for name, val in (("z_min", z_min), ("z_max", z_max)):
        if isinstance(val, bool) or not isinstance(val, (int, float, np.floating, np.integer)) \
                or not np.isfinite(val):
            raise ValueError(f"measure_survey: {name!r} must be a finite plain number; got {val!r}")
    if not -1 < z_min < z_max:
        raise ValueError(f"measure_survey: need -1 < z_min < z_max; got z_min={z_min}, "
                         f"z_max={z_max}")
    if lines is not None and lines not in LINE_SETS:
        raise ValueError(f"measure_survey: unknown line set {lines!r}; options: "
                         + ", ".join(sorted(LINE_SETS)))
    if klass is not None and klass not in KINDS:
        raise ValueError(f"measure_survey: unknown kind {klass!r}; options: " + ", ".join(KINDS))
    if (v_min_kms is None) != (v_max_kms is None) or \
            (v_min_kms is not None and not float(v_min_kms) < float(v_max_kms)):
        raise ValueError(f"measure_survey: need both v_min_kms < v_max_kms or neither; got "
                         f"{v_min_kms!r}, {v_max_kms!r}")
    out = {"z_min": float(z_min), "z_max": float(z_max), "lines": lines,
           "version": BATCH_VERSION}
    # scan options beyond the original three enter the settings (and the record keys) only when
    # they differ from the defaults
    extra = {"klass": klass, "v_min_kms": None if v_min_kms is None else float(v_min_kms),
             "v_max_kms": None if v_max_kms is None else float(v_max_kms),
             "template": None if template is None else os.path.abspath(os.fspath(template))}
    out.update({k: v for k, v in extra.items() if v is not None})
    if not mask_sky:
        out["mask_sky"] = False
    return out


def record_key(path, settings):
    """Hash of (absolute path, mtime, size, settings) naming a file's record.

    A file that changes (new mtime or size) or a run with other settings gets a new key, so a
    stale record is never reused.
    """
    path = os.path.abspath(os.fspath(path))
    try:
        st = os.stat(path)
        stamp = [st.st_mtime_ns, st.st_size]
    except OSError:
        stamp = [None, None]
    blob = json.dumps([path, *stamp, settings], sort_keys=True)
    return hashlib.sha256(blob.encode()).hexdigest()[:32]


def measure_one(path, settings):
    """Scan one file; never raises for a bad file.

    Parameters
    ----------
    path : str
        Spectrum file.
    settings : dict
        ``z_min``, ``z_max``, ``lines`` and the scan options (as made by `measure_survey`).

    Returns
    -------
    dict
        Plain-JSON record: ``file``, ``hdu``, ``z``, ``z_err``, ``score``, ``n_matched``,
        ``lines`` (matched labels, comma list), ``z_2``, ``score_2``, ``class``, ``confidence``,
        ``flags`` (list), ``error``, ``assumptions`` (list of the reader's assumptions about the
        file).
    """
    import warnings  # noqa: PLC0415

    from zline.physics.scan import scan_redshift  # noqa: PLC0415
    from zline.physics.spectra import read_spectrum  # noqa: PLC0415

    rec = {"file": path, "hdu": "", "z": None, "z_err": None, "score": None, "n_matched": 0,
           "lines": "", "z_2": None, "score_2": None, "class": "", "confidence": None,
           "flags": [], "error": "", "assumptions": []}
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            spectrum = read_spectrum(path)
    except Exception as exc:  # any unreadable file is a row, not the end of the run
        rec["flags"] = ["bad_file"]
        rec["error"] = f"{type(exc).__name__}: {exc}"
        return rec
    rec["hdu"] = str(spectrum.meta.get("zline", {}).get("hdu", ""))
    rec["assumptions"] = [str(a) for a in spectrum.meta.get("zline", {}).get("assumptions", [])]
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            result = scan_redshift(spectrum, top=3, **_scan_keywords(settings))
    except Exception as exc:  # a refused spectrum is a row too
        rec["flags"] = ["scan_failed"]
        rec["error"] = f"{type(exc).__name__}: {exc}"
        return rec
    cands = result.candidates
    if not cands:
        rec["flags"] = ["scan_failed"]
        rec["error"] = "scan_redshift returned no candidate"
        return rec
    best = cands[0]
    rec.update(z=float(best.z), z_err=_finite(best.z_err), score=float(best.score),
               n_matched=int(best.n_matched), lines=",".join(best.lines), **{"class": best.klass},
               confidence=float(result.confidence))
    flags = []
    if len(cands) > 1:
        rec["z_2"] = float(cands[1].z)
        rec["score_2"] = float(cands[1].score)
        if best.score > 0 and cands[1].score >= AMBIGUOUS_RATIO * best.score:
            flags.append("ambiguous")
    if not best.score >= LOW_SNR_SCORE:
        flags.append("low_snr")
    if result.no_redshift:
        flags.append("no_redshift")
    rec["flags"] = flags
    return rec


def _finite(x):
    x = float(x)
    return x if np.isfinite(x) else None


def _scan_keywords(settings):
    """Keyword arguments of `zline.physics.scan.scan_redshift` from batch settings."""
    import astropy.units as u  # noqa: PLC0415

    kw = {"lines": settings.get("lines"), "z_min": settings["z_min"], "z_max": settings["z_max"],
          "klass": settings.get("klass"), "mask_sky": settings.get("mask_sky", True)}
    if settings.get("v_min_kms") is not None:
        kw["v_min"] = settings["v_min_kms"] * u.km / u.s
        kw["v_max"] = settings["v_max_kms"] * u.km / u.s
    if settings.get("template"):
        kw["template"] = _template(settings["template"])
    return kw


@functools.lru_cache(maxsize=4)
def _template(path):
    from zline.physics.spectra import read_spectrum  # noqa: PLC0415

    return read_spectrum(path)


def _load_record(path):
    try:
        with open(path) as fh:
            rec = json.load(fh)
    except (OSError, ValueError):
        return None  # unreadable record: measure again
    return rec if isinstance(rec, dict) and "file" in rec else None


def text_progress(stream=None, width=30):
    """A progress callable ``(done, total)`` drawing a one-line text bar (default on stderr)."""
    stream = sys.stderr if stream is None else stream

    def progress(done, total):
        frac = done / total if total else 1.0
        fill = int(round(width * frac))
        stream.write(f"\r[{'#' * fill}{'.' * (width - fill)}] {done}/{total}")
        if done >= total:
            stream.write("\n")
        stream.flush()

    return progress


def _run_local(todo, settings, workers, on_done):
    if workers == 1:
        for path in todo:
            on_done(path, measure_one(path, settings))
        return
    from concurrent.futures import ProcessPoolExecutor, as_completed  # noqa: PLC0415

    pool = ProcessPoolExecutor(max_workers=workers, initializer=watch_parent,
                               initargs=(os.getpid(),))
    try:
        futures = {pool.submit(measure_one, p, settings): p for p in todo}
        for fut in as_completed(futures):
            on_done(futures[fut], fut.result())
    finally:
        pool.shutdown(wait=True, cancel_futures=True)


def _run_dask(todo, settings, client, on_done):
    from distributed import as_completed  # noqa: PLC0415

    futures = client.map(measure_one, todo, settings=settings, pure=False)
    owner = {f.key: p for f, p in zip(futures, todo)}
    try:
        for fut in as_completed(futures):
            on_done(owner[fut.key], fut.result())
    finally:
        client.cancel(futures)


def _catalog_table(records, settings):
    from astropy.table import Table  # noqa: PLC0415

    records = sorted(records, key=lambda r: r["file"])

    def floats(key):
        return np.array([np.nan if r[key] is None else r[key] for r in records], dtype=float)

    table = Table()
    table["file"] = np.array([r["file"] for r in records], dtype=str)
    table["hdu"] = np.array([r["hdu"] for r in records], dtype=str)
    for key in ("z", "z_err", "score"):
        table[key] = floats(key)
    table["n_matched"] = np.array([r["n_matched"] for r in records], dtype=int)
    table["lines"] = np.array([r["lines"] for r in records], dtype=str)
    table["z_2"] = floats("z_2")
    table["score_2"] = floats("score_2")
    table["class"] = np.array([r.get("class", "") for r in records], dtype=str)
    table["confidence"] = np.array([np.nan if r.get("confidence") is None else r["confidence"]
                                    for r in records], dtype=float)
    table["flags"] = np.array([",".join(r["flags"]) for r in records], dtype=str)
    table["error"] = np.array([r["error"] for r in records], dtype=str)
    table["assumptions"] = np.array(["; ".join(r.get("assumptions", [])) for r in records],
                                    dtype=str)
    table["z"].description = "best redshift candidate"
    table["z_err"].description = "1-sigma error of z from the correlation peak"
    table["score"].description = "scan score of the best candidate"
    table["z_2"].description = "second candidate's redshift"
    table["score_2"].description = "second candidate's score"
    table["class"].description = ("kind of spectrum the best candidate reads: emission-galaxy, "
                                  "absorption-galaxy, quasar or star")
    table["confidence"].description = "calibrated probability that z (the best candidate) is right"
    table["flags"].description = "comma list: " + "; ".join(f"{k} = {v}" for k, v in FLAGS.items())
    table["assumptions"].description = "what the reader assumed about the file ('; ' list)"
    table.meta["zline_batch"] = {**settings, "ambiguous_ratio": AMBIGUOUS_RATIO,
                                 "low_snr_score": LOW_SNR_SCORE, "n_spectra": len(records)}
    return table


def measure_survey(inputs, catalog, z_min=0.0, z_max=7.0, lines=None, workers=None,
                   client=None, progress=None, retry_failed=False, overwrite=False,
                   **scan_options):
    """Blind redshifts of many spectra into one ECSV catalogue, resumable.

    Parameters
    ----------
    inputs : str, path-like or iterable of them
        Files, directories or glob patterns (see `expand_inputs`).
    catalog : str or path-like
        ECSV catalogue written at the end (atomically).  Records go to ``<catalog>.parts/`` as
        they finish; a rerun reuses them.  An existing catalogue is updated only if zline wrote
        it as a catalogue, and only with ``overwrite`` if this run would drop some of its rows.
        A name ending like a spectrum (``.fits`` ...) is refused.
    z_min, z_max : float
        Redshift range searched.
    lines : str or None
        Line set of `zline.physics.catalog.LINE_SETS`; None searches every kind of spectrum.
    workers : int, optional
        Local worker processes (default: ``os.cpu_count()``); 1 runs in this process.
        Ignored when ``client`` is given.  Workers end by themselves if this process dies.
    client : `distributed.Client`, optional
        Run each file's measurement on this Dask cluster instead.
    progress : callable, optional
        Called as ``progress(done, total)`` after each record (``done`` counts records reused
        from an earlier run); `progress_bar` makes one.  An exception it raises (e.g.
        KeyboardInterrupt) stops the run; records already written stay.
    retry_failed : bool
        Measure again files whose earlier record failed (``bad_file``, ``scan_failed``) even if
        they have not changed (a changed file is always measured again).
    overwrite : bool
        Allow the new catalogue to drop rows of an existing zline catalogue (spectra that are
        not among this run's inputs).
    **scan_options
        ``klass`` (a kind of `zline.physics.scan.KINDS`), ``v_min_kms``/``v_max_kms`` (a
        velocity search), ``mask_sky`` (bool), ``template`` (path of a rest-frame template).

    Returns
    -------
    `~astropy.table.Table`
        One row per spectrum, sorted by ``file``: ``file``, ``hdu``, ``z``, ``z_err``, ``score``,
        ``n_matched``, ``lines``, ``z_2``, ``score_2``, ``class``, ``confidence``,
        ``flags`` (comma list of `FLAGS`), ``error`` (message for a failed file; NaN
        measurements there), ``assumptions``.  ``meta["zline_batch"]["run"]`` counts this run's
        ``new``, ``reused`` and ``failed`` rows and the failed ones reused without a retry
        (``failed_reused``).

    Raises
    ------
    ValueError
        Bad inputs, range, line set, ``workers`` or catalogue name.
    FileExistsError
        The catalogue exists and is not a zline catalogue (never replaced), or this run would
        drop some of its rows and ``overwrite`` is False.
    CatalogLockedError
        Another run is writing the same catalogue (this one does nothing).
    """
    settings = _settings(z_min, z_max, lines, **scan_options)
    if workers is None:
        workers = os.cpu_count() or 1
    if isinstance(workers, bool) or not isinstance(workers, (int, np.integer)) or workers < 1:
        raise ValueError(f"measure_survey: 'workers' must be a positive integer; got {workers!r}")
    catalog = os.fspath(catalog)
    if catalog.lower().endswith(SPECTRUM_SUFFIXES):
        raise ValueError(f"measure_survey: the catalogue {catalog!r} is named like a spectrum; "
                         f"the catalogue is an ECSV table: give a name such as 'survey.ecsv'")
    paths = expand_inputs(inputs)
    _check_catalog(catalog, paths, overwrite)
    parts = parts_directory(catalog)
    with catalog_lock(catalog, parts):
        _check_catalog(catalog, paths, overwrite)  # again, now that no other run can write it
        return _survey(paths, catalog, parts, settings, workers, client, progress, retry_failed)


def _check_catalog(catalog, paths, overwrite):
    """Refuse a catalogue zline did not write, or one whose rows this run would drop."""
    from zline.physics._atomic import check_replaceable  # noqa: PLC0415

    if not os.path.lexists(catalog):
        return
    check_replaceable(catalog, "catalog")
    if overwrite:
        return
    from astropy.table import Table  # noqa: PLC0415

    old = [str(f) for f in Table.read(catalog, format="ascii.ecsv")["file"]]
    dropped = sorted(set(old) - set(paths))
    if dropped:
        raise FileExistsError(
            f"{catalog!r} holds {len(dropped)} spectra that are not among this run's inputs "
            f"(e.g. {dropped[0]!r}); give those inputs too, choose another catalogue, or pass "
            f"overwrite=True (zline batch --overwrite) to replace it without them")


def _survey(paths, catalog, parts, settings, workers, client, progress, retry_failed):
    records, todo, keys = {}, [], {}
    for path in paths:
        keys[path] = record_key(path, settings)
        rec = _load_record(os.path.join(parts, keys[path] + ".json"))
        if rec is not None and rec.get("file") == path and not (
                retry_failed and any(f in _FAILED for f in rec.get("flags", []))):
            records[path] = rec
        else:
            todo.append(path)
    reused = dict(records)
    total = len(paths)
    if progress is not None:
        progress(len(records), total)

    def on_done(path, rec):
        if rec.get("assumptions") and "assumed" not in rec["flags"]:
            rec["flags"] = [*rec["flags"], "assumed"]
        _write_json_atomic(os.path.join(parts, keys[path] + ".json"), rec)
        records[path] = rec
        if progress is not None:
            progress(len(records), total)

    try:
        if todo:
            if client is not None:
                _run_dask(todo, settings, client, on_done)
            else:
                _run_local(todo, settings, min(int(workers), len(todo)), on_done)
    finally:
        if progress is not None and hasattr(progress, "close"):
            progress.close()
    table = _catalog_table(list(records.values()), settings)

    def failed(recs):
        return sum(any(f in _FAILED for f in r["flags"]) for r in recs)

    table.meta["zline_batch"]["run"] = {
        "new": len(records) - len(reused), "reused": len(reused),
        "failed": failed(records.values()), "failed_reused": failed(reused.values())}
    _merge_corrections(table, _load_corrections(catalog))
    from zline.physics.tables import write_table  # noqa: PLC0415

    write_table(table, catalog, format="ecsv", overwrite=True, kind="catalog")
    return table
