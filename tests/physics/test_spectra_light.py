"""The light reading path (`read_light`, `LightSpectrum`) against the full one (`read_spectrum`):
the same arrays, units, mask, uncertainty and meta, and the same `describe_spectrum` summary."""

import numpy as np
import pytest
import astropy.units as u
from astropy.io import fits

from zline.physics.demo import write_demo_spectra
from zline.physics.spectra import (LightSpectrum, SpectrumFormatError, describe_spectrum,
                                   read_light, read_spectrum)


def _same(path, **kwargs):
    """read_light and read_spectrum of ``path`` agree in every piece; returns both."""
    light = read_light(path, **kwargs)
    spec = read_spectrum(path, **kwargs)
    assert isinstance(light, LightSpectrum)
    assert light.spectral_axis.unit == spec.spectral_axis.unit
    np.testing.assert_array_equal(light.spectral_axis.value, spec.spectral_axis.value)
    assert light.flux.unit == spec.flux.unit
    np.testing.assert_array_equal(light.flux.value, spec.flux.value)
    np.testing.assert_array_equal(light.mask, spec.mask)
    if spec.uncertainty is None:
        assert light.uncertainty is None and light.uncertainty_kind is None
    else:
        assert light.uncertainty_unit == spec.uncertainty.unit
        np.testing.assert_array_equal(light.uncertainty, spec.uncertainty.array)
    assert light.meta["zline"] == spec.meta["zline"]
    assert describe_spectrum(light) == describe_spectrum(spec)
    return light, spec


def test_demo_spectra_read_the_same_light_and_full(tmp_path):
    paths = write_demo_spectra(tmp_path)
    kinds = set()
    for path in paths.values():
        light, _ = _same(path)
        kinds.add(light.meta["zline"]["layout"])
    assert len(kinds) >= 2  # the demo files cover more than one layout


def test_flux_unit_conversion_of_each_uncertainty_kind_matches(tmp_path):
    # descending axis, ivar/variance/stdev, unit conversion and a masked pixel, all in one file
    for name, kind in (("ERR", "stdev"), ("VAR", "variance"), ("IVAR", "ivar")):
        flux = np.linspace(1.0, 2.0, 40)
        flux[5] = np.nan
        h = fits.PrimaryHDU(flux)
        h.header.update(CTYPE1="WAVE", CUNIT1="nm", CRVAL1=700.0, CDELT1=-0.1, CRPIX1=1.0,
                        BUNIT="1e-17 erg/(s cm2 Angstrom)")
        path = tmp_path / f"{kind}.fits"
        fits.HDUList([h, fits.ImageHDU(np.full(40, 0.2), name=name)]).writeto(path)
        light, spec = _same(path, flux_unit="W/(m2 um)", spectral_unit="Angstrom")
        assert light.uncertainty_kind == kind and light.meta["zline"]["reversed"] is True
        assert light.spectral_axis.unit == u.AA and light.flux.unit == u.W / (u.m ** 2 * u.um)
        assert light.n_masked == 1


def test_velocity_axis_keeps_rest_value_and_convention(tmp_path):
    h = fits.PrimaryHDU(np.ones(30))
    h.header.update(CTYPE1="VRAD", CUNIT1="km/s", CRVAL1=-50.0, CDELT1=5.0, CRPIX1=1.0,
                    RESTFRQ=1.420405751768e9, BUNIT="Jy")  # H I 21 cm rest frequency, common practice
    path = tmp_path / "radio.fits"
    h.writeto(path)
    light, spec = _same(path)
    assert light.rest_value == spec.rest_value
    assert light.velocity_convention == "radio" == spec.velocity_convention


def test_bad_file_fails_the_same_way(tmp_path):
    path = tmp_path / "flat.fits"
    h = fits.PrimaryHDU(np.ones(20))
    h.header.update(CTYPE1="WAVE", CUNIT1="Angstrom", CRVAL1=5000.0, CDELT1=0.0, CRPIX1=1.0)
    h.writeto(path)
    with pytest.raises(SpectrumFormatError) as light_err:
        read_light(path)
    with pytest.raises(SpectrumFormatError) as full_err:
        read_spectrum(path)
    assert "CDELT1 = 0" in str(light_err.value)
    assert str(light_err.value) == str(full_err.value)


def test_read_light_refuses_a_spectrum_and_describe_refuses_other_types(tmp_path):
    spec = read_spectrum(([5000.0, 5001.0, 5002.0] * u.AA, [1.0, 2.0, 1.0] * u.Jy))
    with pytest.raises(SpectrumFormatError, match="read_spectrum"):
        read_light(spec)
    with pytest.raises(SpectrumFormatError, match="LightSpectrum"):
        describe_spectrum({"flux": [1.0]})


def test_realdata_reads_the_same_light_and_full(realdata):
    for path in realdata["path"]:
        _same(str(path))
