"""Survey headers: medium keywords, the primary BUNIT for table flux, the row-per-quantity 2D
layout; checked on invented files written here and on the real survey spectra (``realdata``)."""

import json

import numpy as np
import pytest
import astropy.units as u
from astropy.io import fits
from astropy.nddata import InverseVariance, StdDevUncertainty
from astropy.tests.helper import assert_quantity_allclose

from zline.physics.spectra import SpectrumFormatError, read_spectrum

N = 50
RNG = np.random.default_rng(11)
#: The flux unit SDSS states in its primary BUNIT (as written in the files' headers).
SDSS_FLUX_UNIT = u.Unit("1e-17 erg / (s cm2 Angstrom)")


def _rows_image(names, rows, **cards):
    h = fits.PrimaryHDU(np.asarray(rows, dtype="f4"))
    h.header["EXTEN0"] = names
    for key, value in cards.items():
        h.header[key.replace("_", "-") if key == "DC_FLAG" else key] = value
    return h


def _five_rows():
    flux = 100 + RNG.normal(0, 5, N)
    ivar = np.full(N, 0.04)
    ivar[7] = 0.0  # no data here
    norm = flux / 100
    andmask = np.zeros(N)
    andmask[20] = 4
    ormask = np.zeros(N)
    ormask[30] = 1  # any-exposure flag: not a reason to drop the pixel
    return flux, ivar, norm, andmask, ormask


def _log_rows_file(tmp_path):
    """The five rows on a log10 axis by DC-FLAG, VACUUM = T, written to rows.fits: (path, rows,
    HDU)."""
    rows = _five_rows()
    h = _rows_image("Flux Inverse Subcontinuum Andmask Ormask", rows, CTYPE1="LINEAR",
                    CRVAL1=3.5682, CD1_1=1e-4, CRPIX1=1, DC_FLAG=1, VACUUM=True)
    path = tmp_path / "rows.fits"
    h.writeto(path)
    return path, rows, h


def test_row_per_quantity_image_with_log_wcs(tmp_path):
    """Rows flux, inverse variance, normalised flux, masks; log10 axis by DC-FLAG; VACUUM = T."""
    path, rows, _ = _log_rows_file(tmp_path)
    spec = read_spectrum(path)
    z = spec.meta["zline"]
    assert z["layout"] == "image-rows"
    np.testing.assert_allclose(spec.flux.value, rows[0].astype("f4"))
    assert isinstance(spec.uncertainty, InverseVariance)
    np.testing.assert_allclose(spec.uncertainty.array, rows[1].astype("f4"))
    assert spec.mask[7] and spec.mask[20] and not spec.mask[30]
    assert int(spec.mask.sum()) == 2
    # log10-linear axis: lambda_p = 10**(CRVAL1 + CD1_1 (p - CRPIX1)), p counted from 1
    assert_quantity_allclose(spec.spectral_axis, 10 ** (3.5682 + 1e-4 * np.arange(N)) * u.AA,
                             rtol=1e-12)
    assert z["medium"] == "vacuum" and z["medium_assumed"] is False
    assert any("VACUUM = T" in note for note in z["notes"])


def test_row_per_quantity_image_with_wavelength_row_and_coeff_keywords(tmp_path):
    flux, ivar, _, andmask, ormask = _five_rows()
    wave = 10 ** (3.6 + 1e-4 * np.arange(N))
    h = _rows_image("Flux Invvar Wavelength Andmask Ormask", [flux, ivar, wave, andmask, ormask],
                    CUNIT1="Angstrom", VACUUM=False)
    path = tmp_path / "rows_wave.fits"
    h.writeto(path)
    spec = read_spectrum(path)
    assert_quantity_allclose(spec.spectral_axis, wave.astype("f4") * u.AA, rtol=1e-6)
    assert spec.meta["zline"]["medium"] == "air"  # VACUUM = F
    # no CRVAL1, only the COEFF0/COEFF1 pair: log10(lambda) = COEFF0 + COEFF1 * i
    h = _rows_image("Flux Inverse Subcontinuum Andmask Ormask", _five_rows(), COEFF0=3.58,
                    COEFF1=2e-4, VACUUM=True)
    path = tmp_path / "rows_coeff.fits"
    h.writeto(path)
    spec = read_spectrum(path)
    assert_quantity_allclose(spec.spectral_axis, 10 ** (3.58 + 2e-4 * np.arange(N)) * u.AA,
                             rtol=1e-12)


def test_other_row_of_a_named_row_image_and_unnamed_2d(tmp_path):
    path, rows, h = _log_rows_file(tmp_path)
    spec = read_spectrum(path, row=2)  # the normalised flux, on its own
    np.testing.assert_allclose(spec.flux.value, rows[2].astype("f4"))
    assert spec.uncertainty is None
    assert read_spectrum(path, row=0).meta["zline"]["layout"] == "image-rows"
    del h.header["EXTEN0"]
    h.writeto(path, overwrite=True)
    with pytest.raises(SpectrumFormatError, match=r"rows\.fits.*NAXIS=2.*row="):
        read_spectrum(path)


