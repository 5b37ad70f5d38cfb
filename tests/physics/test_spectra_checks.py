"""Damaged headers and implausible axes: refused with the keyword named, or read right and
flagged; the flags are machine-readable ``{code, message}`` records."""

import numpy as np
import pytest
import astropy.units as u
from astropy.io import fits
from astropy.tests.helper import assert_quantity_allclose

from zline.physics.spectra import FLAG_CODES, SpectrumFormatError, read_spectrum

N = 40
REST_HI = 1.420405751e9  # Hz, H I 21 cm (from memory); only needs to be consistent here


def _image(**cards):
    h = fits.PrimaryHDU(np.random.default_rng(3).normal(1, 0.1, N).astype("f4"))
    h.header.update(cards)
    return h


def _write(tmp_path, name, *hdus):
    path = tmp_path / name
    fits.HDUList(list(hdus)).writeto(path)
    return path


def _patched(path, key, card):
    """Replace header card ``key`` of the primary header by ``card`` (80 characters)."""
    raw = bytearray(path.read_bytes())
    tag = f"{key:<8}".encode()
    for i in range(0, 2880, 80):
        if raw[i:i + 8] == tag:
            raw[i:i + 80] = f"{card:<80}".encode()
            path.write_bytes(bytes(raw))
            return path
    raise AssertionError(key)


LINEAR = dict(CTYPE1="WAVE", CUNIT1="Angstrom", CRVAL1=5000.0, CDELT1=1.0, CRPIX1=1.0)


@pytest.mark.parametrize("key,card,pattern", [
    ("NAXIS", "NAXIS   = 'abc'", r"HDU 0: keyword NAXIS = 'abc' is not a whole number"),
    ("NAXIS1", "NAXIS1  =                 40.5", r"keyword NAXIS1 = 40\.5 is not a whole number"),
    ("CRPIX1", "BSCALE  = 'abc'", r"keyword BSCALE = 'abc' is not a finite number"),
    ("CRPIX1", "BZERO   = 'x'", r"keyword BZERO = 'x' is not a finite number"),
    ("BITPIX", "BITPIX  =                   12", r"keyword BITPIX = 12 is not one of"),
    ("NAXIS1", "NAXIS1  =        1000000000000", r"ends inside the data of HDU 0"),
])
def test_damaged_structural_keywords_are_named(tmp_path, key, card, pattern):
    path = _patched(_write(tmp_path, "bad.fits", _image(**LINEAR)), key, card)
    with pytest.raises(SpectrumFormatError, match=r"bad\.fits.*" + pattern):
        read_spectrum(path)


def test_tfields_larger_than_the_columns(tmp_path):
    tab = fits.BinTableHDU.from_columns([
        fits.Column("WAVE", "D", unit="Angstrom", array=np.linspace(4000, 5000, N)),
        fits.Column("FLUX", "E", array=np.ones(N))])
    path = _write(tmp_path, "tf.fits", fits.PrimaryHDU(), tab)
    raw = path.read_bytes().replace(b"TFIELDS =                    2",
                                    b"TFIELDS =                    4", 1)
    path.write_bytes(raw)
    with pytest.raises(SpectrumFormatError, match=r"tf\.fits.*TFIELDS = 4 but TFORM3 is missing"):
        read_spectrum(path)


@pytest.mark.parametrize("cards,pattern", [
    (dict(CTYPE1="WAVE-TAB", CUNIT1="Angstrom", CRVAL1=5000.0, CDELT1=1.0, CRPIX1=1.0),
     r"CTYPE1 = 'WAVE-TAB'.*lookup-table"),
    (dict(LINEAR, CDELT1=1e-12), r"resolving power of [0-9.]+e\+15 per pixel.*CDELTn"),
    (dict(CTYPE1="LINEAR", CRVAL1=3.57, CD1_1=1e-4, CRPIX1=1.0),
     r"CUNIT1 and DC-FLAG are missing.*log10.*micrometres"),
    (dict(CTYPE1="WAVE", CRVAL1=400.0, CDELT1=0.1, CRPIX1=1.0),
     r"CUNIT1 is missing.*fit nm as well as Angstrom"),
    (dict(CTYPE1="FREQ", CRVAL1=1.42, CDELT1=1e-4, CRPIX1=1.0),
     r"outside 1 mAngstrom to 1 km.*GHz"),
    (dict(CTYPE1="FREQ", CUNIT1="Hz", CRVAL1=1.42, CDELT1=1e-4, CRPIX1=1.0),
     r"outside 1 mAngstrom to 1 km"),
    (dict(CTYPE1="VRAD", CRVAL1=-50.0, CDELT1=2.0, CRPIX1=1.0, RESTFRQ=REST_HI),
     r"CUNIT1 is missing on the VRAD axis.*km/s"),
    (dict(LINEAR, CRVAL1=-10.0), r"at or below zero \(-10 Angstrom at pixel 1\)"),
])
def test_implausible_or_ambiguous_axes_refused_with_the_keyword(tmp_path, cards, pattern):
    path = _write(tmp_path, "axis.fits", _image(**cards))
    with pytest.raises(SpectrumFormatError, match=r"axis\.fits.*" + pattern):
        read_spectrum(path)


