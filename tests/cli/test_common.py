"""The options and warnings every spectrum-reading command shares: ``--row``, one stderr line per
reader assumption, JSON without NaN."""

import json

import numpy as np
import pytest
from astropy.io import fits

from zline.cli import main
from zline.cli._common import json_safe

N = 400
# Rest vacuum wavelengths in Angstrom, from memory (NIST ASD values): H-alpha, [N II] 6585.
LINES = (6564.61, 6585.27)


def _emission_row(z, n=N):
    wave = 6500.0 + 1.0 * np.arange(n)
    flux = 1.0 + np.random.default_rng(5).normal(0, 0.05, n)
    for rest, amp in zip(LINES, (10.0, 3.0)):
        flux += amp * np.exp(-0.5 * ((wave - rest * (1 + z)) / 2.0) ** 2)
    return flux


@pytest.fixture
def two_d(tmp_path):
    """Row 0 flat, row 1 with lines at z = 0.01, row 2 flat: a 2D image without row names."""
    flat = 1.0 + np.random.default_rng(6).normal(0, 0.05, (3, N))
    data = np.stack([flat[0], _emission_row(0.01), flat[2]]).astype("f4")
    h = fits.PrimaryHDU(data)
    h.header.update(CTYPE1="WAVE", CUNIT1="Angstrom", CRVAL1=6500.0, CDELT1=1.0, CRPIX1=1.0,
                    BUNIT="1e-17 erg/(s cm2 Angstrom)")
    path = tmp_path / "stack.fits"
    h.writeto(path)
    return path


def test_row_option_on_info_scan_and_measure(two_d, capsys):
    assert main(["info", str(two_d)]) == 1
    assert "row=" in capsys.readouterr().err  # the reader asks for a row
    assert main(["info", str(two_d), "--row", "1", "--format", "json"]) == 0
    info = json.loads(capsys.readouterr().out)
    assert info["n_pixels"] == N and any("row 1" in note for note in info["notes"])
    assert main(["measure", str(two_d), "--row", "1", "--z", "0.0101", "--lines",
                 "galaxy-emission", "--format", "json"]) == 0
    result = json.loads(capsys.readouterr().out)
    assert result["z"] == pytest.approx(0.01, abs=2e-4)
    assert main(["measure", str(two_d), "--row", "7", "--z", "0.01"]) == 1
    assert "row=7" in capsys.readouterr().err
    assert main(["scan", str(two_d), "--row", "1", "--z-max", "0.1", "--format", "json"]) == 0
    best = json.loads(capsys.readouterr().out)["candidates"][0]
    assert best["z"] == pytest.approx(0.01, abs=1e-3)


def test_each_assumption_is_one_warning_line(tmp_path, capsys):
    h = fits.PrimaryHDU(_emission_row(0.0).astype("f4"))
    h.header.update(CTYPE1="WAVE", CRVAL1=4000.0, CDELT1=2.0)  # no CUNIT1, CRPIX1, BUNIT
    path = tmp_path / "bare.fits"
    h.writeto(path)
    for command in (["info"], ["scan", "--z-max", "0.5"], ["measure", "--z", "0"]):
        code = main([command[0], str(path), *command[1:]])
        err = capsys.readouterr().err.strip().splitlines()
        warnings = [line for line in err if line.startswith(f"zline {command[0]}: warning: ")]
        codes = {line.rsplit("[", 1)[1].rstrip("]") for line in warnings}
        assert {"axis-unit-assumed", "axis-reference-default", "flux-unit-missing"} <= codes, err
        assert code in (0, 2)  # measure may find no line: that is its own error, after warnings


def test_stated_vacuum_gives_no_medium_warning(tmp_path, capsys):
    h = fits.PrimaryHDU(np.ones(N, "f4"))
    h.header.update(CTYPE1="LINEAR", CUNIT1="Angstrom", CRVAL1=4000.0, CDELT1=2.0, CRPIX1=1.0,
                    BUNIT="Jy", VACUUM=True)
    path = tmp_path / "vac.fits"
    h.writeto(path)
    assert main(["info", str(path)]) == 0
    captured = capsys.readouterr()
    assert captured.err == "" and "vacuum" in captured.out
    h.header["VACUUM"] = False
    h.writeto(path, overwrite=True)
    assert main(["info", str(path), "--format", "json"]) == 0
    assert json.loads(capsys.readouterr().out)["medium"] == "air"


def test_json_safe_turns_non_finite_into_null():
    out = json_safe({"a": float("nan"), "b": [np.float64("inf"), 1.5], "c": {"d": -np.inf},
                     "e": "text", "f": np.float32(2.0)})
    assert out == {"a": None, "b": [None, 1.5], "c": {"d": None}, "e": "text", "f": 2.0}
    json.dumps(out, allow_nan=False)  # would raise on NaN
