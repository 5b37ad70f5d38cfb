"""Find the lines of a set near a trial shift: the first step of `zline.physics.measure`.

`find_shift` slides the whole set over a search window of velocities and, at each trial shift,
measures the set with a matched filter: one template of Gaussians of a trial width at the lines'
places, weighted by their expected strengths and signs, on the spectrum minus a running-median
continuum, weighted by the flux errors.  The set is placed where its lines together fit best,
not where one noise spike sits or a weak line falls on a strong neighbour.  `search_window` states the default window and `group_lines` joins
lines whose fit windows overlap, so that each fit models every line inside its window.
"""

from dataclasses import dataclass

import astropy.units as u
import numpy as np
from astropy.constants import c as _c
from scipy.ndimage import median_filter

from zline.physics.fitting import (DETECTION_SNR, KINDS, _spectrum_arrays, _std_errors,
                                   resolution_fwhm)

__all__ = ["FoundShift", "find_shift", "search_window", "group_lines", "line_class",
           "SEARCH_WINDOW", "SEARCH_RESOLUTION_ELEMENTS", "FIND_FWHM"]

_KMS = u.km / u.s
_C_KMS = _c.to_value(_KMS)

#: Default search half-window: the larger of this and `SEARCH_RESOLUTION_ELEMENTS` resolution
#: FWHMs (so a trial a few hundred km/s off still finds its lines).
SEARCH_WINDOW = 500 * _KMS
SEARCH_RESOLUTION_ELEMENTS = 5
#: Trial FWHMs of the matched filter by line class: multiples of the resolution FWHM, or km/s
#: (common practice: galaxy absorption features a few hundred km/s, quasar broad lines thousands).
FIND_FWHM = {"emission": tuple(1.25 ** np.arange(8)),
             "absorption": tuple(200 * 1.25 ** np.arange(8) * _KMS),
             "broad": tuple(1500 * 1.25 ** np.arange(10) * _KMS)}


def line_class(kind, label="", set_name=""):
    """Class of a line for widths and signs: ``"emission"``, ``"absorption"`` or ``"broad"``.

    A ``kind`` of ``"broad"`` (or one containing "broad") is broad; in a set named ``quasar``
    every permitted emission line (a label not starting with ``[``) is broad.
    """
    kind = str(kind or "emission").lower()
    if "broad" in kind:
        return "broad"
    if kind.startswith("abs"):
        return "absorption"
    if "quasar" in str(set_name).lower() and not str(label).startswith("["):
        return "broad"
    return "emission"


def _velocity_pixel(spectrum, position):
    fw, _ = resolution_fwhm(spectrum, position)
    from zline.physics.fitting import SAMPLING_FWHM_PIXELS

    return float(_C_KMS * fw.value / abs(position.value)), float(
        _C_KMS * fw.value / SAMPLING_FWHM_PIXELS / abs(position.value))


def search_window(spectrum, positions):
    """Default search half-window (km/s): max(`SEARCH_WINDOW`, 5 resolution FWHM)."""
    mid = u.Quantity(np.median(u.Quantity(positions).value), u.Quantity(positions).unit)
    res_kms, _ = _velocity_pixel(spectrum, mid)
    return max(SEARCH_WINDOW.to_value(_KMS), SEARCH_RESOLUTION_ELEMENTS * res_kms) * _KMS


@dataclass
class FoundShift:
    """Result of `find_shift`.

    Attributes
    ----------
    velocity : `~astropy.units.Quantity` ['speed']
        Shift of the whole set from the trial (observed = trial * (1 + v/c) on a wavelength
        axis); 0 when nothing was found.
    found : bool
        True when a line of the set reached ``|S/N| >= DETECTION_SNR`` at the best shift.
    cls : str
        The class that set the shift (narrow classes first).
    fwhm : dict
        Matched-filter FWHM (km/s Quantity) per class.
    snr : ndarray
        Matched-filter S/N of each line (expected sign) at the shift.
    """

    velocity: u.Quantity
    found: bool
    cls: str
    fwhm: dict
    snr: np.ndarray


def _arrays(spectrum):
    x, y, _, _ = _spectrum_arrays(spectrum, "find_shift")
    err = _std_errors(spectrum)
    good = np.isfinite(x) & np.isfinite(y)
    if spectrum.mask is not None:
        good &= ~np.asarray(spectrum.mask, dtype=bool)
    if err is not None:
        good &= np.isfinite(err) & (err > 0)
    order = np.argsort(x[good])
    x, y = x[good][order], y[good][order]
    if err is None:
        mad = np.median(np.abs(np.diff(y) - np.median(np.diff(y))))
        e = np.full(y.size, 1.4826 * mad / np.sqrt(2) or 1.0)
    else:
        e = err[good][order]
    return x, y, e


def _template(x, y, e, pos, signs, weights, fwhm_kms, shifts, factor_sign, pix_kms):
    """S/N of the whole class as one template (lines weighted by their expected strengths)."""
    num, den = _scan(x, y, e, pos, signs, fwhm_kms, shifts, factor_sign, pix_kms, parts=True)
    num, den = np.nan_to_num(num), np.nan_to_num(den)
    tot = den @ (weights**2)
    return np.where(tot > 0, (num @ weights) / np.sqrt(np.where(tot > 0, tot, 1.0)), 0.0)


