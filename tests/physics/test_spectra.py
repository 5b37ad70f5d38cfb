"""Tests of zline.physics.spectra: every layout round-trips through a file written here."""

import gzip
import io
import warnings

import numpy as np
import pytest
import astropy.units as u
from astropy.io import fits
from astropy.nddata import InverseVariance, StdDevUncertainty, VarianceUncertainty
from astropy.tests.helper import assert_quantity_allclose
from astropy.wcs import WCS
from specutils import Spectrum

from zline.physics.spectra import (SpectrumFormatError, describe_spectrum, read_spectrum,
                                   spectrum_from_arrays)

N = 64
RNG = np.random.default_rng(7)


def _flux(n=N):
    return 1.0 + RNG.normal(0, 0.1, n)


def _write(path, *hdus):
    fits.HDUList(list(hdus)).writeto(path)
    return path


def _image(header=None, data=None, cls=fits.PrimaryHDU, **kw):
    h = cls(data=np.asarray(_flux() if data is None else data, dtype="f4"), **kw)
    for k, v in (header or {}).items():
        h.header[k] = v
    return h


def _wcs_world(header, n, unit):
    """Reference: astropy.wcs pixel_to_world on the same header (FITS WCS Paper I/III)."""
    with warnings.catch_warnings():  # wcslib's informational header fixes
        warnings.simplefilter("ignore")
        w = WCS(header, naxis=1)
    world = w.pixel_to_world_values(np.arange(n, dtype=float))
    return (np.asarray(world) * u.Unit(w.wcs.cunit[0])).to(unit, equivalencies=u.spectral())


# ---------------------------------------------------------------- 1D images


def test_linear_wave_with_cunit_matches_astropy_wcs(tmp_path):
    hdr = {"CTYPE1": "WAVE", "CUNIT1": "Angstrom", "CRVAL1": 4000.0, "CDELT1": 1.5,
           "CRPIX1": 3.0, "BUNIT": "1e-17 erg/(s cm2 Angstrom)", "OBJECT": "Demo-7",
           "DATE-OBS": "2031-05-04T03:02:01", "SPECSYS": "TOPOCENT", "EXPTIME": 1200.0,
           "TELESCOP": "Made-up 2m", "RA": 150.25, "DEC": -12.5, "OBSGEO-X": 1.0e6,
           "OBSGEO-Y": -5.0e6, "OBSGEO-Z": 3.0e6}
    h = _image(hdr)
    path = _write(tmp_path / "lin.fits", h)
    spec = read_spectrum(path)
    assert isinstance(spec, Spectrum)
    assert_quantity_allclose(spec.spectral_axis, _wcs_world(h.header, N, u.AA), rtol=1e-12)
    assert spec.spectral_axis.unit == u.AA  # not metres as wcslib returns
    assert spec.flux.unit == u.Unit("1e-17 erg/(s cm2 Angstrom)")
    z = spec.meta["zline"]
    assert z["medium"] == "vacuum" and z["medium_assumed"] is False
    assert z["layout"] == "image-linear" and z["hdu"] == 0 and z["hdu_name"] == "PRIMARY"
    for key in ("OBJECT", "DATE-OBS", "SPECSYS", "EXPTIME", "TELESCOP", "RA", "DEC", "OBSGEO-X",
                "OBSGEO-Y", "OBSGEO-Z", "BUNIT"):
        assert z["header"][key] == hdr[key]
    info = describe_spectrum(spec)
    assert info["n_pixels"] == N and info["spectral_unit"] == "Angstrom"
    assert info["spectral_min"] == pytest.approx(4000.0 - 2 * 1.5)
    assert info["uncertainty"] is None and info["n_masked"] == 0


def test_cd_matrix_awav_air_and_gz(tmp_path):
    h = _image({"CTYPE1": "AWAV", "CUNIT1": "nm", "CRVAL1": 500.0, "CD1_1": 0.05, "CRPIX1": 1.0,
                "SITELAT": -24.5, "SITELONG": -70.1, "SITEELEV": 2400.0})
    path = tmp_path / "air.fits.gz"
    buf = io.BytesIO()
    fits.HDUList([h]).writeto(buf)
    path.write_bytes(gzip.compress(buf.getvalue()))
    spec = read_spectrum(path)
    # Paper I linear axis: x = CRVAL1 + CD1_1 * (p - CRPIX1), p = 1..N
    expected = (500.0 + 0.05 * (np.arange(1, N + 1) - 1.0)) * u.nm
    assert_quantity_allclose(spec.spectral_axis, expected, rtol=1e-12)
    assert spec.meta["zline"]["medium"] == "air"
    assert spec.meta["zline"]["header"]["SITELAT"] == -24.5
    # explicit medium= overrides what the file says
    assert read_spectrum(path, medium="vacuum").meta["zline"]["medium"] == "vacuum"


