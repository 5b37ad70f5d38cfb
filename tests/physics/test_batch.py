"""Tests of zline.physics.batch: survey catalogue, bad files as rows, resume, Dask."""

import json
import os

import numpy as np
import pytest
from astropy.table import Table

from zline.physics import batch
from zline.physics.batch import (expand_inputs, measure_survey, parts_directory,
                                 write_synthetic_spectra)

N_GOOD = 20


@pytest.fixture(scope="module")
def survey(tmp_path_factory):
    """20 seeded synthetic spectra (truth recorded) plus two bad files."""
    d = tmp_path_factory.mktemp("survey")
    truth = write_synthetic_spectra(d, N_GOOD, seed=11)
    (d / "bad_text.fits").write_text("this is not FITS at all\n")
    (d / "bad_empty.fits").write_bytes(b"")
    return d, truth


@pytest.fixture(scope="module")
def reference(survey, tmp_path_factory):
    """Uninterrupted single-process catalogue."""
    d, _ = survey
    cat = tmp_path_factory.mktemp("ref") / "cat.ecsv"
    table = measure_survey(d, cat, workers=1)
    return cat, table


def _records(parts):
    """Names of the per-spectrum records in a .parts folder (not its lock or correction log)."""
    return sorted(n for n in os.listdir(parts) if n.endswith(".json") and n != "corrections.json")


def _text(col):
    """String column with empty cells as "" (ECSV reads empty strings back as masked)."""
    return col.filled("") if hasattr(col, "filled") else col


def _same(a, b):
    assert a.colnames == b.colnames
    assert len(a) == len(b)
    for name in a.colnames:
        if a[name].dtype.kind == "f":
            np.testing.assert_array_equal(np.asarray(a[name]), np.asarray(b[name]))
        else:
            assert list(_text(a[name])) == list(_text(b[name])), name


def test_redshifts_and_bad_rows(survey, reference):
    d, truth = survey
    cat, table = reference
    assert len(table) == N_GOOD + 2
    assert list(table["file"]) == sorted(table["file"])
    good = [r for r in table if r["file"] in truth]
    assert len(good) == N_GOOD
    dz = np.array([r["z"] - truth[r["file"]] for r in good])
    assert np.max(np.abs(dz)) < 2e-4  # truth is the injected (invented) redshift
    assert all(r["error"] == "" and "bad_file" not in r["flags"] for r in good)
    bad = [r for r in table if r["file"] not in truth]
    assert sorted(os.path.basename(r["file"]) for r in bad) == ["bad_empty.fits", "bad_text.fits"]
    for r in bad:
        assert r["flags"] == "bad_file"
        assert os.path.basename(r["file"]) in r["error"]
        assert np.isnan(r["z"])
    back = Table.read(cat, format="ascii.ecsv")
    _same(back, table)
    assert back.meta["zline_batch"]["lines"] is None  # default: every kind of spectrum


def test_resume_after_interrupt(survey, reference, tmp_path, monkeypatch):
    d, _ = survey
    cat = tmp_path / "cat.ecsv"
    n_stop = 7

    def stop(done, total):
        if done >= n_stop:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        measure_survey(d, cat, workers=1, progress=stop)
    assert not cat.exists()
    parts = parts_directory(cat)
    first = {n: os.stat(os.path.join(parts, n)).st_mtime_ns for n in _records(parts)}
    assert len(first) == n_stop
    done_files = {json.load(open(os.path.join(parts, n)))["file"] for n in first}

    calls = []
    real = batch.measure_one

    def counting(path, settings):
        calls.append(path)
        return real(path, settings)

    monkeypatch.setattr(batch, "measure_one", counting)
    seen = []
    table = measure_survey(d, cat, workers=1, progress=lambda k, n: seen.append((k, n)))
    assert sum("bad_" in f for f in done_files) == 2  # bad files sort first
    # everything done before is reused, the unchanged bad files too
    assert seen[0] == (n_stop, N_GOOD + 2) and seen[-1] == (N_GOOD + 2, N_GOOD + 2)
    assert not set(calls) & done_files
    assert len(calls) == N_GOOD + 2 - n_stop
    for name, mtime in first.items():
        assert os.stat(os.path.join(parts, name)).st_mtime_ns == mtime
    assert table.meta["zline_batch"]["run"] == {"new": N_GOOD + 2 - n_stop, "reused": n_stop,
                                                "failed": 2, "failed_reused": 2}
    _same(table, reference[1])
    _same(Table.read(cat, format="ascii.ecsv"), reference[1])

    # a third run measures nothing; asked to retry failures, only the two bad files
    calls.clear()
    again = measure_survey(d, cat, workers=1)
    assert calls == [] and again.meta["zline_batch"]["run"]["reused"] == N_GOOD + 2
    measure_survey(d, cat, workers=1, retry_failed=True)
    assert sorted(os.path.basename(c) for c in calls) == ["bad_empty.fits", "bad_text.fits"]


