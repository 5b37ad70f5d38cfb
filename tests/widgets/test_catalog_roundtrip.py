"""A catalogue row opens in the widget at its z, and the widget's solution goes back to the row."""

import astropy.units as u
import numpy as np
import pytest
from astropy.table import Table

from zline.physics.batch import catalog_row, measure_survey, write_synthetic_spectra
from zline.widgets import LineIdentifier


@pytest.fixture()
def catalog(tmp_path):
    write_synthetic_spectra(tmp_path / "spectra", 2, seed=3)
    path = tmp_path / "catalog.ecsv"
    measure_survey([tmp_path / "spectra"], path, z_min=0.0, z_max=1.0, workers=1)
    return path


def test_open_row_lock_solve_and_write_back(catalog):
    row = catalog_row(catalog, 0)
    w = LineIdentifier.from_catalog(catalog, 0)
    assert w.z == pytest.approx(row["z"], abs=1e-12)
    # lock the two strongest predicted lines that fall in the data, as clicks would
    lam = np.asarray(w.observed_positions().to_value(u.AA))
    lo, hi = np.nanmin(w.spectrum.spectral_axis.value), np.nanmax(w.spectrum.spectral_axis.value)
    inside = np.flatnonzero((lam > lo + 30) & (lam < hi - 30))
    strongest = inside[np.argsort(w._strength[inside])[::-1][:2]]
    for i in strongest:
        w.lock(near=lam[i] * u.AA, line=w._labels[i])
    z, z_err = w.solve()
    done = w.write_to_catalog(who="checker", note="two lines")
    table = Table.read(catalog, format="ascii.ecsv")
    assert table["z"][0] == row["z"]  # blind z kept
    assert table["z_checked"][0] == pytest.approx(z, abs=1e-12)
    assert table["z_checked_err"][0] == pytest.approx(z_err, rel=1e-9)
    assert table["checked_by"][0] == "checker" and done["note"] == "two lines"
    # the next opening starts from the checked z
    again = LineIdentifier.from_catalog(catalog, 0)
    assert again.z == pytest.approx(z, abs=1e-12)


def test_write_to_catalog_needs_a_catalog_and_a_known_row(catalog):
    w = LineIdentifier(catalog_row(catalog, 1)["file"])
    with pytest.raises(ValueError, match="pass catalog="):
        w.write_to_catalog()
    with pytest.raises(KeyError, match="no row for file 'missing.fits'"):
        LineIdentifier.from_catalog(catalog, "missing.fits")
    # an explicit catalogue works for a widget opened from the file itself
    done = w.write_to_catalog(catalog, who="checker")
    assert done["z_err"] is None  # nothing solved: the overlay's z is written without an error