def test_wave_without_cunit_is_angstrom_not_metres(tmp_path):
    """specutils reads this as 4000 m (wcslib's WAVE default): we read Angstrom and say so."""
    h = _image({"CTYPE1": "WAVE", "CRVAL1": 4000.0, "CDELT1": 2.0, "CRPIX1": 1.0})
    spec = read_spectrum(_write(tmp_path / "nocunit.fits", h))
    expected = (4000.0 + 2.0 * np.arange(N)) * u.AA  # Paper I linear formula
    assert_quantity_allclose(spec.spectral_axis, expected)
    assert any("Angstrom" in a for a in spec.meta["zline"]["assumptions"])
    # the caller can state the unit instead of the guess
    spec_nm = read_spectrum(tmp_path / "nocunit.fits", spectral_unit="nm")
    assert_quantity_allclose(spec_nm.spectral_axis, expected.value * u.nm)


def test_small_values_without_cunit_follow_paper_iii_metres(tmp_path):
    h = _image({"CTYPE1": "WAVE", "CRVAL1": 4.0e-7, "CDELT1": 1.0e-10, "CRPIX1": 1.0})
    spec = read_spectrum(_write(tmp_path / "metres.fits", h))
    assert_quantity_allclose(spec.spectral_axis.to(u.AA), (4000.0 + np.arange(N)) * u.AA)
    assert any("metres" in a for a in spec.meta["zline"]["assumptions"])


def test_wave_log_paper_iii_matches_astropy_wcs(tmp_path):
    h = _image({"CTYPE1": "WAVE-LOG", "CUNIT1": "Angstrom", "CRVAL1": 5000.0, "CDELT1": 2.0,
                "CRPIX1": 10.0})
    spec = read_spectrum(_write(tmp_path / "log.fits", h))
    assert_quantity_allclose(spec.spectral_axis, _wcs_world(h.header, N, u.AA), rtol=1e-12)
    steps = np.diff(spec.spectral_axis.value)
    assert steps[-1] > steps[0]  # really logarithmic


@pytest.mark.parametrize("ctype", ["LINEAR", None, "WAVE"])
def test_dcflag_log10_axis(tmp_path, ctype):
    """specutils returns log10 values (3.6 .. 3.8 'Angstrom') for this: we return 10**x."""
    hdr = {"CRVAL1": 3.6, "CD1_1": 1e-4, "CRPIX1": 1.0, "DC-FLAG": 1}
    if ctype:
        hdr["CTYPE1"] = ctype
    spec = read_spectrum(_write(tmp_path / "dcflag.fits", _image(hdr)))
    expected = 10.0 ** (3.6 + 1e-4 * np.arange(N)) * u.AA  # lambda = 10**(CRVAL1 + CD1_1 (p - CRPIX1))
    assert_quantity_allclose(spec.spectral_axis, expected, rtol=1e-12)
    assert spec.meta["zline"]["layout"] == "image-log10"


def test_primary_image_preferred_over_table(tmp_path):
    """specutils silently picks the table here; we take the primary image and say so."""
    img = _image({"CTYPE1": "WAVE", "CUNIT1": "Angstrom", "CRVAL1": 6000.0, "CDELT1": 1.0,
                  "CRPIX1": 1.0})
    tab = fits.BinTableHDU.from_columns([
        fits.Column("WAVE", "D", unit="Angstrom", array=np.linspace(100, 200, 10)),
        fits.Column("FLUX", "D", unit="Jy", array=np.ones(10))])
    spec = read_spectrum(_write(tmp_path / "both.fits", img, tab))
    assert spec.spectral_axis.size == N
    assert spec.spectral_axis[0] == 6000.0 * u.AA
    assert any("table" in note for note in spec.meta["zline"]["notes"])
    spec_t = read_spectrum(tmp_path / "both.fits", hdu=1)
    assert spec_t.spectral_axis.size == 10 and spec_t.flux.unit == u.Jy


