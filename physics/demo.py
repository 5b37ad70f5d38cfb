"""Invented demo spectra: four seeded, deterministic FITS files in four different layouts.

Every object, telescope and site here is made up.  Line positions come from `zline.physics`
(`zline.physics.catalog.line_set`, shifted with `zline.physics.kinematics.observed_position`),
and the truth used to build each spectrum is written in its header (``ZTRUE`` or ``VTRUE`` with
``VCONV``), so a notebook or a test can check a measurement against it.

=============  ====================================================================================
file           layout
=============  ====================================================================================
galaxy.fits    1-D primary image, linear ``WAVE`` WCS (vacuum Angstrom, 3600-9800), ``ERR`` image
               extension (1 sigma); star-forming galaxy at ``ZTRUE = 0.0734``
nebula.fits    1-D primary image, ``AWAV-LOG`` WCS (air Angstrom, log-sampled, 3500-7500), ``VAR``
               image extension; ionised nebula at ``VTRUE = +23.4 km/s`` (optical convention)
radio.fits     1-D primary image, ``FREQ`` WCS (Hz, 4.80-5.05 GHz), ``RESTFRQ``, ``SPECSYS``
               LSRK; H, He and C recombination lines at ``VTRUE = -12.6 km/s`` (radio convention)
xray.fits      binary table ``SPECTRUM`` with ``ENERGY`` [keV], ``FLUX``, ``ERROR``; hot plasma with
               Lyman alpha doublets of hydrogen-like ions at ``ZTRUE = 0.0179``
=============  ====================================================================================
"""

import io
import os
from pathlib import Path

import astropy.constants as const
import astropy.units as u
import numpy as np
from astropy.io import fits

from zline.physics._atomic import atomic_path, check_replaceable

__all__ = ["DEMO_FILES", "DEMO_TRUTH", "write_demo_spectra", "demo_hdulist"]

#: Demo name -> file name.
DEMO_FILES = {
    "galaxy": "galaxy.fits",
    "nebula": "nebula.fits",
    "radio": "radio.fits",
    "xray": "xray.fits",
}

#: Demo name -> truth used to build it (also in each header).
DEMO_TRUTH = {
    "galaxy": {"z": 0.0734, "velocity": 0.0 * u.km / u.s, "convention": "optical"},
    "nebula": {"z": 0.0, "velocity": 23.4 * u.km / u.s, "convention": "optical"},
    "radio": {"z": 0.0, "velocity": -12.6 * u.km / u.s, "convention": "radio"},
    "xray": {"z": 0.0179, "velocity": 0.0 * u.km / u.s, "convention": "optical"},
}

_C_KMS = const.c.to_value(u.km / u.s)
_SEEDS = {"galaxy": 417, "nebula": 91, "radio": 2208, "xray": 1130}

# Invented site shared by the optical demos (made-up coordinates).
_OPTICAL_SITE = {
    "TELESCOP": ("Mirador 2.4m", "invented telescope"),
    "OBSERVAT": ("Loma Quieta Observatory", "invented observatory"),
    "SITELAT": (-27.815, "[deg] invented site latitude"),
    "SITELONG": (-67.402, "[deg] invented site longitude"),
    "SITEELEV": (2870.0, "[m] invented site elevation"),
}


def _observed(rest, name):
    from zline.physics.kinematics import observed_position  # noqa: PLC0415

    truth = DEMO_TRUTH[name]
    return observed_position(rest, z=truth["z"], velocity=truth["velocity"],
                             convention=truth["convention"])


def _axis_header(ctype, cunit, crval, cdelt):
    """A header holding a 1D spectral axis (FITS WCS Paper I keywords, reference pixel 1)."""
    header = fits.Header()
    header["CTYPE1"] = ctype
    header["CUNIT1"] = cunit
    header["CRPIX1"] = 1.0
    header["CRVAL1"] = crval
    header["CDELT1"] = cdelt
    return header


def _common_header(header, name, obj, kind):
    truth = DEMO_TRUTH[name]
    header["OBJECT"] = (obj, "invented object")
    header["ORIGIN"] = ("zline demo-data", "invented, seeded demo spectrum")
    header["ZTRUE"] = (truth["z"], "true redshift of this invented spectrum")
    header["VTRUE"] = (truth["velocity"].to_value(u.km / u.s),
                       "[km/s] true velocity of this invented spectrum")
    header["VCONV"] = (truth["convention"], "velocity convention of VTRUE")
    header["ZLSEED"] = (_SEEDS[name], "random seed of the noise")
    header["COMMENT"] = f"Invented {kind} for zline demos: not an observation."


