"""Tests of zline.physics.tables: paper tables, atomic writes, rounding and LaTeX escaping."""

import hashlib
import os

import astropy.units as u
import numpy as np
import pytest
from astropy.table import Table
from astropy.tests.helper import assert_quantity_allclose

from zline.physics.demo import DEMO_TRUTH, write_demo_spectra
from zline.physics.fitting import fit_line
from zline.physics.identify import Lock, solve_redshift
from zline.physics.spectra import read_spectrum
from zline.physics._atomic import NotZlineFileError
from zline.physics.tables import (TABLE_FORMATS, format_value_error,
                                  line_table_for_paper, read_table, write_table)

# Invented labels to exercise escaping; rest wavelengths of Halpha, Hbeta, [O III] (vacuum,
# common practice values to 0.01 A, good enough to find the lines).
_LINES = [("H_alpha & co", 6564.61), ("H$\\beta$", 4862.68), ("[O III] 5008 #1 50%", 5008.24)]


@pytest.fixture(scope="module")
def galaxy(tmp_path_factory):
    d = tmp_path_factory.mktemp("demo")
    paths = write_demo_spectra(d)
    spec = read_spectrum(paths["galaxy"])
    z = DEMO_TRUTH["galaxy"]["z"]
    locks = []
    for label, rest in _LINES:
        fit = fit_line(spec, rest * (1 + z) * u.AA, label=label)
        locks.append(Lock.from_fit(label, rest * u.AA, fit))
    sol = solve_redshift(locks)
    return paths["galaxy"], spec, locks, sol


@pytest.fixture(scope="module")
def table(galaxy):
    _, spec, locks, sol = galaxy
    return line_table_for_paper(locks, sol, spec, settings={"caption": "Lines of 50% & more"})


def test_table_columns_units_meta(galaxy, table):
    path, spec, locks, sol = galaxy
    assert table["rest"].unit == u.AA and table["observed"].unit == u.AA
    assert table["fwhm_kms"].unit == u.km / u.s
    assert table["flux"].unit == locks[0].fit.flux.unit
    assert_quantity_allclose(table["observed"][0], locks[0].observed)
    assert_quantity_allclose(table["flux_err"][1], locks[1].fit.flux_err)
    assert_quantity_allclose(table["residual_kms"], sol.residuals)
    assert table.meta["z"] == sol.z and table.meta["z_err"] == sol.z_err
    assert table.meta["convention"] == "optical" and table.meta["medium"] == "vacuum"
    with open(path, "rb") as fh:
        assert table.meta["source_sha256"] == hashlib.sha256(fh.read()).hexdigest()
    assert table.meta["source_file"] == str(path) and table.meta["source_hdu"] == 0
    assert table.meta["constants"].startswith("CODATA")
    assert table.meta["date"].endswith("+00:00")
    assert not table["upper_limit"].any()


def test_bad_settings_and_items(galaxy):
    _, spec, locks, sol = galaxy
    with pytest.raises(ValueError, match="unknown settings.*'colour'"):
        line_table_for_paper(locks, settings={"colour": 1})
    with pytest.raises(TypeError, match="item 0 must be a Lock"):
        line_table_for_paper([3.0])
    with pytest.raises(ValueError, match="empty"):
        line_table_for_paper([])


@pytest.mark.parametrize("fmt", ["ecsv", "fits"])
def test_round_trip_keeps_units_and_meta(table, tmp_path, fmt):
    path = write_table(table, tmp_path / f"lines.{fmt}", format=fmt)
    back = read_table(path, format=fmt)
    for name in ("rest", "observed", "flux", "ew", "fwhm_kms", "residual_kms"):
        assert back[name].unit == table[name].unit
        assert_quantity_allclose(back[name], table[name], rtol=1e-12)
    assert list(back["label"]) == list(table["label"])
    for key in ("z", "z_err", "convention", "medium", "source_sha256", "source_hdu",
                "zline_version", "constants", "frame", "air_formula"):
        if isinstance(table.meta[key], float):
            assert back.meta[key] == pytest.approx(table.meta[key], rel=1e-12)
        else:
            assert back.meta[key] == table.meta[key]