@pytest.mark.parametrize("name,cls,kind", [("ERR", StdDevUncertainty, "stdev"),
                                           ("VAR", VarianceUncertainty, "variance"),
                                           ("IVAR", InverseVariance, "ivar")])
def test_flux_err_mask_extensions(tmp_path, name, cls, kind):
    """specutils raises KeyError: 'err' on an ERR extension; we use it as the uncertainty."""
    hdr = {"CTYPE1": "WAVE", "CUNIT1": "Angstrom", "CRVAL1": 5000.0, "CDELT1": 1.0,
           "CRPIX1": 1.0, "BUNIT": "erg/(s cm2 Angstrom)"}
    flux = _flux()
    err = np.full(N, 0.2)
    err[5] = 0.0  # zero uncertainty / zero ivar -> masked
    mask = np.zeros(N, dtype="u1")
    mask[7] = 4
    path = _write(tmp_path / f"ext_{name}.fits", fits.PrimaryHDU(),
                  _image(hdr, flux, fits.ImageHDU, name="FLUX"),
                  fits.ImageHDU(err.astype("f4"), name=name), fits.ImageHDU(mask, name="MASK"))
    spec = read_spectrum(path)
    assert isinstance(spec.uncertainty, cls)
    assert spec.meta["zline"]["uncertainty"] == kind
    np.testing.assert_allclose(spec.uncertainty.array, err, rtol=1e-6)
    assert spec.mask[5] and spec.mask[7] and spec.mask.sum() == 2
    assert spec.meta["zline"]["hdu"] == 1 and spec.meta["zline"]["hdu_name"] == "FLUX"
    assert describe_spectrum(spec)["n_masked"] == 2
    assert read_spectrum(path, hdu="flux").spectral_axis.size == N


def test_descending_axis_reversed_with_flux(tmp_path):
    flux = np.arange(N, dtype=float)
    h = _image({"CTYPE1": "WAVE", "CUNIT1": "Angstrom", "CRVAL1": 7000.0, "CDELT1": -2.0,
                "CRPIX1": 1.0}, flux)
    spec = read_spectrum(_write(tmp_path / "desc.fits", h))
    assert_quantity_allclose(spec.spectral_axis, (7000.0 - 2.0 * np.arange(N))[::-1] * u.AA)
    np.testing.assert_array_equal(spec.flux.value, flux[::-1])
    assert spec.meta["zline"]["reversed"] is True


def test_nan_flux_masked(tmp_path):
    flux = _flux()
    flux[[3, 4]] = np.nan
    flux[9] = np.inf
    h = _image({"CTYPE1": "WAVE", "CUNIT1": "Angstrom", "CRVAL1": 7000.0, "CDELT1": 2.0,
                "CRPIX1": 1.0}, flux)
    spec = read_spectrum(_write(tmp_path / "nan.fits", h))
    assert np.flatnonzero(spec.mask).tolist() == [3, 4, 9]


# ---------------------------------------------------------------- radio, energy, wavenumber


def test_freq_axis_keeps_rest_frequency(tmp_path):
    hdr = {"CTYPE1": "FREQ", "CUNIT1": "Hz", "CRVAL1": 1.4204e9, "CDELT1": 1.0e4, "CRPIX1": 32.0,
           "RESTFRQ": 1.420405751e9, "SPECSYS": "LSRK"}
    h = _image(hdr)
    spec = read_spectrum(_write(tmp_path / "freq.fits", h))
    assert_quantity_allclose(spec.spectral_axis, _wcs_world(h.header, N, u.Hz), rtol=1e-12)
    assert spec.meta["zline"]["medium"] is None
    assert_quantity_allclose(spec.meta["zline"]["rest_value"], 1.420405751e9 * u.Hz)
    assert_quantity_allclose(spec.spectral_axis.doppler_rest, 1.420405751e9 * u.Hz)