def _blue_step(x, edge, width):
    """Smooth step: 1 well below ``edge``, 0 well above (no overflow)."""
    return 0.5 * (1.0 - np.tanh((x - edge) / (2.0 * width)))


def _gauss(x, centre, sigma):
    return np.exp(-0.5 * ((x - centre) / sigma) ** 2)


def _galaxy():
    from zline.physics.catalog import line_set  # noqa: PLC0415

    rng = np.random.default_rng(_SEEDS["galaxy"])
    z = DEMO_TRUTH["galaxy"]["z"]
    crval, cdelt, npix = 3600.0, 1.0, 6201
    lam = crval + cdelt * np.arange(npix)
    rest = lam / (1 + z)
    # stellar-like continuum: red-ish slope, 4000 A break, Balmer break (all invented shapes)
    cont = 3.0 * (lam / 6000.0) ** -0.6
    cont *= 1.0 - 0.25 * _blue_step(rest, 4000.0, 25.0)
    cont *= 1.0 - 0.15 * _blue_step(rest, 3680.0, 30.0)
    model = cont.copy()
    absorb = line_set("galaxy-absorption")
    obs_abs = _observed(absorb["rest"], "galaxy").to_value(u.AA)
    for row, centre in zip(absorb, obs_abs):
        if not lam[0] - 50 < centre < lam[-1] + 50:
            continue
        broad = row["species"] == "H I"
        sigma = (9.0 if broad else 3.5) * (1 + z)
        depth = (0.35 if broad else 0.45) * float(row["strength"])
        model *= 1.0 - depth * _gauss(lam, centre, sigma)
    emis = line_set("galaxy-emission")
    obs_em = _observed(emis["rest"], "galaxy").to_value(u.AA)
    f_hbeta = 120.0  # 1e-17 erg/s/cm2
    sigma_v = 85.0  # km/s, invented gas dispersion
    for row, centre in zip(emis, obs_em):
        if not lam[0] - 20 < centre < lam[-1] + 20:
            continue
        sigma = np.hypot(centre * sigma_v / _C_KMS, 1.1)
        flux = f_hbeta * float(row["strength"])
        model += flux / (np.sqrt(2 * np.pi) * sigma) * _gauss(lam, centre, sigma)
    err = np.sqrt(0.12**2 + 0.004 * model)
    flux = model + rng.normal(0.0, 1.0, npix) * err
    hdr = _axis_header(("WAVE", "vacuum wavelength"), "Angstrom", crval, cdelt)
    hdr["BUNIT"] = "1e-17 erg / (s cm2 Angstrom)"
    hdr["SPECSYS"] = ("BARYCENT", "wavelengths are barycentric")
    for key, value in _OPTICAL_SITE.items():
        hdr[key] = value
    _common_header(hdr, "galaxy", "ZL-Gal-0417", "star-forming galaxy spectrum")
    primary = fits.PrimaryHDU(flux.astype(np.float32), header=hdr)
    ehdr = fits.Header()
    ehdr["BUNIT"] = hdr["BUNIT"]
    ehdr["COMMENT"] = "1-sigma uncertainty of the primary flux."
    for key in ("CTYPE1", "CUNIT1", "CRPIX1", "CRVAL1", "CDELT1"):
        ehdr[key] = hdr[key]
    error = fits.ImageHDU(err.astype(np.float32), header=ehdr, name="ERR")
    return fits.HDUList([primary, error])


