"""Tests of ``zline info``."""

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from astropy.io import fits

from zline.cli import main

VENV_ZLINE = Path(sys.executable).with_name("zline")


@pytest.fixture
def spectrum_file(tmp_path):
    h = fits.PrimaryHDU(np.linspace(1, 2, 50).astype("f4"))
    h.header.update(CTYPE1="AWAV", CUNIT1="Angstrom", CRVAL1=6000.0, CDELT1=0.5, CRPIX1=1.0,
                    BUNIT="erg/(s cm2 Angstrom)", OBJECT="Invented-3")
    err = fits.ImageHDU(np.full(50, 0.1, dtype="f4"), name="ERR")
    path = tmp_path / "demo.fits"
    fits.HDUList([h, err]).writeto(path)
    return path


def test_info_json(spectrum_file, capsys):
    assert main(["info", str(spectrum_file), "--format", "json"]) == 0
    info = json.loads(capsys.readouterr().out)
    assert info["n_pixels"] == 50
    assert info["spectral_min"] == pytest.approx(6000.0)
    assert info["spectral_max"] == pytest.approx(6000.0 + 49 * 0.5)  # CRVAL1 + CDELT1 (N - CRPIX1)
    assert info["spectral_unit"] == "Angstrom" and info["medium"] == "air"
    assert info["uncertainty"] == "stdev" and info["n_masked"] == 0
    assert info["header"]["OBJECT"] == "Invented-3"
    for key in ("hdu", "layout", "flux_unit", "file", "assumptions"):
        assert key in info


def test_info_text_and_hdu_option(spectrum_file, capsys):
    assert main(["info", str(spectrum_file), "--hdu", "0"]) == 0
    out = capsys.readouterr().out
    assert "layout" in out and "air" in out and "6000" in out
    assert main(["info", str(spectrum_file), "--hdu", "PRIMARY"]) == 0


@pytest.mark.parametrize("content", [b"", b"this is not FITS at all", None])
def test_info_bad_file_one_line_no_traceback(tmp_path, capsys, content):
    path = tmp_path / "bad.fits"
    if content is not None:
        path.write_bytes(content)
    assert main(["info", str(path)]) != 0
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "bad.fits" in err and "Traceback" not in err


def test_info_bad_hdu_name(spectrum_file, capsys):
    assert main(["info", str(spectrum_file), "--hdu", "NOPE"]) == 1
    assert "NOPE" in capsys.readouterr().err


def test_info_subprocess(spectrum_file, tmp_path):
    exe = VENV_ZLINE if VENV_ZLINE.exists() else Path(__file__).parents[2] / ".venv/bin/zline"
    ok = subprocess.run([str(exe), "info", str(spectrum_file), "--format", "json"],
                        capture_output=True, text=True, timeout=120)
    assert ok.returncode == 0, ok.stderr
    assert json.loads(ok.stdout)["medium"] == "air"
    bad = tmp_path / "trunc.fits"
    bad.write_bytes(spectrum_file.read_bytes()[:3000])
    res = subprocess.run([str(exe), "info", str(bad)], capture_output=True, text=True, timeout=120)
    assert res.returncode != 0
    assert "trunc.fits" in res.stderr and "Traceback" not in res.stderr
    assert len(res.stderr.strip().splitlines()) == 1


#: Modules ``zline info`` must not import: it reads a file without building a specutils Spectrum.
HEAVY_FOR_INFO = ("specutils", "astropy.nddata", "astropy.wcs", "scipy")


@pytest.mark.parametrize("fmt", ["text", "json"])
def test_info_imports_no_specutils_nddata_or_wcs(spectrum_file, fmt):
    # a fresh interpreter runs the command; the heavy modules are looked up in sys.modules at exit
    code = ("import sys\nfrom zline.cli import main\n"
            "rc = main(sys.argv[1:])\n"
            f"print('LOADED', ','.join(m for m in {HEAVY_FOR_INFO!r} if m in sys.modules))\n"
            "sys.exit(rc)")
    run = subprocess.run([sys.executable, "-c", code, "info", str(spectrum_file), "--format", fmt],
                         capture_output=True, text=True, timeout=300)
    assert run.returncode == 0, run.stderr
    assert "6000" in run.stdout  # it did read the file
    last = run.stdout.strip().splitlines()[-1]
    assert last.startswith("LOADED")
    assert last.removeprefix("LOADED").strip() == "", f"zline info imported {last}"