@pytest.mark.parametrize("ctype,convention", [("VRAD", "radio"), ("VOPT", "optical")])
def test_velocity_axes_become_frequency(tmp_path, ctype, convention):
    rest = 1.420405751e9
    hdr = {"CTYPE1": ctype, "CUNIT1": "km/s", "CRVAL1": -50.0, "CDELT1": 2.5, "CRPIX1": 1.0,
           "RESTFREQ": rest}
    spec = read_spectrum(_write(tmp_path / f"{ctype}.fits", _image(hdr)))
    v = (-50.0 + 2.5 * np.arange(N)) * u.km / u.s
    equiv = {"radio": u.doppler_radio, "optical": u.doppler_optical}[convention](rest * u.Hz)
    expected = np.sort(v.to(u.Hz, equivalencies=equiv))  # astropy Doppler equivalencies
    assert_quantity_allclose(spec.spectral_axis, expected, rtol=1e-13)
    z = spec.meta["zline"]
    assert z["velocity_convention"] == convention
    assert z["reversed"] is True  # velocity up = frequency down
    assert describe_spectrum(spec)["velocity_convention"] == convention


def test_velocity_axis_without_rest_frequency_refused(tmp_path):
    path = _write(tmp_path / "vnorest.fits", _image({"CTYPE1": "VRAD", "CUNIT1": "m/s",
                                                      "CRVAL1": 0.0, "CDELT1": 1e3}))
    with pytest.raises(SpectrumFormatError, match=r"vnorest\.fits.*RESTFRQ"):
        read_spectrum(path)


def test_energy_and_wavenumber_axes(tmp_path):
    h = _image({"CTYPE1": "ENER", "CUNIT1": "keV", "CRVAL1": 0.5, "CDELT1": 0.01, "CRPIX1": 1.0})
    spec = read_spectrum(_write(tmp_path / "ener.fits", h))
    # Paper I linear formula exactly; wcslib converts keV with its own (older) eV value, ~1e-7
    assert_quantity_allclose(spec.spectral_axis, (0.5 + 0.01 * np.arange(N)) * u.keV, rtol=1e-12)
    assert_quantity_allclose(spec.spectral_axis, _wcs_world(h.header, N, u.keV), rtol=1e-6)
    assert spec.spectral_axis.unit == u.keV and spec.meta["zline"]["medium"] is None
    h = _image({"CTYPE1": "WAVN", "CUNIT1": "cm-1", "CRVAL1": 15000.0, "CDELT1": 5.0,
                "CRPIX1": 1.0})
    spec = read_spectrum(_write(tmp_path / "wavn.fits", h))
    assert_quantity_allclose(spec.spectral_axis, _wcs_world(h.header, N, 1 / u.cm), rtol=1e-12)


# ---------------------------------------------------------------- 2D


def test_2d_refused_with_advice_then_row_and_column(tmp_path):
    data = np.arange(3 * N, dtype="f4").reshape(3, N)
    h = _image({"CTYPE1": "WAVE", "CUNIT1": "Angstrom", "CRVAL1": 5000.0, "CDELT1": 1.0,
                "CRPIX1": 1.0, "CTYPE2": "WAVE", "CUNIT2": "nm", "CRVAL2": 600.0,
                "CDELT2": 1.0, "CRPIX2": 1.0}, data)
    path = _write(tmp_path / "two.fits", h)
    with pytest.raises(SpectrumFormatError, match=r"two\.fits.*NAXIS=2.*\(3, 64\).*row="):
        read_spectrum(path)
    spec = read_spectrum(path, row=1)
    np.testing.assert_array_equal(spec.flux.value, data[1])
    assert spec.spectral_axis[0] == 5000.0 * u.AA
    spec = read_spectrum(path, column=2)
    np.testing.assert_array_equal(spec.flux.value, data[:, 2])
    assert_quantity_allclose(spec.spectral_axis, [600.0, 601.0, 602.0] * u.nm)


def test_degenerate_2d_read_as_1d(tmp_path):
    h = _image({"CTYPE1": "WAVE", "CUNIT1": "Angstrom", "CRVAL1": 5000.0, "CDELT1": 1.0,
                "CRPIX1": 1.0}, _flux().reshape(1, N))
    spec = read_spectrum(_write(tmp_path / "deg.fits", h))
    assert spec.flux.shape == (N,)
    assert any("NAXIS=2" in a for a in spec.meta["zline"]["assumptions"])


# ---------------------------------------------------------------- tables


def _table(cols, name=None):
    return fits.BinTableHDU.from_columns([fits.Column(n, f, unit=un, array=a)
                                          for n, f, un, a in cols], name=name)


