"""Tests of the invented demo spectra and of ``zline demo-data``."""

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from astropy.io import fits
from specutils import Spectrum

from zline.cli import main
from zline.physics.demo import DEMO_FILES, demo_hdulist, write_demo_spectra

C_KMS = const.c.to_value(u.km / u.s)


@pytest.fixture(scope="module")
def demo_dir(tmp_path_factory):
    directory = tmp_path_factory.mktemp("demo")
    paths = write_demo_spectra(directory)
    assert set(paths) == set(DEMO_FILES)
    return directory


def _spectrum_hdu(hdul):
    return hdul[1] if isinstance(hdul[1] if len(hdul) > 1 else None, fits.BinTableHDU) else hdul[0]


def _axis_and_flux(path):
    """Spectral axis and flux read with astropy only, from the WCS keywords / table columns."""
    with fits.open(path) as hdul:
        hdu = _spectrum_hdu(hdul)
        h = hdu.header
        if isinstance(hdu, fits.BinTableHDU):
            return np.array(hdu.data["ENERGY"]), np.array(hdu.data["FLUX"], dtype=float), h
        p = np.arange(h["NAXIS1"]) + 1.0
        if h["CTYPE1"].endswith("-LOG"):
            x = h["CRVAL1"] * np.exp(h["CDELT1"] * (p - h["CRPIX1"]) / h["CRVAL1"])
        else:
            x = h["CRVAL1"] + h["CDELT1"] * (p - h["CRPIX1"])
        return x, np.array(hdu.data, dtype=float), h


def test_same_bytes_twice(tmp_path, demo_dir):
    again = write_demo_spectra(tmp_path)
    for name, fname in DEMO_FILES.items():
        assert again[name].read_bytes() == (demo_dir / fname).read_bytes(), name


def test_fits_valid_and_truth_keywords(demo_dir):
    for fname in DEMO_FILES.values():
        with fits.open(demo_dir / fname) as hdul:
            hdul.verify("exception")
            h = _spectrum_hdu(hdul).header
            for key in ("ZTRUE", "VTRUE", "VCONV", "OBJECT", "TELESCOP"):
                assert key in h, (fname, key)
            assert h["OBJECT"].startswith("ZL-")
            assert "DATE" not in h  # no time stamp: the bytes are reproducible


def test_layouts_differ(demo_dir):
    ctypes = {}
    for name, fname in DEMO_FILES.items():
        with fits.open(demo_dir / fname) as hdul:
            h = _spectrum_hdu(hdul).header
            ctypes[name] = h.get("CTYPE1", "table")
    assert ctypes == {"galaxy": "WAVE", "nebula": "AWAV-LOG", "radio": "FREQ", "xray": "table"}


@pytest.mark.filterwarnings("ignore:.*:astropy.wcs.FITSFixedWarning")
def test_readable_by_specutils(demo_dir):
    # ERR extension: wcs1d-fits needs the uncertainty kind (its own lookup lacks 'err')
    gal = Spectrum.read(demo_dir / "galaxy.fits", format="wcs1d-fits", uncertainty_type="std")
    assert gal.spectral_axis.to(u.AA)[0].value == pytest.approx(3600.0)
    assert gal.uncertainty is not None and gal.flux.size == 6201
    neb = Spectrum.read(demo_dir / "nebula.fits", format="wcs1d-fits")
    assert neb.spectral_axis.to(u.AA)[-1].value == pytest.approx(7500.0, abs=0.2)
    radio = Spectrum.read(demo_dir / "radio.fits", format="wcs1d-fits")
    assert radio.spectral_axis.unit == u.Hz and radio.flux.unit == u.K
    funit = "ph / (s cm2 keV)"
    xray = Spectrum.read(demo_dir / "xray.fits", format="tabular-fits", column_mapping={
        "ENERGY": ("spectral_axis", "keV"), "FLUX": ("flux", funit),
        "ERROR": ("uncertainty", funit)})
    assert xray.spectral_axis.unit == u.keV and xray.flux.size == 3751


def _peak_at(x, y, expected, half_window, tolerance):
    sel = np.abs(x - expected) <= half_window
    assert sel.sum() >= 5
    peak = x[sel][np.argmax(y[sel])]
    assert abs(peak - expected) <= tolerance, (peak, expected)


# Positions from published rest values, shifted by the truth in the header.
def test_galaxy_lines_at_truth(demo_dir):
    x, y, h = _axis_and_flux(demo_dir / "galaxy.fits")
    z = h["ZTRUE"]
    # H-alpha 6564.61 A vacuum (NIST ASD, check-values.md); [O III] 5008.24 (from memory, NIST ASD)
    for rest in (6564.61, 5008.24):
        _peak_at(x, y, rest * (1 + z), 10.0, 1.5)