def test_process_pool_matches(survey, reference, tmp_path):
    d, _ = survey
    table = measure_survey(str(d / "*.fits"), tmp_path / "c.ecsv", workers=2)
    _same(table, reference[1])


def test_changed_file_is_remeasured(tmp_path):
    truth = write_synthetic_spectra(tmp_path / "s", 2, seed=5)
    cat = tmp_path / "c.ecsv"
    measure_survey(tmp_path / "s", cat, workers=1)
    path = sorted(truth)[0]
    other = write_synthetic_spectra(tmp_path / "o", 2, seed=6)
    os.replace(sorted(other)[0], path)
    table = measure_survey(tmp_path / "s", cat, workers=1)
    row = table[list(table["file"]).index(path)]
    assert abs(row["z"] - other[sorted(other)[0]]) < 2e-4


def test_dask_cluster_matches(survey, reference, tmp_path):
    distributed = pytest.importorskip("distributed")
    d, _ = survey
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=":0") as cluster, \
            distributed.Client(cluster) as client:
        table = measure_survey(d, tmp_path / "dask.ecsv", client=client)
    _same(table, reference[1])


def test_errors(tmp_path):
    with pytest.raises(ValueError, match="does not exist"):
        expand_inputs([tmp_path / "nope.fits"])
    with pytest.raises(ValueError, match="matches no file"):
        expand_inputs(str(tmp_path / "*.fits"))
    with pytest.raises(ValueError, match="holds no file"):
        expand_inputs(tmp_path)
    (tmp_path / "a.fits").write_text("x")
    with pytest.raises(ValueError, match="unknown line set 'nope'"):
        measure_survey(tmp_path, tmp_path / "c.ecsv", lines="nope")
    with pytest.raises(ValueError, match="z_min < z_max"):
        measure_survey(tmp_path, tmp_path / "c.ecsv", z_min=2.0, z_max=1.0)
    with pytest.raises(ValueError, match="'workers' must be a positive integer"):
        measure_survey(tmp_path, tmp_path / "c.ecsv", workers=0)
    # deduplicated: the same file named twice is one row
    assert expand_inputs([tmp_path / "a.fits", str(tmp_path / "*.fits"), tmp_path]) == \
        [str(tmp_path / "a.fits")]


def test_noise_only_is_flagged(tmp_path):
    from astropy.io import fits

    rng = np.random.default_rng(17)  # invented pure-noise spectrum: no line to find
    hdr = fits.Header({"CTYPE1": "WAVE", "CUNIT1": "Angstrom", "CRPIX1": 1.0, "CRVAL1": 3700.0,
                       "CDELT1": 1.9})
    fits.HDUList([fits.PrimaryHDU((1 + 0.15 * rng.normal(size=3000)).astype(np.float32), hdr),
                  fits.ImageHDU(np.full(3000, 0.15, np.float32), name="ERR")]).writeto(
                      tmp_path / "noise.fits")
    write_synthetic_spectra(tmp_path, 1, seed=3)
    table = measure_survey(tmp_path, tmp_path / "c.ecsv", workers=1)
    flags = {os.path.basename(r["file"]): r["flags"] for r in table}
    assert "low_snr" in flags["noise.fits"].split(",")
    assert flags["syn_0000.fits"] == ""
    row = table[list(table["file"]).index(str(tmp_path / "noise.fits"))]
    ambiguous = row["score_2"] >= batch.AMBIGUOUS_RATIO * row["score"]
    assert ("ambiguous" in row["flags"]) == ambiguous


def test_corrupt_record_is_remeasured(tmp_path):
    truth = write_synthetic_spectra(tmp_path / "s", 2, seed=9)
    cat = tmp_path / "c.ecsv"
    first = measure_survey(tmp_path / "s", cat, workers=1)
    parts = parts_directory(cat)
    victim = _records(parts)[0]
    open(os.path.join(parts, victim), "w").close()  # e.g. left empty by a power cut
    again = measure_survey(tmp_path / "s", cat, workers=1)
    _same(again, first)
    assert json.load(open(os.path.join(parts, victim)))["file"] in truth


def test_interrupt_with_process_pool(survey, reference, tmp_path):
    d, _ = survey
    cat = tmp_path / "cat.ecsv"

    def stop(done, total):
        if done >= 4:
            raise KeyboardInterrupt

    with pytest.raises(KeyboardInterrupt):
        measure_survey(d, cat, workers=2, progress=stop)
    n_first = len(_records(parts_directory(cat)))
    assert 4 <= n_first < N_GOOD + 2
    _same(measure_survey(d, cat, workers=2), reference[1])