def test_table_columns_with_units(tmp_path):
    wave = np.linspace(4000, 5000, N)
    tab = _table([("Wavelength", "D", "nm", wave / 10), ("Flux", "E", "Jy", _flux()),
                  ("Flux_Err", "E", "Jy", np.full(N, 0.1)), ("Quality", "J", None,
                                                             (np.arange(N) == 3).astype(int))])
    spec = read_spectrum(_write(tmp_path / "tab.fits", fits.PrimaryHDU(), tab))
    assert_quantity_allclose(spec.spectral_axis.to(u.AA), wave * u.AA)
    assert spec.flux.unit == u.Jy and isinstance(spec.uncertainty, StdDevUncertainty)
    assert spec.mask.tolist() == (np.arange(N) == 3).tolist()
    assert spec.meta["zline"]["medium_assumed"] is True
    assert spec.meta["zline"]["medium"] == "vacuum"


def test_mask_on_every_pixel_is_a_whole_spectrum_flag(tmp_path):
    # a survey's fibre-level bit set on every pixel (SDSS AND_MASK carries such bits): applying it
    # would leave nothing to measure, so it is reported instead of applied; a mask of a few bad
    # pixels in the same file layout is applied as before
    wave = np.linspace(4000, 5000, N)
    err = np.full(N, 0.1)
    err[5] = 0.0  # no uncertainty: masked whatever the mask says
    for marks, applied in ((np.full(N, 4), False), ((np.arange(N) % 2) * 4, True)):
        tab = _table([("Wavelength", "D", "Angstrom", wave), ("Flux", "E", "Jy", _flux()),
                      ("Flux_Err", "E", "Jy", err), ("AND_MASK", "J", None, marks)])
        path = _write(tmp_path / f"tab{int(applied)}.fits", fits.PrimaryHDU(), tab)
        spec = read_spectrum(path)
        codes = [f["code"] for f in spec.meta["zline"]["flags"]]
        expected = (marks != 0) | (err <= 0)
        if applied:
            assert spec.mask.tolist() == expected.tolist()
            assert "mask-whole-spectrum" not in codes
        else:
            assert spec.mask.tolist() == (err <= 0).tolist()
            assert "mask-whole-spectrum" in codes
            assert describe_spectrum(spec)["n_masked"] == 1


def test_table_without_units_assumed_and_recorded(tmp_path):
    """specutils cannot find any column without TUNITs; we go by the names and record it."""
    wave = np.linspace(4000, 5000, N)
    tab = _table([("LAMBDA", "D", None, wave), ("SPEC", "E", None, _flux()),
                  ("IVAR", "E", None, np.full(N, 4.0))])
    spec = read_spectrum(_write(tmp_path / "nounit.fits", fits.PrimaryHDU(), tab))
    assert_quantity_allclose(spec.spectral_axis, wave * u.AA)
    assert spec.flux.unit == u.dimensionless_unscaled
    assert isinstance(spec.uncertainty, InverseVariance)
    text = " ".join(spec.meta["zline"]["assumptions"])
    assert "LAMBDA" in text and "Angstrom" in text and "dimensionless" in text


def test_table_unreadable_flux_unit_gives_dimensionless_or_user_unit(tmp_path):
    wave = np.linspace(4000, 5000, N)
    tab = _table([("wave", "D", "Angstrom", wave), ("flux", "E", "furlongs/fortnight^7", _flux())])
    path = _write(tmp_path / "badunit.fits", fits.PrimaryHDU(), tab)
    spec = read_spectrum(path)
    assert spec.flux.unit == u.dimensionless_unscaled
    assert any("furlongs" in a for a in spec.meta["zline"]["assumptions"])
    assert read_spectrum(path, flux_unit="mJy").flux.unit == u.mJy


def test_loglam_and_one_row_array_columns(tmp_path):
    loglam = 3.55 + 1e-4 * np.arange(N)
    cols = fits.ColDefs([fits.Column("loglam", f"{N}D", array=loglam[None, :]),
                         fits.Column("flux", f"{N}E", unit="1e-17 erg/(s cm2 Angstrom)",
                                     array=_flux()[None, :]),
                         fits.Column("ivar", f"{N}E", array=np.ones((1, N)))])
    tab = fits.BinTableHDU.from_columns(cols)
    spec = read_spectrum(_write(tmp_path / "onerow.fits", fits.PrimaryHDU(), tab))
    assert_quantity_allclose(spec.spectral_axis, 10 ** loglam * u.AA, rtol=1e-12)
    assert spec.meta["zline"]["layout"] == "table-log10"


