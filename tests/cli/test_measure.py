"""Tests of ``zline measure`` through zline.cli.main."""

import json

import pytest
from astropy.table import QTable

from zline.cli import main
from zline.physics.demo import DEMO_TRUTH, write_demo_spectra


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    return write_demo_spectra(tmp_path_factory.mktemp("demo"))


def test_json_nebula_velocity(demo, capsys):
    assert main(["measure", str(demo["nebula"]), "--z", "0", "--format", "json"]) == 0
    out = json.loads(capsys.readouterr().out)
    for key in ("z", "z_err", "velocity", "velocity_err", "lines"):
        assert key in out
    assert abs(out["velocity"] - DEMO_TRUTH["nebula"]["velocity"].value) < 3
    line = out["lines"][0]
    for key in ("label", "rest", "observed", "observed_err", "flux", "flux_err", "ew",
                "fwhm_kms", "snr", "residual_kms", "upper_limit"):
        assert key in line


def test_json_radio_velocity(demo, capsys):
    rc = main(["measure", str(demo["radio"]), "--z", "0", "--convention", "radio",
               "--format", "json"])
    assert rc == 0
    out = json.loads(capsys.readouterr().out)
    assert out["convention"] == "radio"
    assert abs(out["velocity"] - DEMO_TRUTH["radio"]["velocity"].value) < 1.0


def test_ecsv_output_file(demo, tmp_path, capsys):
    target = tmp_path / "lines.ecsv"
    z = DEMO_TRUTH["galaxy"]["z"]
    assert main(["measure", str(demo["galaxy"]), "--z", str(z), "--format", "ecsv",
                 "-o", str(target)]) == 0
    t = QTable.read(target)
    assert abs(t.meta["z"] - z) < 2e-4 and t.meta["source_file"] == str(demo["galaxy"])
    assert str(t["observed"].unit) == "Angstrom"
    # the file is kept on a second run
    assert main(["measure", str(demo["galaxy"]), "--z", str(z), "--format", "ecsv",
                 "-o", str(target)]) == 2
    assert "exists" in capsys.readouterr().err


def test_text_and_latex(demo, capsys):
    assert main(["measure", str(demo["galaxy"]), "--z", "0.0734"]) == 0
    assert "velocity" in capsys.readouterr().out
    assert main(["measure", str(demo["galaxy"]), "--z", "0.0734", "--format", "latex"]) == 0
    assert "\\pm" in capsys.readouterr().out


def test_errors_are_one_line(demo, tmp_path, capsys):
    assert main(["measure", str(demo["galaxy"]), "--z", "0.07", "--format", "fits"]) == 2
    err = capsys.readouterr().err
    assert "needs -o" in err and err.count("\n") == 1
    assert main(["measure", str(tmp_path / "missing.fits"), "--z", "0"]) != 0
    err = capsys.readouterr().err
    assert "missing.fits" in err and err.count("\n") == 1
    with pytest.raises(SystemExit) as exc:
        main(["measure", str(demo["galaxy"]), "--z", "0", "--convention", "fast"])
    assert exc.value.code == 2
    assert capsys.readouterr().err.count("\n") == 1


def test_fits_needs_output_and_writes(demo, tmp_path):
    target = tmp_path / "lines.fits"
    assert main(["measure", str(demo["xray"]), "--z", "0.0179", "--format", "fits",
                 "-o", str(target)]) == 0
    assert QTable.read(target)["observed"].unit == "keV"


def test_overwrite_and_blend_options(demo, tmp_path, capsys):
    target = tmp_path / "lines.json"
    target.write_text("my notes\n")
    z = str(DEMO_TRUTH["galaxy"]["z"])
    base = ["measure", str(demo["galaxy"]), "--z", z, "--format", "json", "-o", str(target)]
    assert main(base) == 2
    assert "--overwrite" in capsys.readouterr().err
    assert target.read_text() == "my notes\n"  # refused: the user's file is untouched
    assert main(base + ["--overwrite"]) == 2  # asked, but zline did not write it: refused
    err = capsys.readouterr().err
    assert "lines.json' exists and is a file zline did not write" in err
    assert err.count("\n") == 1 and target.read_text() == "my notes\n"
    target.unlink()
    assert main(base) == 0
    assert main(base + ["--overwrite"]) == 0  # zline's own result: replaced when asked
    joint = {d["label"]: d for d in json.loads(target.read_text())["lines"]}
    # [O II] 3726/3729 fitted together (the default blend distance) ...
    assert "[O II] 3729" in joint["[O II] 3726"]["blend"]
    assert main(base + ["--overwrite", "--blend", "0"]) == 0
    alone = {d["label"]: d for d in json.loads(target.read_text())["lines"]}
    # ... and each with its own centre with --blend 0 (still in one fit: their windows overlap)
    def centre_ratio(lines):
        return lines["[O II] 3729"]["observed"] / lines["[O II] 3726"]["observed"]

    rest_ratio = joint["[O II] 3729"]["rest"] / joint["[O II] 3726"]["rest"]
    assert centre_ratio(joint) == pytest.approx(rest_ratio, rel=1e-12)
    assert abs(centre_ratio(alone) - rest_ratio) > 1e-9
    assert "[O II] 3729" in alone["[O II] 3726"]["blend"]
    assert main(["measure", str(demo["galaxy"]), "--z", z, "--blend", "-5"]) == 2
    assert "--blend must be a velocity >= 0" in capsys.readouterr().err


def test_window_option(demo, capsys):
    # the galaxy demo's truth, tried 300 km/s off: the default window finds it, a 100 km/s one
    # does not reach it
    z = DEMO_TRUTH["galaxy"]["z"]
    trial = str(z + 300 / 299792.458 * (1 + z))
    assert main(["measure", str(demo["galaxy"]), "--z", trial, "--format", "json"]) == 0
    wide = json.loads(capsys.readouterr().out)
    assert abs(wide["z"] - z) < 3 * wide["z_err"] + 2e-5
    assert wide["search"]["found"] and abs(wide["search"]["shift"] + 300) < 30
    assert main(["measure", str(demo["galaxy"]), "--z", trial, "--format", "json",
                 "--window", "100"]) == 0
    narrow = json.loads(capsys.readouterr().out)
    assert narrow["search"]["window"] == 100
    assert narrow["n_detected"] < wide["n_detected"]
    assert main(["measure", str(demo["galaxy"]), "--z", trial, "--window", "0"]) == 2
    assert "--window must be a velocity > 0" in capsys.readouterr().err
    assert main(["measure", str(demo["galaxy"]), "--z", trial]) == 0
    assert "km/s, set shifted by -" in capsys.readouterr().out