def test_medium_keyword_contradicting_the_axis_type_is_said(tmp_path):
    h = fits.PrimaryHDU(np.ones(N, "f4"))
    h.header.update(CTYPE1="AWAV", CUNIT1="Angstrom", CRVAL1=5000.0, CDELT1=1.0, CRPIX1=1.0,
                    VACUUM=True)
    path = tmp_path / "conflict.fits"
    h.writeto(path)
    z = read_spectrum(path).meta["zline"]
    assert z["medium"] == "air"
    assert any("VACUUM" in a and "contradicts" in a for a in z["assumptions"])


def test_table_flux_unit_from_primary_bunit_and_vacuum_from_primary(tmp_path):
    loglam = 3.58 + 1e-4 * np.arange(N)
    prim = fits.PrimaryHDU()
    prim.header["BUNIT"] = "1E-17 erg/cm^2/s/Ang"  # spelled as survey headers spell it
    prim.header["VACUUM"] = True
    tab = fits.BinTableHDU.from_columns([
        fits.Column("flux", "E", array=RNG.normal(5, 1, N)),
        fits.Column("loglam", "E", array=loglam),
        fits.Column("ivar", "E", array=np.full(N, 2.0)),
        fits.Column("and_mask", "J", array=np.zeros(N, int))])
    path = tmp_path / "coadd.fits"
    fits.HDUList([prim, tab]).writeto(path)
    spec = read_spectrum(path)
    assert spec.flux.unit == SDSS_FLUX_UNIT
    assert spec.uncertainty.unit == SDSS_FLUX_UNIT ** -2
    z = spec.meta["zline"]
    assert z["medium"] == "vacuum" and not z["medium_assumed"]
    assert not any("dimensionless" in a for a in z["assumptions"])


# ---------------------------------------------------------------- real survey files


def test_realdata_every_file_reads_with_medium_and_flux_unit_from_header(realdata):
    for row in realdata:
        spec = read_spectrum(row["path"])
        z = spec.meta["zline"]
        # both surveys record vacuum wavelengths (manifest; primary VACUUM = T)
        assert z["medium"] == "vacuum" and z["medium_assumed"] is False, row["file"]
        assert not any("air or vacuum" in a for a in z["assumptions"]), row["file"]
        header = fits.getheader(row["path"], 0)
        if "BUNIT" in header:  # SDSS: 1E-17 erg/cm^2/s/Ang in the primary
            assert spec.flux.unit == SDSS_FLUX_UNIT, row["file"]
            assert isinstance(spec.uncertainty, InverseVariance), row["file"]
        lo, hi = spec.spectral_axis.to_value(u.AA)[[0, -1]]
        assert 3500 < lo < 4200 and 8800 < hi < 10500, (row["file"], lo, hi)


def test_realdata_lamost_stars_read_with_errors_and_mask(realdata):
    stars = [row for row in realdata if "_sp" in row["file"]]
    assert len(stars) == 6
    for row in stars:
        spec = read_spectrum(row["path"])
        z = spec.meta["zline"]
        assert isinstance(spec.uncertainty, (InverseVariance, StdDevUncertainty)), row["file"]
        assert spec.mask is not None and spec.mask.shape == spec.flux.shape
        with fits.open(row["path"]) as hdul:
            header = hdul[0].header
            if hdul[0].data is not None and hdul[0].data.ndim == 2:
                data = hdul[0].data
                assert z["layout"] == "image-rows", row["file"]
                np.testing.assert_array_equal(spec.flux.value, data[0])
                np.testing.assert_array_equal(spec.uncertainty.array, data[1])
                # a pixel is bad where the inverse variance is 0 or the AND mask is set
                bad = (data[1] <= 0) | (data[3] != 0) | ~np.isfinite(data[0])
                np.testing.assert_array_equal(spec.mask, bad)
        # log10-linear: the first pixel is at 10**COEFF0 (log10 of the first wavelength)
        assert spec.spectral_axis[0].to_value(u.AA) == pytest.approx(10 ** header["COEFF0"],
                                                                     rel=1e-4)


def test_realdata_info_says_vacuum_from_the_header_and_row_option(realdata, capsys):
    from zline.cli import main

    sdss = next(row["path"] for row in realdata if row["kind"] == "qso")
    assert main(["info", sdss, "--format", "json"]) == 0
    captured = capsys.readouterr()
    info = json.loads(captured.out)
    assert info["medium"] == "vacuum" and info["medium_assumed"] is False
    assert info["flux_unit"] == SDSS_FLUX_UNIT.to_string()
    assert "medium-assumed" not in captured.err and "flux-unit" not in captured.err
    star = next(row["path"] for row in realdata if row["file"].endswith("_sp06-008.fits"))
    assert main(["info", star, "--row", "2", "--format", "json"]) == 0  # the normalised flux row
    info = json.loads(capsys.readouterr().out)
    assert info["uncertainty"] is None and any("row 2" in note for note in info["notes"])
    with fits.open(star) as hdul:
        assert info["n_pixels"] == hdul[0].header["NAXIS1"]