def test_table_erg_per_a_means_angstrom(tmp_path):
    tab = _table([("WAVE", "D", "Angstrom", np.linspace(4000, 5000, N)),
                  ("FLUX", "E", "erg/cm2/s/A", _flux())])
    spec = read_spectrum(_write(tmp_path / "ergA.fits", fits.PrimaryHDU(), tab))
    assert spec.flux.unit.is_equivalent(u.erg / u.s / u.cm**2 / u.AA)


def test_table_frequency_and_energy_columns(tmp_path):
    tab = _table([("FREQUENCY", "D", "GHz", np.linspace(100, 101, N)), ("FLUX", "E", "Jy", _flux())])
    spec = read_spectrum(_write(tmp_path / "tfreq.fits", fits.PrimaryHDU(), tab))
    assert spec.spectral_axis.unit == u.GHz and spec.meta["zline"]["medium"] is None
    tab = _table([("ENERGY", "D", "keV", np.linspace(1, 10, N)), ("COUNTS", "E", "ct", _flux())])
    spec = read_spectrum(_write(tmp_path / "tener.fits", fits.PrimaryHDU(), tab))
    assert spec.spectral_axis.unit == u.keV


def test_table_missing_flux_column_lists_columns(tmp_path):
    tab = _table([("WAVE", "D", "Angstrom", np.linspace(4000, 5000, N)), ("XYZ", "E", None, _flux())])
    path = _write(tmp_path / "noflux.fits", fits.PrimaryHDU(), tab)
    with pytest.raises(SpectrumFormatError, match=r"noflux\.fits, HDU 1.*no flux column.*XYZ"):
        read_spectrum(path)


# ---------------------------------------------------------------- other sources


def test_bytes_memoryview_and_hdulist(tmp_path):
    h = _image({"CTYPE1": "WAVE", "CUNIT1": "Angstrom", "CRVAL1": 4000.0, "CDELT1": 1.0,
                "CRPIX1": 1.0})
    buf = io.BytesIO()
    fits.HDUList([h]).writeto(buf)
    for src in (buf.getvalue(), memoryview(buf.getvalue()), fits.HDUList([h])):
        spec = read_spectrum(src)
        assert_quantity_allclose(spec.spectral_axis, (4000.0 + np.arange(N)) * u.AA)


def test_spectrum_passthrough_and_arrays():
    wave = np.linspace(5000, 6000, N) * u.AA
    spec = Spectrum(flux=_flux() * u.Jy, spectral_axis=wave)
    out = read_spectrum(spec, medium="air")
    assert out.meta["zline"]["medium"] == "air" and out.meta["zline"]["medium_assumed"] is False
    assert "zline" not in spec.meta  # the input is not changed
    assert_quantity_allclose(out.spectral_axis, wave)
    arr = read_spectrum((wave, _flux() * u.Jy, np.full(N, 0.1) * u.Jy))
    assert isinstance(arr.uncertainty, StdDevUncertainty)
    assert arr.meta["zline"]["medium_assumed"] is True
    kw = read_spectrum({"spectral_axis": wave[::-1], "flux": np.arange(N) * u.Jy})
    assert kw.flux.value[0] == N - 1
    with pytest.raises(SpectrumFormatError, match="spectral_axis must be a Quantity"):
        spectrum_from_arrays(np.arange(N), _flux() * u.Jy)


def test_bad_arguments_named():
    with pytest.raises(SpectrumFormatError, match=r"medium='water'.*\['air', 'vacuum'\]"):
        read_spectrum(b"x", medium="water")
    with pytest.raises(SpectrumFormatError, match="uncertainty_type"):
        read_spectrum(b"x", uncertainty_type="sd")
    with pytest.raises(SpectrumFormatError, match="type int is not accepted"):
        read_spectrum(3)