def _scan(x, y, e, pos, signs, fwhm_kms, shifts, factor_sign, pix_kms, parts=False):
    """Matched-filter S/N, shape (n_shift, n_line), of lines at ``pos`` shifted by ``shifts``
    (with ``parts``: the filter's numerator and denominator instead)."""
    size = int(max(15, 6 * fwhm_kms / pix_kms)) | 1
    r = y - median_filter(y, size=min(size, y.size - (1 - y.size % 2)), mode="nearest")
    w = 1.0 / e**2
    out = np.full((shifts.size, pos.size), np.nan)
    nums, dens = np.zeros_like(out), np.zeros_like(out)
    factor = (1.0 + shifts / _C_KMS) ** factor_sign
    for i, p in enumerate(pos):
        sig = abs(p) * fwhm_kms / _C_KMS / 2.3548200450309493
        centres = p * factor
        lo, hi = centres.min() - 4 * sig, centres.max() + 4 * sig
        k = slice(np.searchsorted(x, lo), np.searchsorted(x, hi))
        xs = x[k]
        if xs.size < 3:
            continue
        g = np.exp(-0.5 * ((xs[None, :] - centres[:, None]) / sig) ** 2)
        num = g @ (r[k] * w[k])
        den = (g**2) @ w[k]
        ok = den > 0
        out[ok, i] = signs[i] * num[ok] / np.sqrt(den[ok])
        nums[:, i], dens[:, i] = signs[i] * num, den
    return (nums, dens) if parts else out


def find_shift(spectrum, predicted, classes, window=None, strengths=None):
    """Shift of the whole line set that its lines together support best.

    Parameters
    ----------
    spectrum : `specutils.Spectrum`
        1D spectrum.
    predicted : `~astropy.units.Quantity`
        Observed positions of the lines at the trial shift (spectral unit of the spectrum).
    classes : sequence of str
        `line_class` of each line.
    window : `~astropy.units.Quantity` ['speed'], optional
        Search half-window; default `search_window`.
    strengths : sequence of float, optional
        Expected relative strengths: the lines of a class form one template weighted by them
        (so a weak line cannot place the set on a strong neighbour); default all equal.

    Returns
    -------
    FoundShift
    """
    predicted = u.Quantity(predicted)
    pos = np.asarray(predicted.value, dtype=float)
    classes = np.asarray(classes)
    signs = np.array([KINDS[c] for c in classes], dtype=float)
    wts = np.ones(pos.size) if strengths is None else np.asarray(strengths, dtype=float)
    wts = np.where(np.isfinite(wts) & (wts > 0), wts, np.nanmin(wts[wts > 0]) if np.any(
        wts > 0) else 1.0)
    win = (search_window(spectrum, predicted) if window is None else window).to_value(_KMS)
    x, y, e = _arrays(spectrum)
    res_kms, pix_kms = _velocity_pixel(spectrum, u.Quantity(np.median(pos), predicted.unit))
    factor_sign = 1 if predicted.unit.physical_type == "length" else -1
    results, fwhms = {}, {}
    for cls in ("emission", "absorption", "broad"):
        sel = classes == cls
        if not sel.any():
            continue
        trials = [(f * res_kms if not isinstance(f, u.Quantity) else max(f.to_value(_KMS),
                   res_kms)) for f in FIND_FWHM[cls]]
        for fw in trials:
            step = max(min(0.25 * pix_kms, fw / 8.0), 1e-3)
            n = int(np.ceil(win / step))
            shifts = np.linspace(-n * step, n * step, 2 * n + 1)
            stat = _template(x, y, e, pos[sel], signs[sel], wts[sel], fw, shifts, factor_sign,
                             pix_kms)
            j = int(np.argmax(stat))
            snr = _scan(x, y, e, pos[sel], signs[sel], fw, shifts[j:j + 1], factor_sign,
                        pix_kms)[0]
            peak = float(np.nanmax(snr)) if np.isfinite(snr).any() else 0.0
            if cls not in results or stat[j] > results[cls][0]:
                results[cls] = (float(stat[j]), float(shifts[j]), peak >= DETECTION_SNR)
                fwhms[cls] = fw * _KMS
    found = {c: r for c, r in results.items() if r[2]}
    narrow = [c for c in found if c != "broad"]
    if narrow:
        cls = max(narrow, key=lambda c: found[c][0])
    elif found:
        cls = "broad"
    else:
        cls = None
    v = found[cls][1] if cls else 0.0
    if cls:  # the width at the found shift, on a finer grid (less noise-driven than the scan)
        for c_name in fwhms:
            sel = classes == c_name
            grid = fwhms[c_name].value * 1.06 ** np.arange(-8, 9)
            grid = grid[grid >= res_kms * (1 - 1e-9)]
            stats = [_template(x, y, e, pos[sel], signs[sel], wts[sel], w, np.array([v]),
                               factor_sign, pix_kms)[0] for w in grid]
            fwhms[c_name] = float(grid[int(np.argmax(stats))]) * _KMS
    snr_all = np.full(pos.size, np.nan)
    for c_name in set(classes):
        sel = classes == c_name
        snr_all[sel] = _scan(x, y, e, pos[sel], signs[sel], fwhms[c_name].value, np.array([v]),
                             factor_sign, pix_kms)[0]
    return FoundShift(v * _KMS, cls is not None, cls or "", fwhms, snr_all)


def group_lines(positions, half_windows):
    """Chains of line indices whose fit windows ``position +- half_window`` overlap."""
    pos = np.asarray(positions, dtype=float)
    hw = np.asarray(half_windows, dtype=float)
    order = np.argsort(pos)
    groups = []
    for i in order:
        if groups:
            j = groups[-1][-1]
            if abs(pos[i] - pos[j]) < hw[i] + hw[j]:
                groups[-1].append(int(i))
                continue
        groups.append([int(i)])
    return groups
