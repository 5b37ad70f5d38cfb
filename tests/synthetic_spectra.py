"""Synthetic survey-like spectra of every kind, made without zline (numpy + astropy.io.fits only).

Kinds: "emission-galaxy", "absorption-galaxy", "quasar", "star", "sky" (a sky fibre: sky-line
residuals, no object) and "noise".  The observing set-up imitates a fibre survey: vacuum
wavelengths 3800-9200 A on a log-linear grid of 1e-4 dex (69 km/s) per pixel, instrumental
resolution R ~ 2000.  ``snr`` is the continuum S/N per pixel at the median of the continuum.

Rest wavelengths are vacuum, in Angstrom, from memory of the NIST Atomic Spectra Database (the
values the trade uses); strengths and widths are typical values of the trade (common practice,
rough), varied at random per spectrum so that no spectrum matches a comb exactly.
"""

import numpy as np
from astropy.io import fits

__all__ = ["KINDS", "make", "write_fits", "LOGLAM_STEP"]

KINDS = ("emission-galaxy", "absorption-galaxy", "quasar", "star", "sky", "noise")
LOGLAM_STEP = 1e-4
LAM_LO, LAM_HI = 3800.0, 9200.0
C_KMS = 299792.458  # exact (SI definition)
SIGMA_INSTR_KMS = 64.0  # R ~ 2000 (FWHM 150 km/s), common practice for fibre surveys

# emission lines of star-forming galaxies: vacuum rest [A] (NIST ASD, from memory), flux
# relative to Hbeta (typical H II region / star-forming galaxy, common practice, rough)
EMISSION = [
    (1215.67, 3.0), (1549.06, 0.15), (1908.73, 0.15),
    (3727.09, 1.0), (3729.88, 1.3), (3869.86, 0.3), (3889.75, 0.1), (4102.89, 0.26),
    (4341.69, 0.47), (4862.69, 1.0), (4960.30, 0.7), (5008.24, 2.1), (5877.25, 0.11),
    (6302.05, 0.05), (6549.86, 0.1), (6564.61, 2.86), (6585.27, 0.3), (6718.29, 0.22),
    (6732.67, 0.16), (9071.1, 0.1), (9533.2, 0.25),
]
# absorption features of old stellar populations: vacuum rest [A] (NIST ASD, from memory),
# typical equivalent width [A] (common practice, rough)
ABSORPTION = [
    (3934.78, 8.0), (3969.59, 7.0), (4102.89, 1.5), (4227.92, 1.0), (4305.0, 4.0),
    (4341.69, 1.5), (4862.69, 1.5), (5168.76, 1.2), (5174.13, 1.5), (5185.05, 1.8),
    (5271.2, 2.0), (5336.4, 1.5), (5891.58, 2.5), (5897.56, 2.0), (6564.61, 1.5),
    (8500.36, 1.0), (8544.44, 2.5), (8664.52, 2.0),
    # ultraviolet interstellar lines for high z
    (2344.21, 1.5), (2382.77, 2.0), (2600.17, 2.0), (2796.35, 3.0), (2803.53, 2.8),
    (2852.96, 1.0),
]
# type 1 AGN lines: vacuum rest [A] (NIST ASD, from memory; blends at their usual effective
# wavelengths), flux relative to Hbeta and broad (True) or narrow (common practice, rough)
QUASAR = [
    (1025.72, 1.0, True), (1215.67, 9.0, True), (1240.14, 2.0, True), (1399.8, 0.8, True),
    (1549.06, 4.0, True), (1640.42, 0.4, True), (1908.73, 1.8, True), (2799.12, 2.5, True),
    (3426.85, 0.05, False), (3728.48, 0.05, False), (4102.89, 0.25, True),
    (4341.69, 0.45, True), (4862.69, 1.0, True), (4960.30, 0.15, False),
    (5008.24, 0.45, False), (6564.61, 3.5, True),
]
# stellar absorption: vacuum rest [A] (NIST ASD, from memory) and equivalent widths [A] for a
# hot (A-type) and a cool (K-type) star (common practice, rough); interpolated between
STELLAR = [
    # (rest, EW hot, EW cool)
    (3836.47, 6.0, 0.8), (3890.15, 7.0, 1.0), (3934.78, 1.0, 12.0), (3971.20, 9.0, 1.0),
    (3969.59, 0.5, 10.0), (4102.89, 12.0, 1.5), (4227.92, 0.1, 2.5), (4305.0, 0.3, 5.0),
    (4341.69, 12.0, 1.5), (4384.8, 0.2, 1.0), (4862.69, 12.0, 1.5), (5168.76, 0.2, 2.0),
    (5174.13, 0.2, 2.5), (5185.05, 0.3, 3.0), (5271.2, 0.2, 2.5), (5330.0, 0.1, 1.5),
    (5891.58, 0.2, 3.0), (5897.56, 0.2, 2.5), (6564.61, 9.0, 1.5),
    (8500.36, 0.8, 1.5), (8544.44, 1.5, 3.5), (8664.52, 1.2, 3.0),
]
# night-sky emission in AIR [A] (common practice: the bright auroral/airglow and OH lines)
SKY_AIR = [5577.34, 5889.95, 5895.92, 6300.30, 6363.78, 6863.96, 7316.28, 7340.89, 7794.11,
           7821.50, 7913.71, 7993.33, 8344.60, 8399.17, 8430.17, 8827.10, 8885.85, 8919.61,
           8943.40, 8988.38, 9001.38]


