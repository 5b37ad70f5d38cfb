"""Batch runs you can trust: no foreign file replaced, one run per catalogue at a time, workers
that die with their run, assumption flags, progress and the new / reused / failed summary."""

import os
import signal
import subprocess
import sys
import textwrap
import time

import pytest
from astropy.io import fits
from astropy.table import Table

from zline.cli import main
from zline.physics._atomic import NotZlineFileError
from zline.physics._survey import CatalogLockedError, catalog_lock
from zline.physics.batch import measure_survey, parts_directory, write_synthetic_spectra
from zline.physics.spectra import read_spectrum


@pytest.fixture(scope="module")
def spectra(tmp_path_factory):
    d = tmp_path_factory.mktemp("spectra")
    truth = write_synthetic_spectra(d, 3, seed=31)
    (d / "broken.fits").write_text("not a FITS file")
    return d, truth


def test_output_named_like_a_spectrum_is_refused(spectra, tmp_path, capsys):
    d, truth = spectra
    victim = sorted(truth)[0]
    before = open(victim, "rb").read()
    for target in (victim, str(tmp_path / "other.fits")):
        assert main(["batch", victim, "-o", target, "--workers", "1"]) == 2
        err = capsys.readouterr().err
        assert "is named like a spectrum; CATALOG is an ECSV table" in err and err.count("\n") == 1
    assert open(victim, "rb").read() == before
    assert not os.path.exists(tmp_path / "other.fits")
    assert not os.path.exists(victim + ".parts") and not os.path.exists(tmp_path / "other.fits.parts")
    with pytest.raises(ValueError, match="named like a spectrum"):
        measure_survey(victim, victim, workers=1)


def test_foreign_ecsv_is_never_replaced(spectra, tmp_path, capsys):
    d, _ = spectra
    theirs = tmp_path / "theirs.ecsv"
    Table({"name": ["ZL-9"], "z": [0.5]}).write(theirs)
    before = theirs.read_bytes()
    for extra in ([], ["--overwrite"]):
        assert main(["batch", str(d), "-o", str(theirs), "--workers", "1", *extra]) == 2
        err = capsys.readouterr().err
        assert err.startswith("zline batch: error: ") and err.count("\n") == 1
        assert "theirs.ecsv' exists and is an ECSV table zline did not write" in err
    assert theirs.read_bytes() == before
    assert not os.path.exists(parts_directory(theirs))  # refused before anything was done
    with pytest.raises(NotZlineFileError):
        measure_survey(d, theirs, workers=1, overwrite=True)


def test_rows_are_dropped_only_when_asked(spectra, tmp_path):
    d, truth = spectra
    cat = tmp_path / "cat.ecsv"
    assert len(measure_survey(d, cat, workers=1)) == 4
    one = sorted(truth)[0]
    with pytest.raises(FileExistsError, match=r"holds 3 spectra that are not among this run's "
                                              r"inputs.*overwrite=True"):
        measure_survey(one, cat, workers=1)
    assert len(Table.read(cat)) == 4
    assert len(measure_survey(d, cat, workers=1)) == 4  # the same inputs: a resume
    assert len(measure_survey(one, cat, workers=1, overwrite=True)) == 1


def test_progress_summary_and_retry(spectra, tmp_path, capsys):
    d, _ = spectra
    cat = str(tmp_path / "cat.ecsv")
    assert main(["batch", str(d), "-o", cat, "--workers", "1"]) == 0
    out, err = capsys.readouterr()
    assert "4 spectra, 3 measured, 1 failed (4 new, 0 reused from an earlier run)" in out
    assert "zline batch: 100%" in err and "4/4" in err
    assert "spectrum/s" in err or "s/spectrum" in err  # tqdm's rate, whichever way round
    assert main(["batch", str(d), "-o", cat, "--workers", "1"]) == 0
    out = capsys.readouterr().out
    assert ("(0 new, 4 reused from an earlier run; 1 unchanged failed file(s) not retried: "
            "--retry-failed measures them again)") in out
    assert main(["batch", str(d), "-o", cat, "--workers", "1", "--retry-failed",
                 "--no-progress"]) == 0
    out, err = capsys.readouterr()
    assert "(1 new, 3 reused from an earlier run)" in out and err == ""


