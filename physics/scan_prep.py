"""Data preparation for the redshift search: a bounded, continuum-free S/N spectrum on a uniform
ln(lambda) grid, with the night-sky and telluric regions masked.

Work is bounded before anything large is allocated: the data are combined in blocks of pixels
(inverse-variance weighted) when the pixel step is finer than `MIN_STEP` in ln(lambda)
(0.3 km/s) or when there are more than `MAX_PIXELS` usable pixels, and the correlation grid never
holds more than `MAX_GRID` points (coarsened, with a note, otherwise).  The continuum is a running
median over `CONTINUUM_KMS` of velocity (not a fixed number of pixels, so finely sampled spectra
keep their lines), taken on block medians so that its cost does not grow with the window.
A mask that leaves less than `MASK_ALL_FRACTION` of the pixels with finite data flags the whole
spectrum rather than pixels (survey files set fibre-level warning bits on every pixel); the
search then ignores it and says so in its notes.
"""

import astropy.units as u
import numpy as np
from astropy.nddata import StdDevUncertainty
from scipy import ndimage

from zline.physics.spectra._build import WHOLE_SPECTRUM_MASK

__all__ = ["SKY_LINES_AIR", "TELLURIC_BANDS_AIR", "MAX_GRID", "MAX_PIXELS", "MIN_STEP",
           "CONTINUUM_KMS", "prepare"]

C_KMS = 299792.458  # km/s, exact (SI definition)
MAX_GRID = 1 << 20
MAX_PIXELS = 1 << 19
MIN_STEP = 1e-6  # ln(lambda) per grid step: 0.3 km/s
CONTINUUM_KMS = 7000.0  # running-median window (common practice: several broad-line widths)
CLIP_SNR = 8.0  # per-pixel S/N ceiling (see prepare) ...
CLIP_PERCENTILE = 95.0  # ... unless 5% of the pixels are above it (rich absorption spectra)
WHITEN_KMS = 20000.0  # window of the running scatter that down-weights excess structure
#: A mask leaving less than this share of the usable pixels is ignored: the reader's rule for
#: files (`zline.physics.spectra._build.WHOLE_SPECTRUM_MASK`), applied here to spectra made in
#: Python
MASK_ALL_FRACTION = 1.0 - WHOLE_SPECTRUM_MASK

#: Bright night-sky emission lines in AIR [Angstrom]: the airglow lines of O I, the Na I D
#: doublet (airglow and sodium street lights), the mercury street-light lines and the brightest
#: OH Meinel-band lines below 9400 A (values of the trade, common practice, from memory); each
#: is masked over +-`SKY_HALF_WIDTH_AA`.  Na I D is also one of the strongest absorption lines
#: of stars and of galaxies near z = 0, so there only excess emission (a sky residual) is
#: removed and absorption is kept (`EMISSION_ONLY`).
SKY_LINES_AIR = ((4358.34, "Hg I street light"), (5460.74, "Hg I street light"),
                 (5577.34, "[O I] night sky"), (5889.95, "Na I D night sky, emission only"),
                 (5895.92, "Na I D night sky, emission only"), (6300.30, "[O I] night sky"),
                 (6363.78, "[O I] night sky")) + tuple(
    (w, "OH night sky") for w in (7316.28, 7340.89, 7750.64, 7794.11, 7821.50, 7913.71,
                                  7993.33, 8344.60, 8399.17, 8430.17, 8827.10, 8885.85,
                                  8919.61, 8943.40, 8988.38, 9001.38, 9375.96))
SKY_HALF_WIDTH_AA = 4.0
EMISSION_ONLY = "emission only"
_HALF_NORMAL_MEAN = 1.0 / np.sqrt(2.0 * np.pi)  # E[max(n, 0)] of a unit Gaussian (exact)
#: Telluric absorption bands in AIR [Angstrom] (O2 B and A bands; common practice).
TELLURIC_BANDS_AIR = ((6864.0, 6935.0, "telluric O2 B band"),
                      (7591.0, 7700.0, "telluric O2 A band"))


def _wavelength_axis(spectrum):
    axis = u.Quantity(spectrum.spectral_axis)
    if not axis.unit.is_equivalent(u.AA, equivalencies=u.spectral()):
        raise ValueError(
            f"Argument 'spectrum' must have a wavelength, frequency, energy or wavenumber axis; "
            f"got unit '{axis.unit}' ({axis.unit.physical_type}). Convert a velocity axis to "
            "frequency or wavelength first.")
    lam = axis.to_value(u.AA, equivalencies=u.spectral())
    return lam, axis.unit