def _nebula():
    from zline.physics.catalog import line_set  # noqa: PLC0415
    from zline.physics.media import air_to_vacuum, vacuum_to_air  # noqa: PLC0415

    rng = np.random.default_rng(_SEEDS["nebula"])
    crval, step_kms, lam_max = 3500.0, 6.0, 7500.0
    dln = step_kms / _C_KMS
    npix = int(np.log(lam_max / crval) / dln) + 1
    air = crval * np.exp(dln * np.arange(npix))
    vac = air_to_vacuum(air * u.AA).to_value(u.AA)
    # nebular continuum with a Balmer jump (invented shape), rising to the blue of 3646 A
    cont = 0.8 * (vac / 5000.0) ** -0.5 * (1.0 + 0.8 * _blue_step(vac, 3647.0, 2.0))
    model = cont.copy()
    lines = line_set("nebular")
    lines = lines[(lines["rest"] > 3400 * u.AA) & (lines["rest"] < 7700 * u.AA)]
    centre_vac = _observed(lines["rest"], "nebula").to_value(u.AA)
    centre_air = vacuum_to_air(centre_vac * u.AA).to_value(u.AA)
    f_hbeta = 400.0
    for row, centre in zip(lines, centre_air):
        if not air[0] - 10 < centre < air[-1] + 10:
            continue
        sigma = np.hypot(centre * 14.0 / _C_KMS, 0.35)
        flux = f_hbeta * float(row["strength"])
        model += flux / (np.sqrt(2 * np.pi) * sigma) * _gauss(air, centre, sigma)
    var = 0.05**2 + 0.002 * model
    flux = model + rng.normal(0.0, 1.0, npix) * np.sqrt(var)
    hdr = _axis_header(("AWAV-LOG", "air wavelength, logarithmic sampling"), "Angstrom", crval,
                       (crval * dln, "[Angstrom] log step: CRVAL1*dln(lambda)"))
    hdr["BUNIT"] = "1e-16 erg / (s cm2 Angstrom)"
    hdr["SPECSYS"] = ("BARYCENT", "wavelengths are barycentric")
    for key, value in _OPTICAL_SITE.items():
        hdr[key] = value
    _common_header(hdr, "nebula", "ZL-Neb-0091", "ionised-nebula spectrum in air wavelengths")
    primary = fits.PrimaryHDU(flux.astype(np.float32), header=hdr)
    vhdr = fits.Header()
    vhdr["BUNIT"] = "1e-32 erg2 / (s2 cm4 Angstrom2)"
    vhdr["COMMENT"] = "Variance of the primary flux."
    var_hdu = fits.ImageHDU(var.astype(np.float32), header=vhdr, name="VAR")
    return fits.HDUList([primary, var_hdu])


def _radio():
    from zline.physics.catalog import line_set  # noqa: PLC0415

    rng = np.random.default_rng(_SEEDS["radio"])
    crval, cdelt, nchan = 4.80e9, 5.0e4, 5001
    freq = crval + cdelt * np.arange(nchan)
    lines = line_set("radio", unit=u.Hz)
    centres = _observed(lines["rest"], "radio").to_value(u.Hz)
    width_kms = {"H I": 11.0, "He I": 9.0, "C I": 2.8}  # sigma, invented
    amp = 0.12  # K, H alpha peak
    model = 0.015 + 0.004 * ((freq - freq.mean()) / (freq[-1] - freq[0])) ** 2
    for row, centre in zip(lines, centres):
        if not freq[0] - 5e6 < centre < freq[-1] + 5e6:
            continue
        sigma = centre * width_kms[str(row["species"])] / _C_KMS
        model = model + amp * float(row["strength"]) * _gauss(freq, centre, sigma)
    flux = model + rng.normal(0.0, 0.003, nchan)
    rest_h109 = lines["rest"][lines["label"] == "H109α"][0]
    hdr = _axis_header(("FREQ", "frequency"), "Hz", crval, cdelt)
    hdr["RESTFRQ"] = (float(rest_h109.to_value(u.Hz)), "[Hz] H109alpha rest frequency")
    hdr["SPECSYS"] = ("LSRK", "frequencies in the kinematic LSR frame")
    hdr["BUNIT"] = "K"
    hdr["TELESCOP"] = ("Vereda 40m", "invented radio telescope")
    hdr["OBSERVAT"] = ("Vereda Radio Station", "invented observatory")
    hdr["SITELAT"] = (41.188, "[deg] invented site latitude")
    hdr["SITELONG"] = (-3.571, "[deg] invented site longitude")
    hdr["SITEELEV"] = (1012.0, "[m] invented site elevation")
    _common_header(hdr, "radio", "ZL-HII-2208", "radio recombination-line spectrum")
    return fits.HDUList([fits.PrimaryHDU(flux.astype(np.float32), header=hdr)])


# invented relative line emissivities of the ions in the X-ray demo (hot plasma)
_XRAY_WEIGHT = {"Al XIII": 0.15, "Si XIV": 1.0, "P XV": 0.05, "S XVI": 0.8, "Ar XVIII": 0.35,
                "Ca XX": 0.35, "Ti XXII": 0.03, "Cr XXIV": 0.05, "Fe XXVI": 1.6, "Ni XXVIII": 0.12}


