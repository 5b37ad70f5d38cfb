"""Tests of ``zline scan``."""

import json

import pytest
from astropy.io import fits

from zline.cli import main
from zline.physics.demo import write_demo_spectra


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    return write_demo_spectra(tmp_path_factory.mktemp("demo"))


def test_scan_json_galaxy(demo, capsys):
    assert main(["scan", str(demo["galaxy"]), "--format", "json", "--top", "3"]) == 0
    out = json.loads(capsys.readouterr().out)
    cands = out["candidates"]
    assert len(cands) == 3 and out["lines"] == "galaxy-emission"
    for c in cands:
        assert {"z", "score", "lines", "n_matched"} <= set(c)
        assert c["n_matched"] == len(c["lines"])
    assert [c["score"] for c in cands] == sorted((c["score"] for c in cands), reverse=True)
    z_true = fits.getheader(demo["galaxy"])["ZTRUE"]
    assert abs(cands[0]["z"] - z_true) < 1e-4 and "Hα" in cands[0]["lines"]


def test_scan_default_set_follows_axis(demo, capsys):
    # energy axis -> xray set; frequency axis -> radio set
    assert main(["scan", str(demo["xray"]), "--format", "json", "--z-max", "0.5"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["lines"] == "xray"
    assert abs(out["candidates"][0]["z"] - fits.getheader(demo["xray"], 1)["ZTRUE"]) < 1e-4
    assert main(["scan", str(demo["radio"]), "--format", "json", "--z-min", "-0.01",
                 "--z-max", "0.01", "--top", "1"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["lines"] == "radio"
    # VTRUE -12.6 km/s (radio convention) is z = 1/(1 - v/c) - 1 = -4.2e-5
    assert abs(out["candidates"][0]["z"] - (-4.203e-5)) < 1e-5


def test_scan_text(demo, capsys):
    assert main(["scan", str(demo["galaxy"]), "--lines", "galaxy-emission", "--top", "2"]) == 0
    text = capsys.readouterr().out.splitlines()
    assert text[1].split()[:2] == ["rank", "z"] and len(text) == 4
    assert text[2].split()[0] == "1" and abs(float(text[2].split()[1]) - 0.0734) < 1e-4


def test_scan_bad_file(tmp_path, capsys):
    bad = tmp_path / "broken.fits"
    bad.write_bytes(b"not a fits file at all")
    assert main(["scan", str(bad)]) != 0
    err = capsys.readouterr().err.strip()
    assert err.startswith("zline scan: error:") and "\n" not in err and "broken.fits" in err
    assert main(["scan", str(tmp_path / "missing.fits")]) != 0
    assert len(capsys.readouterr().err.strip().splitlines()) == 1


def test_scan_bad_range(demo, capsys):
    assert main(["scan", str(demo["galaxy"]), "--z-min", "2", "--z-max", "1"]) == 2
    assert "--z-min" in capsys.readouterr().err