def test_no_clobber_and_atomic(table, tmp_path):
    target = tmp_path / "lines.ecsv"
    target.write_text("precious")
    with pytest.raises(FileExistsError, match="lines.ecsv"):
        write_table(table, target)
    with pytest.raises(NotZlineFileError, match="lines.ecsv' exists and is a file zline did not"):
        write_table(table, target, overwrite=True)  # asked, but zline did not write it
    assert target.read_text() == "precious"
    target.unlink()
    write_table(table[:1], target)
    write_table(table, target, overwrite=True)  # a zline line table: replaced when asked
    assert list(read_table(target)["label"]) == list(table["label"])
    assert [p.name for p in tmp_path.iterdir()] == ["lines.ecsv"]  # no temporary left behind


def test_unknown_format(table, tmp_path):
    with pytest.raises(ValueError, match="unknown format 'xls'.*ecsv"):
        write_table(table, tmp_path / "x.xls", format="xls")


# Rule: the error keeps 2 significant digits when its leading digit is 1 or 2, else 1; the
# value is rounded to the same decimal place (common practice).
@pytest.mark.parametrize("value, error, expected", [
    (6564.6132, 0.0123, ("6564.613", "0.012")),   # leading 1 -> 2 digits
    (1234.5, 67, ("1230", "70")),                  # leading 6 -> 1 digit, tens place
    (1.23456, 0.0096, ("1.235", "0.010")),        # rounds up to leading 1 -> 2 digits
    (5.4321, 0.25, ("5.43", "0.25")),              # leading 2 -> 2 digits
    (5.4321, 0.35, ("5.4", "0.3")),                # leading 3 -> 1 digit (0.35 is 0.3499... in binary)
    (-12.6789, 0.46, ("-12.7", "0.5")),
    (98765.0, 1500.0, ("98800", "1500")),
    (3.0, float("nan"), ("3", "")),
])
def test_rounding_rule(value, error, expected):
    assert format_value_error(value, error) == expected


@pytest.mark.parametrize("fmt", ["latex", "aastex"])
def test_latex_output(table, tmp_path, fmt):
    path = write_table(table, tmp_path / f"lines.{fmt}.tex", format=fmt)
    text = open(path).read()
    assert text.startswith("% zline line table\n")
    assert r"H\_alpha \& co" in text and "H$\\beta$" in text and r"\#1 50\%" in text
    assert r"{}[O\,\textsc{iii}]~5008" in text  # a row may not start with a bare [
    assert r"Lines of 50\% \& more" in text
    # headings in words with their units, never raw column names
    assert "fwhm" not in text and "observed\\_err" not in text
    assert r"$\lambda_{\mathrm{obs}}$" in text and "FWHM" in text
    assert r"\mathrm{km\,s^{-1}}" in text and r"\mathrm{\mathring{A}}" in text
    for row in table:
        v, e = format_value_error(row["observed"].value, row["observed_err"].value)
        assert f"${v} \\pm {e}$" in text
    zv, ze = format_value_error(table.meta["z"], table.meta["z_err"])
    assert f"$z = {zv} \\pm {ze}$" in text
    assert "optical velocity convention" in text and "Rest positions in vacuum" in text


def test_notes_name_line_set_and_level_model(galaxy, tmp_path):
    _, spec, locks, sol = galaxy
    t = line_table_for_paper(locks, sol, spec, settings={"line_set": "galaxy-emission",
                                                         "level_model": "qed"})
    assert t.meta["line_set"] == "galaxy-emission" and t.meta["level_model"] == "qed"
    text = open(write_table(t, tmp_path / "t.tex", format="aastex")).read()
    assert "Line set: galaxy-emission." in text and "from the qed level model" in text
    assert r"\tablecomments{$z = " in text


def test_upper_limit_row(galaxy, tmp_path):
    _, spec, _, _ = galaxy
    # An invented line position with no line: the fit gives a 3-sigma limit.
    fit = fit_line(spec, 6000.0 * u.AA, label="nothing here", fwhm=5 * u.AA)
    assert not fit.detected
    t = line_table_for_paper([{"label": "nothing here", "rest": 5590.0 * u.AA, "fit": fit}])
    assert t["upper_limit"][0]
    assert_quantity_allclose(t["flux_limit"][0], fit.upper_limit)
    text = open(write_table(t, tmp_path / "ul.tex", format="latex")).read()
    assert "$<" in text


def test_formats_listed():
    assert set(TABLE_FORMATS) == {"ecsv", "fits", "csv", "latex", "aastex"}


def test_csv_written(table, tmp_path):
    path = write_table(table, tmp_path / "lines.csv", format="csv")
    back = Table.read(path, format="ascii.csv")
    assert np.allclose(back["observed"], table["observed"].value)
    assert os.path.getsize(path) > 0