def _uncertainty(spectrum, shape):
    unc = spectrum.uncertainty
    if unc is None:
        return None
    try:
        with np.errstate(divide="ignore", invalid="ignore"):  # zero inverse variance: no data
            err = np.asarray(unc.represent_as(StdDevUncertainty).array, dtype=float).reshape(-1)
    except (TypeError, ValueError, AttributeError):
        return None
    return err if err.shape == shape else None


def _combine(lam, flux, err, good, k):
    """Blocks of k pixels: inverse-variance mean (plain mean without errors)."""
    n = (lam.size // k) * k
    lam, flux, good = lam[:n].reshape(-1, k), flux[:n].reshape(-1, k), good[:n].reshape(-1, k)
    if err is not None:
        w = np.where(good, 1.0 / np.where(good, err[:n].reshape(-1, k), 1.0) ** 2, 0.0)
    else:
        w = good.astype(float)
    ws = w.sum(axis=1)
    ok = ws > 0
    safe = np.where(ok, ws, 1.0)
    f = np.where(ok, (w * np.where(good, flux, 0.0)).sum(axis=1) / safe, 0.0)
    e = np.where(ok, 1.0 / np.sqrt(safe), np.inf) if err is not None else None
    return lam.mean(axis=1), f, e, ok


def _running_median(y, window):
    """Running median of y over ``window`` points, computed on block medians when large."""
    b = max(1, window // 31)
    if b == 1:
        return ndimage.median_filter(y, size=window | 1, mode="nearest")
    n = (y.size // b) * b
    if n == 0:
        return np.full(y.size, np.median(y))
    blocks = np.median(y[:n].reshape(-1, b), axis=1)
    med = ndimage.median_filter(blocks, size=max(3, (window // b) | 1), mode="nearest")
    x = (np.arange(blocks.size) + 0.5) * b - 0.5
    return np.interp(np.arange(y.size), x, med)


def _robust_err(resid, window):
    mad = _running_median(np.abs(resid - np.median(resid)), window)
    floor = 0.2 * np.median(mad) if np.median(mad) > 0 else np.finfo(float).tiny
    return 1.4826 * np.maximum(mad, floor)


def _sky_regions(lam_lo, lam_hi, medium):
    """Masked regions [Angstrom, in the spectrum's medium] inside lam_lo..lam_hi."""
    from zline.physics.media import air_to_vacuum  # noqa: PLC0415

    regions = [(c - SKY_HALF_WIDTH_AA, c + SKY_HALF_WIDTH_AA, why) for c, why in SKY_LINES_AIR]
    regions += list(TELLURIC_BANDS_AIR)
    out = []
    for lo, hi, why in regions:
        if medium != "air":
            lo, hi = air_to_vacuum(np.array([lo, hi]) * u.AA).to_value(u.AA)
        if hi > lam_lo and lo < lam_hi:
            out.append((float(lo), float(hi), why))
    return out


def prepare(spectrum, window=None, step=None, mask_sky=True, continuum_kms=CONTINUUM_KMS,
            wide_kms=None, robust=True):
    """The S/N spectrum on a uniform ln(lambda) grid.

    Parameters
    ----------
    spectrum : `specutils.Spectrum`
    window : int, optional
        Running-median window in the data's pixels; default `continuum_kms` of velocity.
    step : float, optional
        Grid step in ln(lambda); default the finest pixel step of the data (10th percentile).
    mask_sky : bool
        Mask `SKY_LINES_AIR` and `TELLURIC_BANDS_AIR` (wavelength axes only).
    continuum_kms : float
        Default running-median window in km/s.
    wide_kms : float, optional
        Also return ``d_wide``: the S/N with a running median over this many km/s (for broad
        lines, which a narrower window would eat).
    robust : bool
        Whiten excess scatter and clip the per-pixel S/N (the comb search); False for a
        template scan, where the template weighs the lines.

    Returns
    -------
    dict
        ``grid, d`` (S/N summed per grid cell), ``d_wide``, ``cov`` (1 where data), ``var``
        (variance of d per grid cell), ``clean`` (``cov`` without the emission-only sky
        regions), ``snr, good, lnlam, flux`` (data pixels), ``h`` (grid step),
        ``dln`` (median pixel step), ``medium, is_freq, unit, masked``
        (list of (lo, hi, reason) in the spectrum's unit), ``notes`` (list of str).
    """
    lam, unit = _wavelength_axis(spectrum)
    is_freq = unit.is_equivalent(u.Hz)
    flux = np.asarray(u.Quantity(spectrum.flux).value, dtype=float).reshape(-1)
    if flux.shape != lam.shape:
        raise ValueError(f"Argument 'spectrum' must be one-dimensional; got flux shape "
                         f"{np.shape(spectrum.flux)}.")
    mask = np.zeros(flux.shape, bool) if spectrum.mask is None else \
        np.asarray(spectrum.mask).reshape(-1).astype(bool)
    err = _uncertainty(spectrum, flux.shape)
    usable = np.isfinite(flux) & np.isfinite(lam) & (lam > 0)
    if err is not None:
        usable &= np.isfinite(err) & (err > 0)
    notes = []
    n_usable, n_left = int(usable.sum()), int((usable & ~mask).sum())
    if n_usable >= 100 and n_left < MASK_ALL_FRACTION * n_usable:
        # a mask on (nearly) every pixel with finite data flags the whole spectrum (a survey's
        # fibre-level warning bit), not pixels to drop: searched without it, with a note
        notes.append(f"the spectrum's mask covers {1 - n_left / n_usable:.0%} of the pixels "
                     f"with finite data and errors; searched without the mask")
        mask = np.zeros(flux.shape, bool)
    good = usable & ~mask
    if good.sum() < 10:
        raise ValueError(f"Argument 'spectrum' has {int(good.sum())} usable pixels; a scan "
                         "needs at least 10.")
    meta = getattr(spectrum, "meta", None) or {}
    medium = "air" if (meta.get("zline") or {}).get("medium") == "air" else "vacuum"
    order = np.argsort(lam, kind="stable")
    lam, flux, good = lam[order], flux[order], good[order]
    err = None if err is None else err[order]
    lnlam = np.log(np.where(lam > 0, lam, 1.0))
    span = lnlam[good][-1] - lnlam[good][0]
    if not span > 0:
        raise ValueError("Argument 'spectrum' has a spectral axis of zero extent (all usable "
                         "pixels at one wavelength); check CDELT1/the axis keywords.")
    dln_med = span / max(1, good.sum() - 1)
    k = int(max(1, np.ceil(MIN_STEP / dln_med) if dln_med > 0 else 1,
                np.ceil(good.sum() / MAX_PIXELS)))
    if k > 1:
        if k * 10 > good.sum():
            raise ValueError(
                f"Argument 'spectrum': {good.sum()} usable pixels span only {span:.3g} in "
                f"ln(lambda) ({span * C_KMS:.3g} km/s); too narrow to search (check CDELT1).")
        lam, flux, err, good = _combine(lam, flux, err, good, k)
        lnlam = np.log(lam)
        notes.append(f"{k} adjacent pixels combined before the search (pixel step or pixel "
                     f"count beyond the scan's bounds)")
    dln_all = np.diff(lnlam)
    dln = dln_all[dln_all > 0]
    dpix = float(np.median(dln)) if dln.size else MIN_STEP
    if window is None:
        window = int(np.clip(round(continuum_kms / C_KMS / dpix), 5, max(5, good.sum())))
    win = int(min(window, max(5, (good.sum() // 2) * 2 - 1)))
    cont = np.zeros(flux.shape)
    cont[good] = _running_median(flux[good], win)
    resid = flux - cont
    if err is None:
        err = np.full(flux.shape, np.inf)
        err[good] = _robust_err(resid[good], win)
    snr = np.where(good, resid / np.where(good, err, 1.0), 0.0)
    # excess scatter (a Lyman-alpha forest, bad sky subtraction, fringing): where the running
    # robust scatter of the S/N exceeds 1 the pixels are down-weighted as if that were noise
    wwin = int(np.clip(round(WHITEN_KMS / C_KMS / dpix), 15, max(15, good.sum())))
    excess = np.ones(flux.shape)
    if good.sum() > 2 * wwin:
        sg = snr[good]
        excess[good] = np.maximum(1.0, 1.4826 * _running_median(np.abs(sg), wwin) / 0.6745
                                  * 0.6745)
    if not robust:  # a template scan: the template, not the clip, says what each line weighs
        excess = np.ones(flux.shape)
    snr = snr / excess
    # no single line carries a reading: per-pixel S/N clipped at CLIP_SNR, so one very strong
    # line (or a cosmic ray, a sky residual) counts no more than a clear line of the same width
    clip = max(CLIP_SNR, float(np.percentile(np.abs(snr[good]), CLIP_PERCENTILE)))
    if not robust:
        clip = np.inf
    snr = np.clip(snr, -clip, clip)
    snr_wide = None
    if wide_kms is not None:
        wwin = int(np.clip(round(wide_kms / C_KMS / dpix), win, max(5, good.sum())))
        cont_w = np.zeros(flux.shape)
        cont_w[good] = _running_median(flux[good], wwin)
        snr_wide = np.where(good, (flux - cont_w) / np.where(good, err, 1.0), 0.0) / excess
        snr_wide = np.clip(snr_wide, -clip, clip)
    from zline.physics.scan_kinds import line_width  # noqa: PLC0415

    w_em, w_abs = line_width(snr, good, dpix, 1.0), line_width(snr, good, dpix, -1.0)
    widths = [w for w in (w_em, w_abs) if w > 1.51 * dpix]
    # lag step: the data's coarsest pixel step, or a third of the narrowest measured line width
    # when that is coarser (finely sampled spectra: the work follows the lines, not the pixels)
    coarse = float(np.percentile(dln, 99))
    h = max(coarse, min(widths) / 3.0) if widths else coarse
    h = max(float(step) if step is not None else h, MIN_STEP)
    g0, g1 = lnlam[good][0], lnlam[good][-1]
    n = int(np.floor((g1 - g0) / h)) + 1
    if n > MAX_GRID:
        h = (g1 - g0) / (MAX_GRID - 1)
        n = MAX_GRID
        notes.append(f"correlation grid coarsened to {h * C_KMS:.3g} km/s per step "
                     f"({MAX_GRID} steps at most)")
    grid = g0 + h * np.arange(n)
    masked = []
    if mask_sky and not is_freq and unit.is_equivalent(u.AA):
        for lo, hi, why in _sky_regions(np.exp(g0), np.exp(g1), medium):
            inside = (lam >= lo) & (lam <= hi)
            if why.endswith(EMISSION_ONLY):  # keep absorption, drop the (sky) excess; for
                # unit Gaussian noise min(n, 0) has mean -1/sqrt(2 pi), added back so that
                # noise alone reads no absorption there (the star window is at rest there)
                snr[inside] = np.minimum(snr[inside], 0.0) + _HALF_NORMAL_MEAN
                if snr_wide is not None:
                    snr_wide[inside] = np.minimum(snr_wide[inside], 0.0) + _HALF_NORMAL_MEAN
            else:
                good &= ~inside
            masked.append((lo, hi, why))
    if h >= 0.999 * coarse:
        # every grid cell sums the S/N of the pixels in it (variance = their number)
        cell = np.clip(np.round((lnlam[good] - g0) / h).astype(int), 0, n - 1)
        var = np.bincount(cell, minlength=n).astype(float)
        d = np.bincount(cell, weights=snr[good], minlength=n)
        d_wide = None if snr_wide is None else np.bincount(cell, weights=snr_wide[good],
                                                           minlength=n)
        cov = (var > 0).astype(float)
    else:
        # a grid finer than the pixels (``step``): interpolate; a sum over the grid repeats each
        # pixel about `over` times
        d = np.interp(grid, lnlam, np.where(good, snr, 0.0))
        d_wide = None if snr_wide is None else np.interp(grid, lnlam,
                                                         np.where(good, snr_wide, 0.0))
        cov = np.interp(grid, lnlam, good.astype(float))
        gap = np.interp(grid, lnlam[good], np.r_[0.0, np.diff(lnlam[good])])
        cov[gap > 10 * dpix] = 0.0
        cov = (cov >= 0.5).astype(float)
        d *= cov
        if d_wide is not None:
            d_wide *= cov
        var = cov * np.maximum(1.0, np.interp(grid, lnlam[1:], dln_all) / h)
    # cells with data and no sky line: the emission-only sky regions keep their absorption but
    # lose the blue or red wing of an emission line there
    clean = cov.copy()
    for lo, hi, why in masked:
        if why.endswith(EMISSION_ONLY):
            clean[(grid >= np.log(lo)) & (grid <= np.log(hi))] = 0.0
    masked_q = []
    for lo, hi, why in masked:
        q = (np.array([lo, hi]) * u.AA).to_value(unit, equivalencies=u.spectral())
        masked_q.append((float(q.min()), float(q.max()), why))
    return dict(grid=grid, d=d, d_wide=d_wide, cov=cov, clean=clean, var=var, snr=snr,
                good=good, lnlam=lnlam, flux=flux, h=h, dln=dpix, width_em=w_em, width_abs=w_abs, medium=medium,
                is_freq=is_freq, unit=unit, masked=masked_q, notes=notes)