def _grid():
    n = int(np.log10(LAM_HI / LAM_LO) / LOGLAM_STEP)
    return np.log10(LAM_LO) + LOGLAM_STEP * np.arange(n)


def _gauss(lam, centre, sigma_kms):
    sig = centre * sigma_kms / C_KMS
    return np.exp(-0.5 * ((lam - centre) / sig) ** 2) / (np.sqrt(2 * np.pi) * sig)


def _lines(lam, rest, weights, z, sigma_kms, shifts=None):
    out = np.zeros_like(lam)
    for i, (r, w) in enumerate(zip(rest, weights)):
        c = r * (1 + z) * (1 + (0.0 if shifts is None else shifts[i]) / C_KMS)
        if lam[0] - 50 * c * sigma_kms / C_KMS < c < lam[-1] + 50 * c * sigma_kms / C_KMS:
            out += w * _gauss(lam, c, sigma_kms)
    return out


def _emission_galaxy(lam, z, rng):
    rest = np.array([r for r, _ in EMISSION])
    rel = np.array([s for _, s in EMISSION]) * rng.uniform(0.6, 1.5, len(EMISSION))
    rel[0] *= rng.uniform(0.0, 1.0)  # Lya often absorbed
    ew_hb = rng.uniform(8, 40)  # Hbeta equivalent width [A], rest
    sig = np.hypot(rng.uniform(30, 120), SIGMA_INSTR_KMS)
    cont = (lam / 5000.0) ** rng.uniform(-1.5, 0.0)
    hb_cont = (4862.69 * (1 + z) / 5000.0) ** 0  # continuum ~1 near Hbeta
    flux = cont + _lines(lam, rest, rel * ew_hb * (1 + z) * hb_cont, z, sig)
    return cont, flux


def _absorption_galaxy(lam, z, rng):
    rest = np.array([r for r, _ in ABSORPTION])
    ew = np.array([e for _, e in ABSORPTION]) * rng.uniform(0.7, 1.3, len(ABSORPTION))
    sig = np.hypot(rng.uniform(100, 280), SIGMA_INSTR_KMS)
    rest_lam = lam / (1 + z)
    cont = (rest_lam / 5000.0) ** 1.0
    cont *= 1 - 0.45 / (1 + np.exp((rest_lam - 4000.0) / 15.0))  # the 4000 A break
    cont *= 1 - 0.3 / (1 + np.exp((rest_lam - 2900.0) / 40.0))  # the 2900 A break
    lines = _lines(lam, rest, ew * (1 + z), z, sig)
    return cont, cont * np.clip(1 - lines, 0.05, None)


def _quasar(lam, z, rng):
    rest = np.array([q[0] for q in QUASAR])
    rel = np.array([q[1] for q in QUASAR]) * rng.uniform(0.6, 1.5, len(QUASAR))
    broad = np.array([q[2] for q in QUASAR])
    fwhm = rng.uniform(2000, 10000)
    shifts = np.zeros(len(QUASAR))
    # high-ionisation broad lines blueshifted (common practice): C IV, Si IV, N V, He II
    blue = -rng.uniform(0, 1500)
    for i, r in enumerate(rest):
        if r in (1240.14, 1399.8, 1549.06, 1640.42):
            shifts[i] = blue
    rest_lam = lam / (1 + z)
    cont = (rest_lam / 3000.0) ** rng.uniform(-1.8, -1.0)
    ew_hb = rng.uniform(40, 120)
    flux = cont.copy()
    for sel, sig in ((broad, np.hypot(fwhm / 2.3548, SIGMA_INSTR_KMS)),
                     (~broad, np.hypot(rng.uniform(100, 300), SIGMA_INSTR_KMS))):
        cont_at = (rest[sel] / 3000.0) ** -1.4
        flux += _lines(lam, rest[sel], rel[sel] * cont_at * ew_hb * (1 + z) / 4.0, z, sig,
                       shifts[sel])
    forest = rest_lam < 1215.67  # Lyman-alpha forest: random absorbers (common practice)
    if forest.any():
        n_abs = int(forest.sum() * 0.15)
        centres = rng.choice(np.flatnonzero(forest), n_abs)
        tau = np.zeros_like(lam)
        for c in centres:
            tau += rng.exponential(0.6) * np.exp(-0.5 * ((np.arange(lam.size) - c) / 1.2) ** 2)
        flux[forest] *= np.exp(-tau[forest])
    return cont, flux