def test_nebula_lines_at_truth(demo_dir):
    x, y, h = _axis_and_flux(demo_dir / "nebula.fits")
    beta = h["VTRUE"] / C_KMS  # optical convention (VCONV)
    assert h["VCONV"] == "optical"
    # H-gamma 4340.462 A air, H-epsilon 3970.072 air (NIST Handbook, as quoted in check-values.md)
    for rest in (4340.462, 3970.072):
        _peak_at(x, y, rest * (1 + beta), 1.5, 0.15)


def test_radio_lines_at_truth(demo_dir):
    x, y, h = _axis_and_flux(demo_dir / "radio.fits")
    assert h["SPECSYS"] == "LSRK" and h["VCONV"] == "radio"
    # H110alpha 4874.157 MHz (telescope configuration tables, as quoted; Lilley & Palmer 1968)
    expected = 4874.157e6 * (1 - h["VTRUE"] / C_KMS)
    _peak_at(x, y, expected, 0.6e6, 0.1e6)
    # RESTFRQ is H109alpha: the line 122.2 km/s above it in radio velocity is He109alpha
    # (common practice offset); both sit at peaks
    for dv in (0.0, -122.2):
        _peak_at(x, y, h["RESTFRQ"] * (1 - (h["VTRUE"] + dv) / C_KMS), 0.4e6, 0.1e6)


def test_xray_lines_at_truth(demo_dir):
    x, y, h = _axis_and_flux(demo_dir / "xray.fits")
    hc_kev_aa = (const.h * const.c).to_value(u.keV * u.AA)
    # S XVI Ly-alpha1 4.72735 A (public X-ray line lists, as quoted in check-values.md);
    # Ly-alpha2 lies 3 eV lower at half the strength, so allow 3 eV
    _peak_at(x, y, hc_kev_aa / 4.72735 / (1 + h["ZTRUE"]), 0.010, 0.003)


def test_existing_files_are_protected(tmp_path):
    write_demo_spectra(tmp_path)
    target = tmp_path / "radio.fits"
    target.write_bytes(b"mine")
    with pytest.raises(FileExistsError, match="galaxy.fits"):
        write_demo_spectra(tmp_path)
    assert target.read_bytes() == b"mine"
    write_demo_spectra(tmp_path, skip_existing=True)
    assert target.read_bytes() == b"mine"
    # asked to overwrite, but radio.fits is not a zline demo spectrum: nothing is written
    galaxy = tmp_path / "galaxy.fits"
    galaxy.write_bytes(fits_bytes("nebula"))  # a zline demo spectrum, but not the galaxy's
    with pytest.raises(FileExistsError, match="radio.fits' exists and is a file zline did not"):
        write_demo_spectra(tmp_path, overwrite=True)
    assert target.read_bytes() == b"mine" and galaxy.read_bytes() == fits_bytes("nebula")
    target.unlink()
    write_demo_spectra(tmp_path, overwrite=True)  # only zline demo spectra there: replaced
    assert target.read_bytes() == fits_bytes("radio")
    assert galaxy.read_bytes() == fits_bytes("galaxy")
    with pytest.raises(ValueError, match="exclude each other"):
        write_demo_spectra(tmp_path, overwrite=True, skip_existing=True)
    with pytest.raises(ValueError, match="'name'"):
        demo_hdulist("comet")


def fits_bytes(name):
    import io

    buf = io.BytesIO()
    demo_hdulist(name).writeto(buf)
    return buf.getvalue()


def test_cli(tmp_path, capsys):
    out = tmp_path / "demo-data"
    assert main(["demo-data", str(out), "--quiet"]) == 0
    assert capsys.readouterr().out == ""
    assert sorted(p.name for p in out.iterdir()) == sorted(DEMO_FILES.values())
    (out / "xray.fits").write_bytes(b"mine")
    assert main(["demo-data", str(out), "--quiet"]) == 0  # existing files: kept, silent
    captured = capsys.readouterr()
    assert captured.out == "" and captured.err == ""
    assert (out / "xray.fits").read_bytes() == b"mine"
    assert main(["demo-data", str(out)]) == 0
    assert "kept" in capsys.readouterr().out
    assert main(["demo-data", str(out), "--overwrite", "--quiet"]) == 2  # not ours: refused
    assert "xray.fits' exists and is a file zline did not write" in capsys.readouterr().err
    assert (out / "xray.fits").read_bytes() == b"mine"
    (out / "xray.fits").unlink()
    (out / "radio.fits").write_bytes(fits_bytes("xray"))  # a demo spectrum under another name
    assert main(["demo-data", str(out), "--overwrite", "--quiet"]) == 0
    assert (out / "xray.fits").read_bytes() == fits_bytes("xray")
    assert (out / "radio.fits").read_bytes() == fits_bytes("radio")
    assert main(["demo-data", str(out / "galaxy.fits")]) == 2
    assert "not a directory" in capsys.readouterr().err
