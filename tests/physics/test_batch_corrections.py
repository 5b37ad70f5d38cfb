"""Checked redshifts written back to a survey catalogue survive a rerun and keep the blind z."""

import os

import numpy as np
import pytest
from astropy.table import Table

from zline.physics.batch import (CORRECTION_COLUMNS, catalog_row, measure_survey, parts_directory,
                                 record_correction, write_synthetic_spectra)


@pytest.fixture(scope="module")
def survey(tmp_path_factory):
    root = tmp_path_factory.mktemp("survey")
    write_synthetic_spectra(root / "spectra", 4, seed=7)
    catalog = root / "catalog.ecsv"
    measure_survey([root / "spectra"], catalog, z_min=0.0, z_max=1.0, workers=1)
    return root, catalog


def test_catalog_row_by_index_and_by_file(survey):
    _, catalog = survey
    first = catalog_row(catalog, 0)
    same = catalog_row(catalog, os.path.basename(first["file"]))
    assert same["file"] == first["file"] and same["z"] == first["z"]
    with pytest.raises(IndexError, match="out of range"):
        catalog_row(catalog, 99)
    with pytest.raises(KeyError, match="no row for file 'nope.fits'"):
        catalog_row(catalog, "nope.fits")


def test_correction_keeps_blind_z_records_who_and_survives_rerun(survey):
    root, catalog = survey
    row = catalog_row(catalog, 1)
    corr = record_correction(catalog, row["file"], row["z"] + 1e-4, 2e-5, who="tester",
                             note="checked Hα and [O III]")
    table = Table.read(catalog, format="ascii.ecsv")
    assert set(CORRECTION_COLUMNS) <= set(table.colnames)
    i = list(table["file"]).index(row["file"])
    assert table["z"][i] == row["z"]  # the blind redshift is never overwritten
    assert table["z_checked"][i] == pytest.approx(row["z"] + 1e-4, abs=1e-12)
    assert table["checked_by"][i] == "tester"
    assert table["checked_at"][i] == corr["when"]
    others = [k for k in range(len(table)) if k != i]
    assert np.all(np.isnan(np.asarray(table["z_checked"])[others]))
    assert table.meta["zline_corrections"][-1]["z_blind"] == row["z"]
    # a rerun rebuilds the catalogue from its records and keeps the correction
    measure_survey([root / "spectra"], catalog, z_min=0.0, z_max=1.0, workers=1)
    again = Table.read(catalog, format="ascii.ecsv")
    assert again["z_checked"][i] == pytest.approx(row["z"] + 1e-4, abs=1e-12)
    assert again["check_note"][i] == "checked Hα and [O III]"


def test_unreadable_correction_log_is_a_clear_error(tmp_path, survey):
    _, catalog = survey
    copy = tmp_path / "copy.ecsv"
    copy.write_text(open(catalog).read())
    os.makedirs(parts_directory(copy), exist_ok=True)
    with open(os.path.join(parts_directory(copy), "corrections.json"), "w") as fh:
        fh.write("{not json")
    row = catalog_row(copy, 0)
    with pytest.raises(ValueError, match="corrections.json: the correction log is not readable JSON"):
        record_correction(copy, row["file"], 0.1)
    with pytest.raises(ValueError, match="z must be a finite number"):
        record_correction(catalog, row["file"], float("nan"))