def test_hdu_out_of_range_and_unknown_name(tmp_path):
    path = _write(tmp_path / "one.fits", _image({"CTYPE1": "WAVE", "CRVAL1": 4000.0,
                                                 "CDELT1": 1.0}))
    with pytest.raises(SpectrumFormatError, match=r"one\.fits.*hdu=5 is out of range"):
        read_spectrum(path, hdu=5)
    with pytest.raises(SpectrumFormatError, match=r"hdu='SCI' is not an EXTNAME.*PRIMARY"):
        read_spectrum(path, hdu="SCI")


def test_truncated_file_rephrased(tmp_path):
    h = _image({"CTYPE1": "WAVE", "CRVAL1": 4000.0, "CDELT1": 1.0}, np.ones(5000))
    buf = io.BytesIO()
    fits.HDUList([h]).writeto(buf)
    path = tmp_path / "cut.fits"
    path.write_bytes(buf.getvalue()[:4000])
    with pytest.raises(SpectrumFormatError, match=r"cut\.fits"):
        read_spectrum(path)


# ---------------------------------------------------------------- options and conventions


@pytest.mark.parametrize("ctype,velref,convention", [
    ("VELO-LSR", None, "optical"),      # AIPS convention: optical unless VELREF flags radio
    ("VELO-LSR", 257, "radio"),         # VELREF = 1 + 256: LSR, radio
    ("FELO-HEL", None, "optical"),
    ("VELO", None, "relativistic"),     # bare VELO: apparent radial velocity (FITS WCS Paper III)
])
def test_velo_conventions(tmp_path, ctype, velref, convention):
    rest = 1.420405751e9
    hdr = {"CTYPE1": ctype, "CUNIT1": "m/s", "CRVAL1": 1.0e5, "CDELT1": -1.0e3, "CRPIX1": 1.0,
           "RESTFRQ": rest}
    if velref is not None:
        hdr["VELREF"] = velref
    spec = read_spectrum(_write(tmp_path / "velo.fits", _image(hdr)))
    v = (1.0e5 - 1.0e3 * np.arange(N)) * u.m / u.s
    equiv = {"radio": u.doppler_radio, "optical": u.doppler_optical,
             "relativistic": u.doppler_relativistic}[convention](rest * u.Hz)
    assert_quantity_allclose(spec.spectral_axis, v.to(u.Hz, equivalencies=equiv), rtol=1e-13)
    assert spec.meta["zline"]["velocity_convention"] == convention


def test_unit_options_convert_stated_units(tmp_path):
    h = _image({"CTYPE1": "WAVE", "CUNIT1": "Angstrom", "CRVAL1": 5000.0, "CDELT1": 1.0,
                "CRPIX1": 1.0, "BUNIT": "erg/(s cm2 Angstrom)"})
    err = fits.ImageHDU(np.full(N, 0.5, "f4"), name="ERR")
    path = _write(tmp_path / "conv.fits", h, err)
    wave = (5000.0 + np.arange(N)) * u.AA
    spec = read_spectrum(path, spectral_unit="nm")
    assert_quantity_allclose(spec.spectral_axis, wave.to(u.nm))
    spec = read_spectrum(path, spectral_unit="Hz")  # reversed to stay ascending
    assert_quantity_allclose(spec.spectral_axis, np.sort(wave.to(u.Hz, equivalencies=u.spectral())))
    spec = read_spectrum(path, flux_unit="Jy")
    flam = h.data.astype(float) * u.Unit("erg/(s cm2 Angstrom)")
    assert_quantity_allclose(spec.flux, flam.to(u.Jy, equivalencies=u.spectral_density(wave)))
    ratio = spec.flux.value / h.data.astype(float)
    np.testing.assert_allclose(spec.uncertainty.array, 0.5 * ratio, rtol=1e-6)
    assert spec.uncertainty.unit == u.Jy


def test_uncertainty_type_override(tmp_path):
    h = _image({"CTYPE1": "WAVE", "CUNIT1": "Angstrom", "CRVAL1": 5000.0, "CDELT1": 1.0,
                "CRPIX1": 1.0})
    path = _write(tmp_path / "ut.fits", h, fits.ImageHDU(np.full(N, 4.0, "f4"), name="UNCERT"))
    assert isinstance(read_spectrum(path).uncertainty, StdDevUncertainty)
    spec = read_spectrum(path, uncertainty_type="variance")
    assert isinstance(spec.uncertainty, VarianceUncertainty)
    assert spec.meta["zline"]["uncertainty"] == "variance"


