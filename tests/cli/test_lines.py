"""Tests of the ``zline lines`` command."""

import json
import subprocess
import sys

import astropy.units as u
import pytest
from astropy.table import QTable, Table

from zline.cli import main


def _run(capsys, *argv):
    code = main(["lines", *argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_ecsv_round_trip(capsys):
    code, out, err = _run(capsys, "H I", "--series", "Balmer", "--upper", "3-5", "--format", "ecsv")
    assert code == 0, err
    t = QTable.read(out.splitlines(), format="ascii.ecsv")
    assert list(t["label"]) == ["Hα", "Hβ", "Hγ"]
    assert t["rest"].unit == u.AA
    assert t["rest"][0].to_value(u.AA) == pytest.approx(6564.632, abs=0.03)  # NIST ASD Ritz (as quoted)
    assert set(["label", "species", "n_upper", "n_lower", "rest", "f_osc", "A_ul"]) <= set(t.colnames)
    assert t.meta["model"] == "qed"


def test_csv_components_air_and_shift(capsys):
    code, out, err = _run(capsys, "H I", "--lower", "2", "--upper", "3", "--components",
                          "--medium", "air", "--z", "0.1", "--velocity", "-50", "--format", "csv")
    assert code == 0, err
    t = Table.read(out.splitlines(), format="ascii.csv")
    assert "rest [Angstrom]" in t.colnames and "observed [Angstrom]" in t.colnames
    assert "j_upper" in t.colnames and len(t) == 7
    assert all(abs(x - 6562.8) < 0.2 for x in t["rest [Angstrom]"])


def test_json_radio(capsys):
    code, out, err = _run(capsys, "H I", "--lower", "110", "--delta-n", "1", "--unit", "MHz",
                          "--model", "reduced-mass", "--format", "json")
    assert code == 0, err
    doc = json.loads(out)
    assert doc["units"]["rest"] == "MHz"
    assert doc["lines"][0]["label"] == "H110α"
    assert doc["lines"][0]["rest"] == pytest.approx(4874.157, rel=1e-6)  # Lilley & Palmer 1968 (as quoted)


def test_text_default(capsys):
    code, out, err = _run(capsys, "He II", "--lower", "3", "--upper", "4")
    assert code == 0, err
    assert "He II 4686" in out and out.startswith("# ")


@pytest.mark.parametrize("argv, needle", [
    (["H I", "--model", "nope"], "--model"),
    (["H I", "--medium", "oil"], "--medium"),
    (["H I", "--format", "xml"], "--format"),
    (["H I", "--lower", "two"], "--lower"),
    (["H I", "--unit", "kg"], "--unit"),
    (["H I", "--unit", "parsnip"], "--unit"),
    (["H I", "--z", "x"], "--z"),
    (["H I", "--series", "Foo"], "--series"),
    (["H I", "--convention", "weird"], "--convention"),
    (["H I", "--air-formula", "x"], "--air-formula"),
    (["Xx IX"], "SPECIES"),
])
def test_bad_arguments_one_line(capsys, argv, needle):
    code, out, err = _run(capsys, *argv)
    assert code != 0
    assert err.count("\n") == 1 and needle in err and "Traceback" not in err


def test_subprocess():
    proc = subprocess.run([sys.executable, "-m", "zline", "lines", "H I", "--series", "Lyman",
                           "--upper", "2", "--format", "csv"], capture_output=True, text=True,
                          timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert "Lyα" in proc.stdout
    bad = subprocess.run([sys.executable, "-m", "zline", "lines", "H I", "--model", "x"],
                         capture_output=True, text=True, timeout=120)
    assert bad.returncode == 2 and "--model" in bad.stderr and "Traceback" not in bad.stderr