def _star(lam, v_kms, rng):
    t = rng.uniform(0, 1)  # 0 = A type, 1 = K type
    rest = np.array([s[0] for s in STELLAR])
    ew = np.array([(1 - t) * s[1] + t * s[2] for s in STELLAR])
    ew *= rng.uniform(0.8, 1.2, len(STELLAR))
    teff = 9500 - 5000 * t
    x = 1.4388e8 / (lam * teff)  # hc/(lambda k T) with lambda in A (common practice)
    cont = lam**-5 / np.expm1(x)
    cont /= np.median(cont)
    # pressure-broadened Balmer lines of hot stars: wide wings
    sig = np.where(np.isin(rest, [3835.39, 3890.17, 3971.20, 4102.89, 4341.69, 4862.69,
                                  6564.61]), 300 + 900 * (1 - t), 60.0)
    lines = np.zeros_like(lam)
    for r, e, s in zip(rest, ew, sig):
        lines += _lines(lam, [r], [e], v_kms / C_KMS, np.hypot(s, SIGMA_INSTR_KMS))
    return cont, cont * np.clip(1 - lines, 0.05, None)


def _sky(lam, rng):
    cont = np.ones_like(lam)
    n = 1.000277  # refractive index of air near 6000 A (common practice, enough here)
    flux = cont + _lines(lam, np.array(SKY_AIR) * n, rng.normal(0, 3.0, len(SKY_AIR)), 0.0,
                         SIGMA_INSTR_KMS)
    return cont, flux


def make(kind, z=0.0, snr=10.0, seed=0, velocity_kms=0.0):
    """One synthetic spectrum.

    Returns
    -------
    lam : ndarray
        Vacuum wavelength [Angstrom].
    flux, err : ndarray
        Flux (arbitrary units) with Gaussian noise, and its 1-sigma error.
    truth : dict
        ``kind``, ``z`` (for a star: ``velocity_kms/c``), ``snr``.
    """
    if kind not in KINDS:
        raise ValueError(f"kind must be one of {KINDS}; got {kind!r}")
    rng = np.random.default_rng(seed)
    lam = 10 ** _grid()
    if kind == "emission-galaxy":
        cont, flux = _emission_galaxy(lam, z, rng)
    elif kind == "absorption-galaxy":
        cont, flux = _absorption_galaxy(lam, z, rng)
    elif kind == "quasar":
        cont, flux = _quasar(lam, z, rng)
    elif kind == "star":
        z = velocity_kms / C_KMS
        cont, flux = _star(lam, velocity_kms, rng)
    elif kind == "sky":
        cont, flux = _sky(lam, rng)
    else:
        cont = flux = np.ones_like(lam)
    err = np.full(lam.size, np.median(cont) / snr)
    if kind == "noise":
        flux = np.zeros_like(lam)
        err = np.full(lam.size, 1.0)
    noisy = flux + rng.normal(0.0, 1.0, lam.size) * err
    return lam, noisy, err, {"kind": kind, "z": z, "snr": snr}


def write_fits(path, lam, flux, err, medium="vacuum"):
    """A 1D FITS file: log-linear wavelength axis in the WCS (``lam`` must be log-linear; FITS
    WCS ``WAVE-LOG`` for vacuum, ``AWAV-LOG`` for air), flux in the primary HDU and the 1-sigma
    error in an extension named ERR."""
    hdr = fits.Header()
    hdr["CTYPE1"] = "AWAV-LOG" if medium == "air" else "WAVE-LOG"
    hdr["CUNIT1"] = "Angstrom"
    hdr["CRPIX1"] = 1.0
    hdr["CRVAL1"] = float(lam[0])
    hdr["CDELT1"] = float(lam[0] * np.log(lam[1] / lam[0]))
    hdr["BUNIT"] = "erg / (s cm2 Angstrom)"
    hdr["SPECSYS"] = "TOPOCENT"
    hdr["VACUUM"] = medium != "air"
    prim = fits.PrimaryHDU(flux.astype(np.float32), header=hdr)
    ehdu = fits.ImageHDU(err.astype(np.float32), name="ERR")
    fits.HDUList([prim, ehdu]).writeto(path, overwrite=True)
