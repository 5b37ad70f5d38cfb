"""Tests of ``zline batch`` through zline.cli.main."""

import numpy as np
import pytest
from astropy.table import Table

from zline.cli import main
from zline.physics.batch import write_synthetic_spectra


def test_batch_catalogue(tmp_path, capsys):
    truth = write_synthetic_spectra(tmp_path / "s", 4, seed=21)
    (tmp_path / "s" / "broken.fits").write_text("not a FITS file")
    out = tmp_path / "cat.ecsv"
    code = main(["batch", str(tmp_path / "s"), "-o", str(out), "--workers", "1",
                 "--z-max", "1.0"])
    captured = capsys.readouterr()
    assert code == 0, captured.err
    assert "5 spectra, 4 measured, 1 failed" in captured.out
    table = Table.read(out, format="ascii.ecsv")
    assert len(table) == 5
    for row in table:
        if row["file"] in truth:
            assert abs(row["z"] - truth[row["file"]]) < 2e-4  # injected (invented) redshift
        else:
            assert row["flags"] == "bad_file" and "broken.fits" in row["error"]
    assert table.meta["zline_batch"]["z_max"] == 1.0


@pytest.mark.parametrize("argv, match", [
    (["--workers", "0"], "--workers must be a positive integer"),
    (["--z-min", "2", "--z-max", "1"], "need -1 < --z-min < --z-max"),
    (["--lines", "nope"], "invalid choice"),
])
def test_bad_arguments(tmp_path, capsys, argv, match):
    write_synthetic_spectra(tmp_path, 1, seed=1)
    try:
        code = main(["batch", str(tmp_path), "-o", str(tmp_path / "c.ecsv"), *argv])
    except SystemExit as exc:  # argparse refusals exit directly
        code = exc.code
    err = capsys.readouterr().err
    assert code != 0
    assert match in err and len(err.strip().splitlines()) == 1


def test_missing_input(tmp_path, capsys):
    code = main(["batch", str(tmp_path / "missing.fits"), "-o", str(tmp_path / "c.ecsv")])
    err = capsys.readouterr().err
    assert code == 2
    assert "missing.fits" in err and "does not exist" in err
    assert len(err.strip().splitlines()) == 1
    assert not np.any([p.name.endswith(".ecsv") for p in tmp_path.iterdir()])


def test_missing_output(tmp_path, capsys):
    with pytest.raises(SystemExit) as exc:
        main(["batch", str(tmp_path)])
    assert exc.value.code == 2
    assert "-o/--output" in capsys.readouterr().err


def test_scheduler_address(tmp_path, capsys):
    distributed = pytest.importorskip("distributed")
    truth = write_synthetic_spectra(tmp_path / "s", 3, seed=8)
    out = tmp_path / "cat.ecsv"
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster:
        code = main(["batch", str(tmp_path / "s" / "*.fits"), "-o", str(out),
                     "--scheduler", cluster.scheduler_address])
    assert code == 0, capsys.readouterr().err
    table = Table.read(out, format="ascii.ecsv")
    assert sorted(table["file"]) == sorted(truth)
    assert max(abs(r["z"] - truth[r["file"]]) for r in table) < 2e-4


def test_batch_class_confidence_and_no_redshift(tmp_path, capsys):
    import sys
    from pathlib import Path

    from astropy.table import Table

    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
    import synthetic_spectra as ss

    d = tmp_path / "mixed"
    d.mkdir()
    for name, kind, kw in (("a_star.fits", "star", dict(velocity_kms=50.0)),
                           ("b_sky.fits", "sky", {}),
                           ("c_old.fits", "absorption-galaxy", dict(z=0.2))):
        lam, flux, err, _ = ss.make(kind, snr=15.0, seed=3, **kw)
        ss.write_fits(d / name, lam, flux, err)
    cat = tmp_path / "cat.ecsv"
    assert main(["batch", str(d), "-o", str(cat), "--workers", "1"]) == 0
    table = Table.read(cat, format="ascii.ecsv")
    rows = {Path(r["file"]).name: r for r in table}

    def flags(name):  # an empty flag list reads back as a masked value
        f = rows[name]["flags"]
        return [] if np.ma.is_masked(f) else str(f).split(",")

    assert rows["a_star.fits"]["class"] == "star"
    assert rows["c_old.fits"]["class"] == "absorption-galaxy"
    assert abs(rows["c_old.fits"]["z"] - 0.2) < 0.001
    assert "no_redshift" in flags("b_sky.fits")
    assert "no_redshift" not in flags("c_old.fits")
    assert 0 <= rows["c_old.fits"]["confidence"] <= 1
    capsys.readouterr()