def test_unambiguous_readings_load_and_say_so(tmp_path):
    # the caller resolves the nm/Angstrom doubt
    path = _write(tmp_path, "nm.fits", _image(CTYPE1="WAVE", CRVAL1=400.0, CDELT1=0.1,
                                              CRPIX1=1.0))
    spec = read_spectrum(path, spectral_unit="nm")
    assert_quantity_allclose(spec.spectral_axis, (400.0 + 0.1 * np.arange(N)) * u.nm)
    assert "axis-unit-from-option" in {f["code"] for f in spec.meta["zline"]["flags"]}
    # a velocity step of 2 km/s written in the default m/s is not a km/s axis
    path = _write(tmp_path, "ms.fits", _image(CTYPE1="VRAD", CRVAL1=-5e4, CDELT1=2e3,
                                              CRPIX1=1.0, RESTFRQ=REST_HI))
    spec = read_spectrum(path)
    v = (-5e4 + 2e3 * np.arange(N)) * u.m / u.s
    expected = np.sort(v.to(u.Hz, equivalencies=u.doppler_radio(REST_HI * u.Hz)))
    assert_quantity_allclose(spec.spectral_axis, expected, rtol=1e-12)
    assert "axis-unit-assumed" in {f["code"] for f in spec.meta["zline"]["flags"]}


def test_flags_are_code_and_message_records(tmp_path):
    path = _write(tmp_path, "bare.fits", _image(CTYPE1="LINEAR", CRVAL1=4000.0, CDELT1=2.0))
    z = read_spectrum(path).meta["zline"]
    codes = [f["code"] for f in z["flags"]]
    assert set(codes) == {"axis-reference-default", "axis-unit-assumed", "flux-unit-missing",
                          "medium-assumed"}
    assert all(code in FLAG_CODES for code in codes)
    assert z["assumptions"] == [f["message"] for f in z["flags"]]
    assert any("CRPIX1" in f["message"] for f in z["flags"])


def _multiext():
    flux = _image(**LINEAR)
    ext = fits.ImageHDU(flux.data, header=flux.header, name="FLUX")
    return [fits.PrimaryHDU(), ext, fits.ImageHDU(np.full(N, 0.1, "f4"), name="ERR"),
            fits.ImageHDU(np.zeros(N, "u1"), name="MASK")]


def test_truncated_file_that_loses_err_and_mask_is_said(tmp_path):
    hdus = _multiext()
    full = _write(tmp_path, "full.fits", *hdus)
    assert read_spectrum(full).uncertainty is not None
    end_of_flux = 3 * 2880  # primary header, FLUX header, FLUX data
    cut = tmp_path / "cut.fits"
    cut.write_bytes(full.read_bytes()[:end_of_flux + 2880 + 10])  # inside the ERR data
    spec = read_spectrum(cut)
    assert spec.uncertainty is None
    flags = {f["code"]: f["message"] for f in spec.meta["zline"]["flags"]}
    assert "file-truncated" in flags and "2 (ERR)" in flags["file-truncated"]
    assert "anything after it" in flags["file-truncated"]
    with pytest.raises(SpectrumFormatError, match=r"cut\.fits.*own HDU is incomplete"):
        read_spectrum(cut, hdu="ERR")
    # cut exactly after FLUX: only NEXTEND in the primary header tells
    hdus[0].header["NEXTEND"] = 3
    nx = _write(tmp_path, "nx.fits", *hdus)
    short = tmp_path / "short.fits"
    short.write_bytes(nx.read_bytes()[:end_of_flux])
    codes = {f["code"] for f in read_spectrum(short).meta["zline"]["flags"]}
    assert "extension-missing" in codes