def test_assumptions_become_a_flag(tmp_path):
    truth = write_synthetic_spectra(tmp_path / "s", 2, seed=32)
    odd = sorted(truth)[0]
    with fits.open(odd, mode="update") as hdul:
        del hdul[0].header["CTYPE1"]  # the reader has to assume what the axis is
    table = measure_survey(tmp_path / "s", tmp_path / "c.ecsv", workers=1)
    n_flagged = 0
    for row in table:
        said = read_spectrum(row["file"]).meta["zline"]["assumptions"]
        flagged = "assumed" in str(row["flags"]).split(",")
        assert flagged == bool(said), row["file"]
        assert str(row["assumptions"] or "") == "; ".join(said)
        n_flagged += flagged
    assert n_flagged >= 1
    back = Table.read(tmp_path / "c.ecsv")
    assert "assumed" in back["flags"][list(back["file"]).index(odd)]


def test_locked_catalogue_refuses_at_once(spectra, tmp_path):
    d, _ = spectra
    cat = str(tmp_path / "cat.ecsv")
    with catalog_lock(cat, parts_directory(cat), who="a test"):
        t0 = time.monotonic()
        with pytest.raises(CatalogLockedError, match=r"being written by another run \(a test, "
                                                     rf"pid {os.getpid()} .*nothing was done"):
            measure_survey(d, cat, workers=1)
        assert time.monotonic() - t0 < 5
    assert not os.path.exists(cat)
    assert len(measure_survey(d, cat, workers=1)) == 4  # released when the holder is done


_RUN = textwrap.dedent("""
    import os, sys, time
    from zline.physics.batch import measure_survey

    def progress(done, total):  # after its first record, the run waits until the test says go
        if done >= 1 and len(sys.argv) > 4:
            while not os.path.exists(sys.argv[4]):
                time.sleep(0.05)

    measure_survey(sys.argv[1], sys.argv[2], workers=int(sys.argv[3]), progress=progress)
""")


def _records(parts):
    if not os.path.isdir(parts):
        return []
    return [n for n in os.listdir(parts) if n.endswith(".json")]


def _wait(condition, timeout, what):
    deadline = time.monotonic() + timeout
    while not condition():
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out after {timeout} s waiting for {what}")
        time.sleep(0.1)


def test_two_runs_on_one_catalogue(tmp_path):
    truth = write_synthetic_spectra(tmp_path / "s", 6, seed=33, npix=3000)
    cat = str(tmp_path / "cat.ecsv")
    go = tmp_path / "go"
    first = subprocess.Popen([sys.executable, "-c", _RUN, str(tmp_path / "s"), cat, "1", str(go)],
                             stderr=subprocess.PIPE, text=True)
    try:
        _wait(lambda: _records(parts_directory(cat)), 180, "the first run's first record")
        second = subprocess.run([sys.executable, "-m", "zline.cli", "batch", str(tmp_path / "s"),
                                 "-o", cat, "--workers", "1"], capture_output=True, text=True,
                                timeout=180)
        assert first.poll() is None, "the first run ended too soon for this test"
        go.touch()  # the first run goes on to the end
        assert second.returncode == 1
        assert "is being written by another run (zline batch, pid " f"{first.pid}" in second.stderr
        assert first.wait(timeout=600) == 0, first.stderr.read()
    finally:
        if first.poll() is None:
            first.kill()
            first.wait()
    table = Table.read(cat)
    assert sorted(table["file"]) == sorted(truth)  # every row, each once
    assert len(_records(parts_directory(cat))) == len(truth)


def _children(pid):
    kids = []
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            with open(f"/proc/{entry}/stat") as fh:
                fields = fh.read().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if int(fields[1]) == pid:
            kids.append(int(entry))
    return kids


def _alive(pid):
    try:
        with open(f"/proc/{pid}/stat") as fh:
            return fh.read().rsplit(")", 1)[1].split()[0] != "Z"
    except OSError:
        return False


@pytest.mark.skipif(not os.path.isdir("/proc/self"), reason="needs /proc to list child processes")
def test_workers_end_when_the_run_is_killed(tmp_path):
    write_synthetic_spectra(tmp_path / "s", 40, seed=34, npix=20000)
    cat = str(tmp_path / "cat.ecsv")
    run = subprocess.Popen([sys.executable, "-c", _RUN, str(tmp_path / "s"), cat, "2"],
                           stderr=subprocess.DEVNULL)
    try:
        _wait(lambda: _records(parts_directory(cat)), 180, "the first record")
        workers = _children(run.pid)
        assert len(workers) >= 2, workers
        assert all(_alive(w) for w in workers)
        run.send_signal(signal.SIGKILL)  # no clean-up code of the run can execute
        run.wait()
        _wait(lambda: not any(_alive(w) for w in workers), 30, "the orphaned workers to end")
    finally:
        if run.poll() is None:
            run.kill()
            run.wait()
    assert not os.path.exists(cat)  # killed before the end: only the records were written