def _xray():
    from zline.physics.catalog import line_set  # noqa: PLC0415

    rng = np.random.default_rng(_SEEDS["xray"])
    emin, de, nbin = 1.5, 0.002, 3751
    energy = emin + de * np.arange(nbin)
    model = 2.0e-2 * energy**-0.4 * np.exp(-energy / 4.0)
    lines = line_set("xray", unit=u.keV)
    centres = _observed(lines["rest"], "xray").to_value(u.keV)
    sigma = 0.0025  # keV, invented instrument resolution
    for row, centre in zip(lines, centres):
        weight = _XRAY_WEIGHT.get(str(row["species"]), 0.0)
        if weight == 0.0 or not energy[0] - 0.05 < centre < energy[-1] + 0.05:
            continue
        line_flux = 2.0e-4 * weight * float(row["strength"])  # ph/(s cm2)
        model = model + line_flux / (np.sqrt(2 * np.pi) * sigma) * _gauss(energy, centre, sigma)
    err = np.sqrt((0.02 * model) ** 2 + 1.0e-4**2)
    flux = model + rng.normal(0.0, 1.0, nbin) * err
    cols = [
        fits.Column(name="ENERGY", format="D", unit="keV", array=energy),
        fits.Column(name="FLUX", format="E", unit="ph / (s cm2 keV)", array=flux),
        fits.Column(name="ERROR", format="E", unit="ph / (s cm2 keV)", array=err),
    ]
    table = fits.BinTableHDU.from_columns(cols, name="SPECTRUM")
    hdr = table.header
    hdr["TELESCOP"] = ("Halcon-X", "invented X-ray observatory")
    hdr["INSTRUME"] = ("Calorimeter array", "invented instrument")
    _common_header(hdr, "xray", "ZL-Cl-1130", "X-ray spectrum of a hot plasma")
    primary = fits.PrimaryHDU()
    primary.header["OBJECT"] = hdr["OBJECT"]
    primary.header["ZTRUE"] = hdr["ZTRUE"]
    primary.header["COMMENT"] = "The spectrum is in extension 1 (SPECTRUM)."
    return fits.HDUList([primary, table])


_BUILDERS = {"galaxy": _galaxy, "nebula": _nebula, "radio": _radio, "xray": _xray}


def demo_hdulist(name):
    """Build one demo spectrum in memory.

    Parameters
    ----------
    name : str
        One of `DEMO_FILES` ("galaxy", "nebula", "radio", "xray").

    Returns
    -------
    `~astropy.io.fits.HDUList`
    """
    if name not in _BUILDERS:
        raise ValueError(f"Argument 'name' must be one of {', '.join(map(repr, _BUILDERS))}; "
                         f"got {name!r}.")
    return _BUILDERS[name]()


def write_demo_spectra(directory, overwrite=False, skip_existing=False):
    """Write the four invented demo spectra into ``directory``.

    Parameters
    ----------
    directory : str or path-like
        Created if missing.
    overwrite : bool
        Replace files that already exist -- only zline demo spectra (``ORIGIN = 'zline
        demo-data'``); any other file of that name is refused.
    skip_existing : bool
        Leave files that already exist untouched (and still return their paths).

    Returns
    -------
    dict
        Demo name -> `pathlib.Path` of its file, for the four names of `DEMO_FILES`.

    Raises
    ------
    FileExistsError
        A file exists and neither ``overwrite`` nor ``skip_existing`` is set, or ``overwrite``
        is set and an existing file is not a zline demo spectrum (raised before anything is
        written; the message names the file).
    """
    if overwrite and skip_existing:
        raise ValueError("Arguments 'overwrite' and 'skip_existing' exclude each other; "
                         "set at most one of them.")
    directory = Path(directory)
    if directory.exists() and not directory.is_dir():
        raise NotADirectoryError(f"Argument 'directory' is not a directory: {directory}")
    paths = {name: directory / fname for name, fname in DEMO_FILES.items()}
    if not overwrite and not skip_existing:
        for path in paths.values():
            if path.exists():
                raise FileExistsError(
                    f"{path} already exists; pass overwrite=True to replace it or "
                    "skip_existing=True to keep it."
                )
    if overwrite:
        for path in paths.values():
            check_replaceable(path, "demo-spectrum")
    directory.mkdir(parents=True, exist_ok=True)
    written = {}
    for name, path in paths.items():
        if path.exists() and skip_existing:
            written[name] = path
            continue
        buf = io.BytesIO()
        demo_hdulist(name).writeto(buf, checksum=False)
        with atomic_path(path, overwrite=overwrite, kind="demo-spectrum",
                         exists_message=f"{path} already exists; pass overwrite=True to replace it "
                                        "or skip_existing=True to keep it.") as tmp:
            with open(tmp, "wb") as fh:
                fh.write(buf.getvalue())
        written[name] = path
    return written