def test_table_medium_keyword_and_multirow_array_table(tmp_path):
    wave = np.linspace(4000, 5000, N)
    tab = _table([("WAVE", "D", "Angstrom", wave), ("FLUX", "E", "Jy", _flux())])
    tab.header["AIRORVAC"] = "air"
    spec = read_spectrum(_write(tmp_path / "airtab.fits", fits.PrimaryHDU(), tab))
    assert spec.meta["zline"]["medium"] == "air" and not spec.meta["zline"]["medium_assumed"]
    cols = fits.ColDefs([fits.Column("WAVE", f"{N}D", unit="Angstrom",
                                     array=np.stack([wave, wave + 1000])),
                         fits.Column("FLUX", f"{N}E", unit="Jy", array=np.ones((2, N)))])
    path = _write(tmp_path / "tworow.fits", fits.PrimaryHDU(), fits.BinTableHDU.from_columns(cols))
    with pytest.raises(SpectrumFormatError, match=r"tworow\.fits.*2 rows.*row="):
        read_spectrum(path)
    assert_quantity_allclose(read_spectrum(path, row=1).spectral_axis, (wave + 1000) * u.AA)


@pytest.mark.parametrize("hdr,unit", [
    ({"CTYPE1": "WAVE-F2W", "CUNIT1": "Angstrom", "CRVAL1": 5000.0, "CDELT1": 1.0,
      "CRPIX1": 1.0}, u.AA),
    ({"CTYPE1": "FREQ-W2F", "CUNIT1": "GHz", "CRVAL1": 100.0, "CDELT1": 0.01, "CRPIX1": 5.0},
     u.GHz),
])
def test_non_linear_paper_iii_algorithms_follow_astropy_wcs(tmp_path, hdr, unit):
    h = _image(hdr)
    spec = read_spectrum(_write(tmp_path / "nonlin.fits", h))
    expected = np.sort(_wcs_world(h.header, N, unit))
    assert_quantity_allclose(spec.spectral_axis, expected, rtol=1e-12)
    steps = np.diff(spec.spectral_axis.value)
    assert not np.allclose(steps, steps[0], rtol=1e-9, atol=0)  # really non-linear


@pytest.mark.parametrize("tunit", [None, "Angstrom", "log(Angstrom)", "dex(Angstrom)"])
def test_loglam_unit_spellings(tmp_path, tunit):
    loglam = 3.6 + 1e-4 * np.arange(N)
    tab = _table([("LOGLAM", "D", tunit, loglam), ("FLUX", "E", None, _flux())])
    spec = read_spectrum(_write(tmp_path / "ll.fits", fits.PrimaryHDU(), tab))
    assert_quantity_allclose(spec.spectral_axis, 10 ** loglam * u.AA, rtol=1e-12)


@pytest.mark.parametrize("fmt", ["wcs1d-fits", "tabular-fits"])
def test_reads_files_written_by_specutils(tmp_path, fmt):
    wave = (5000.0 + 0.5 * np.arange(N)) * u.AA
    mask = np.zeros(N, bool)
    mask[10] = True
    axis = {"spectral_axis": wave}
    if fmt == "wcs1d-fits":  # that writer needs a FITS WCS, not a lookup table
        w = WCS(naxis=1)
        w.wcs.ctype, w.wcs.cunit = ["WAVE"], ["Angstrom"]
        w.wcs.crval, w.wcs.cdelt, w.wcs.crpix = [5000.0], [0.5], [1.0]
        axis = {"wcs": w}
    spec = Spectrum(flux=_flux() * u.Unit("erg/(s cm2 Angstrom)"), **axis,
                    uncertainty=StdDevUncertainty(np.full(N, 0.1)), mask=mask)
    path = tmp_path / f"specutils_{fmt}.fits"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        spec.write(path, format=fmt)
    back = read_spectrum(path)
    assert_quantity_allclose(back.spectral_axis.to(u.AA), wave, rtol=1e-9)
    assert_quantity_allclose(back.flux, spec.flux, rtol=1e-6)
    assert back.uncertainty is not None
    np.testing.assert_allclose(back.uncertainty.represent_as(StdDevUncertainty).array, 0.1,
                               rtol=1e-6)
    assert back.mask[10] and back.mask.sum() == 1
