"""Blind redshift and velocity search: cross-correlate a spectrum with a comb of line positions.

The spectrum is continuum-subtracted with a running median over a wide window in its own pixels
(masked pixels ignored), divided by its 1-sigma errors (an S/N spectrum), resampled onto a uniform
ln(lambda) grid and correlated by FFT with a comb of Gaussian teeth at the rest positions of a
line set (weights = the set's expected ``strength``, negative for absorption lines; tooth width
matched to the measured line width of the data).  Every lag is a trial ``ln(1 + z)``.  The
correlation at each lag is divided by its own noise (the comb power over the lines that fall in
the data at that lag), so it is a matched-filter significance; a robust rescaling absorbs
correlated noise left by the resampling.  The score is that significance times a plausibility
factor ``sqrt(1 - exp(-P))``, P = sum of strength**2 of the lines the data cover at that lag
(so a reading resting on one intrinsically weak line ranks below one resting on a strong line;
P >~ 2, e.g. Halpha or [O III] alone, leaves the significance unchanged).  Peaks are refined by a parabola in ln(1 + z)
and each candidate lists the lines whose predicted position shows a significant local S/N.
"""

import warnings
from dataclasses import dataclass, field

import astropy.units as u
import numpy as np
from astropy.nddata import StdDevUncertainty
from scipy import ndimage, signal
from scipy.signal._peak_finding_utils import PeakPropertyWarning as _PeakPropertyWarning

__all__ = ["Candidate", "ScanResult", "scan_redshift", "scan_velocity", "MATCH_THRESHOLD"]

#: Local S/N above which a predicted line counts as matched.
MATCH_THRESHOLD = 3.0

_C_KMS = 299792.458  # km/s, exact (SI definition)
_MAX_GRID = 1 << 21


@dataclass(frozen=True)
class Candidate:
    """One redshift (or velocity) reading of a spectrum.

    Attributes
    ----------
    z : float
        Redshift (for a velocity scan: the total shift ``1 + z = shift_factor(velocity=v)``).
    z_err : float
        Approximate 1-sigma error from the curvature of the significance peak.
    score : float
        Significance of the correlation peak (matched-filter S/N, robustly rescaled) times the
        plausibility factor of the module docstring (1 for a template scan).
    n_matched : int
        Number of lines with a local S/N above `MATCH_THRESHOLD` at their predicted position.
    lines : list of str
        Labels of the matched lines, strongest local S/N first.
    velocity : `~astropy.units.Quantity` ['speed'] or None
        Velocity of the reading (velocity scans only).
    velocity_err : `~astropy.units.Quantity` ['speed'] or None
    """

    z: float
    z_err: float
    score: float
    n_matched: int
    lines: list = field(default_factory=list)
    velocity: object = None
    velocity_err: object = None

    def as_dict(self):
        """Plain-JSON form (velocities in km/s)."""
        out = {"z": self.z, "z_err": self.z_err, "score": self.score,
               "n_matched": self.n_matched, "lines": list(self.lines)}
        if self.velocity is not None:
            out["velocity_kms"] = float(self.velocity.to_value(u.km / u.s))
            out["velocity_err_kms"] = float(self.velocity_err.to_value(u.km / u.s))
        return out


@dataclass(frozen=True)
class ScanResult:
    """Result of `scan_redshift` or `scan_velocity`.

    Attributes
    ----------
    candidates : list of `Candidate`
        Best first.
    z : `numpy.ndarray`
        Trial redshifts of the lag grid.
    score : `numpy.ndarray`
        Significance at each trial redshift.
    line_set : str
        Name of the line set ("template" for a template scan).
    medium : str
        Medium of the rest positions used ("vacuum" or "air").
    width : float
        Comb tooth sigma in ln(lambda).
    """

    candidates: list
    z: np.ndarray
    score: np.ndarray
    line_set: str
    medium: str
    width: float


# --------------------------------------------------------------------------------------------
# preparation of the data


def _wavelength_axis(spectrum):
    axis = u.Quantity(spectrum.spectral_axis)
    if not axis.unit.is_equivalent(u.AA, equivalencies=u.spectral()):
        raise ValueError(
            f"Argument 'spectrum' must have a wavelength, frequency, energy or wavenumber axis; "
            f"got unit '{axis.unit}' ({axis.unit.physical_type}). Convert a velocity axis to "
            "frequency or wavelength first.")
    return axis.to_value(u.AA, equivalencies=u.spectral()), axis.unit.is_equivalent(u.Hz)


def _errors(spectrum, resid, good, window):
    unc = spectrum.uncertainty
    if unc is not None:
        try:
            err = np.asarray(unc.represent_as(StdDevUncertainty).array, dtype=float)
        except (TypeError, ValueError, AttributeError):
            err = None
        if err is not None and err.shape == resid.shape:
            return err
    # no usable uncertainty: running robust scatter of the residual
    err = np.full(resid.shape, np.nan)
    r = resid[good]
    mad = ndimage.median_filter(np.abs(r - np.median(r)), size=window, mode="nearest")
    floor = 0.2 * np.median(mad) if np.median(mad) > 0 else np.finfo(float).tiny
    err[good] = 1.4826 * np.maximum(mad, floor)
    return err


def _snr_spectrum(spectrum, window):
    """S/N spectrum in the data's own pixels, sorted by increasing wavelength."""
    lam, is_freq = _wavelength_axis(spectrum)
    flux = np.asarray(u.Quantity(spectrum.flux).value, dtype=float).reshape(-1)
    if flux.shape != lam.shape:
        raise ValueError(f"Argument 'spectrum' must be one-dimensional; got flux shape "
                         f"{np.shape(spectrum.flux)}.")
    mask = np.zeros(flux.shape, bool) if spectrum.mask is None else \
        np.asarray(spectrum.mask).reshape(-1).astype(bool)
    good = ~mask & np.isfinite(flux) & np.isfinite(lam) & (lam > 0)
    if good.sum() < 10:
        raise ValueError(f"Argument 'spectrum' has {int(good.sum())} usable pixels; a scan "
                         "needs at least 10.")
    win = int(min(window, max(5, (good.sum() // 2) * 2 - 1)))
    cont = np.full(flux.shape, np.nan)
    cont[good] = ndimage.median_filter(flux[good], size=win, mode="nearest")
    resid = flux - cont
    err = _errors(spectrum, resid, good, win)
    good &= np.isfinite(err) & (err > 0)
    snr = np.where(good, resid / np.where(good, err, 1.0), 0.0)
    order = np.argsort(lam)
    return np.log(lam[order]), snr[order], good[order], is_freq


def _line_width_pixels(snr, good, kind_sign=1.0):
    """Median Gaussian sigma (pixels) of the strongest separated features of the S/N spectrum."""
    d = np.where(good, kind_sign * snr, 0.0)
    sm = ndimage.uniform_filter1d(d, 3)
    peaks, props = signal.find_peaks(sm, height=6.0, distance=10)
    if len(peaks) == 0:
        return 1.5
    best = peaks[np.argsort(props["peak_heights"])[::-1][:7]]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", _PeakPropertyWarning)
        widths = signal.peak_widths(sm, best, rel_height=0.5)[0] / 2.3548
    widths = widths[np.isfinite(widths) & (widths > 0)]
    if len(widths) == 0:
        return 1.5
    return float(np.clip(np.median(widths), 0.7, 30.0))


# --------------------------------------------------------------------------------------------
# comb and correlation


def _comb_lines(lines, medium):
    from zline.physics.catalog import LINE_SETS, line_set  # noqa: PLC0415

    if lines not in LINE_SETS:
        raise ValueError(f"Argument 'lines' must be one of {', '.join(map(repr, LINE_SETS))}; "
                         f"got {lines!r}.")
    table = line_set(lines, medium=medium, unit=u.AA)
    rest = table["rest"].to_value(u.AA)
    sign = np.where(np.asarray(table["kind"]) == "absorption", -1.0, 1.0)
    weight = sign * np.asarray(table["strength"], dtype=float)
    return np.log(rest), weight, [str(x) for x in table["label"]]


def _gauss_on_grid(n, h, centres, sigma, weights):
    """Sum of Gaussian teeth on the grid x_m = m*h (m = 0..n-1)."""
    out = np.zeros(n)
    half = int(np.ceil(5 * sigma / h)) + 1
    for c, w in zip(centres, weights):
        m0 = int(round(c / h))
        m = np.arange(max(0, m0 - half), min(n, m0 + half + 1))
        out[m] += w * np.exp(-0.5 * ((m * h - c) / sigma) ** 2)
    return out


def _correlate(data, tmpl):
    """c[k + len(tmpl) - 1] = sum_m data[m + k] * tmpl[m]."""
    return signal.correlate(data, tmpl, mode="full", method="fft")


def _scan_core(spectrum, lines, s_min, s_max, template, step, window):
    lnlam, snr, good, is_freq = _snr_spectrum(spectrum, window)
    meta = getattr(spectrum, "meta", None) or {}
    medium = "air" if (meta.get("zline") or {}).get("medium") == "air" else "vacuum"
    dln = np.diff(lnlam)
    dln = dln[dln > 0]
    h = float(np.percentile(dln, 10)) if step is None else float(step)
    g0 = lnlam[good][0]
    n = int(np.floor((lnlam[good][-1] - g0) / h)) + 1
    if n > _MAX_GRID:
        h = (lnlam[good][-1] - g0) / (_MAX_GRID - 1)
        n = _MAX_GRID
    grid = g0 + h * np.arange(n)
    # resample S/N and coverage (masked pixels and gaps count as zero signal, zero coverage)
    d = np.interp(grid, lnlam, np.where(good, snr, 0.0))
    cov = np.interp(grid, lnlam, good.astype(float))
    gap = np.interp(grid, lnlam[good], np.r_[0.0, np.diff(lnlam[good])])
    cov[gap > 10 * np.median(dln)] = 0.0
    d *= cov >= 0.5
    cov = (cov >= 0.5).astype(float)
    # a grid finer than the data repeats each data pixel about r times: a sum over the grid
    # has r times the variance of a sum of independent unit-variance points
    over = np.maximum(1.0, np.interp(grid, lnlam[1:], np.diff(lnlam)) / h)
    var = cov * over
    sigma = _line_width_pixels(snr, good) * float(np.median(dln))
    sigma = max(sigma, 0.8 * h)
    if template is not None:
        t_ln, t_snr, t_good, _ = _snr_spectrum(template, window)
        t0 = t_ln[t_good][0]
        m = int(np.floor((t_ln[t_good][-1] - t0) / h)) + 1
        tmpl = np.interp(t0 + h * np.arange(m), t_ln, np.where(t_good, t_snr, 0.0))
        tmpl /= np.max(np.abs(tmpl)) or 1.0
        rest_ln, weights, labels = np.array([]), np.array([]), []
        set_name = "template"
    else:
        rest_ln, weights, labels = _comb_lines(lines, medium)
        lo, hi = grid[0] - s_max - 5 * sigma, grid[-1] - s_min + 5 * sigma
        keep = (rest_ln > lo) & (rest_ln < hi) & (weights != 0)
        if not keep.any():
            raise ValueError(
                f"No line of the set {lines!r} falls in the data for {np.expm1(s_min):.4g} <= "
                f"z <= {np.expm1(s_max):.4g}; choose another set (argument 'lines') or range.")
        rest_ln, weights = rest_ln[keep], weights[keep]
        labels = [lab for lab, k in zip(labels, keep) if k]
        t0 = rest_ln.min() - 6 * sigma
        m = int(np.ceil((rest_ln.max() + 6 * sigma - t0) / h)) + 1
        tmpl = _gauss_on_grid(m, h, rest_ln - t0, sigma, weights)
        set_name = lines
    corr = _correlate(d, tmpl)
    power = _correlate(var, tmpl**2)
    # expected strength covered at each lag (sum of weight**2 of the lines in the data), used as
    # a plausibility factor: a lone intrinsically weak line is a less likely reading than a lone
    # strong one (reference weight 1, e.g. Hbeta for the optical sets)
    tooth = np.sqrt(np.pi) * sigma / h
    covered = _correlate(cov, tmpl**2) / tooth if template is None else None
    k = np.arange(-(len(tmpl) - 1), n)
    lag = g0 + k * h - t0  # = ln(1 + z)
    sel = (lag >= s_min - 2 * h) & (lag <= s_max + 2 * h) & (power > 1e-6 * np.max(tmpl**2))
    if sel.sum() < 3:
        raise ValueError(f"The data do not overlap the lines for {np.expm1(s_min):.4g} <= z <= "
                         f"{np.expm1(s_max):.4g}; widen the range or choose another line set.")
    lag, corr, power = lag[sel], corr[sel], power[sel]
    score = corr / np.sqrt(power)
    prior = 1.0 if covered is None else np.sqrt(-np.expm1(-np.maximum(covered[sel], 0.0)))
    # robust rescale: noise-only lags have unit scatter after this (correlated resampling noise,
    # imperfect continuum); never inflate
    med = np.median(score)
    mad = 1.4826 * np.median(np.abs(score - med))
    if np.isfinite(mad) and mad > 1.0:
        score = score / mad
    score = score * prior
    return dict(lag=lag, score=score, grid=grid, d=d, cov=cov, over=over, h=h, sigma=sigma,
                rest_ln=rest_ln, weights=weights, labels=labels, set_name=set_name,
                medium=medium, is_freq=is_freq)


def _refine(lag, score, i):
    if 0 < i < len(score) - 1:
        y0, y1, y2 = score[i - 1], score[i], score[i + 1]
        den = y0 - 2 * y1 + y2
        h = lag[i + 1] - lag[i]
        if den < 0:
            off = 0.5 * (y0 - y2) / den
            off = float(np.clip(off, -1.0, 1.0))
            peak = y1 - 0.25 * (y0 - y2) * off
            curv = den / h**2
            err = 1.0 / np.sqrt(max(-peak * curv, 1e-300)) if peak > 0 else np.nan
            return lag[i] + off * h, peak, err
    return lag[i], score[i], np.nan


def _matched(core, s):
    """Labels and local S/N of the lines at ln(1+z) = s with significant signal."""
    grid, d, cov, h, sigma = core["grid"], core["d"], core["cov"], core["h"], core["sigma"]
    found = []
    for c, w, lab in zip(core["rest_ln"] + s, core["weights"], core["labels"]):
        if c < grid[0] or c > grid[-1]:
            continue
        i0 = int(round((c - grid[0]) / h))
        half = int(np.ceil(3 * sigma / h)) + 1
        idx = np.arange(max(0, i0 - half), min(len(grid), i0 + half + 1))
        g = np.exp(-0.5 * ((grid[idx] - c) / sigma) ** 2) * cov[idx]
        norm = np.sqrt(np.sum(g**2))
        if norm == 0 or cov[min(max(i0, 0), len(grid) - 1)] == 0:
            continue
        local = np.sign(w) * np.sum(d[idx] * g) / norm / np.sqrt(core["over"][min(max(i0, 0), len(grid) - 1)])
        if local >= MATCH_THRESHOLD:
            found.append((local, lab))
    found.sort(reverse=True)
    return [lab for _, lab in found]


def _peaks(core, top, s_min, s_max):
    lag, score = core["lag"], core["score"]
    distance = max(2, int(round(2.0 * core["sigma"] / core["h"])))
    idx, _ = signal.find_peaks(score, distance=distance)
    if len(idx) == 0:
        idx = np.array([int(np.argmax(score))])
    idx = idx[np.argsort(score[idx])[::-1]]
    out = []
    for i in idx:
        s, peak, s_err = _refine(lag, score, i)
        if not s_min - core["h"] <= s <= s_max + core["h"]:
            continue
        s = float(np.clip(s, s_min, s_max))
        out.append((s, float(peak), float(s_err), _matched(core, s)))
        if len(out) >= top:
            break
    out.sort(key=lambda t: -t[1])
    return out


def _check_top(top):
    if isinstance(top, bool) or not isinstance(top, (int, np.integer)) or top < 1:
        raise ValueError(f"Argument 'top' must be a positive integer; got {top!r}.")
    return int(top)


def _check_spectrum(spectrum):
    if not hasattr(spectrum, "spectral_axis") or not hasattr(spectrum, "flux"):
        raise TypeError(f"Argument 'spectrum' must be a specutils Spectrum (see "
                        f"zline.physics.spectra.read_spectrum); got {type(spectrum).__name__}.")


def _window(spectrum, window):
    if window is None:
        return 101
    if isinstance(window, bool) or not isinstance(window, (int, np.integer)) or window < 5:
        raise ValueError(f"Argument 'window' must be an integer number of pixels >= 5; "
                         f"got {window!r}.")
    return int(window) | 1


def scan_redshift(spectrum, lines="galaxy-emission", z_min=0.0, z_max=3.0, top=5, template=None,
                  dz=None, window=None):
    """Search a spectrum for its redshift by correlation with a comb of line positions.

    Parameters
    ----------
    spectrum : `specutils.Spectrum`
        1-D spectrum with a wavelength, frequency, energy or wavenumber axis (as returned by
        `zline.physics.spectra.read_spectrum`).  Its uncertainty is used for the S/N; without
        one, a running robust scatter of the continuum-subtracted flux stands in.  If
        ``meta["zline"]["medium"] == "air"`` the rest positions are taken in air.
    lines : str
        A set of `zline.physics.catalog.LINE_SETS`; its ``strength`` column weights the teeth.
    z_min, z_max : float
        Redshift range searched (z > -1).
    top : int
        Number of candidates returned.
    template : `specutils.Spectrum`, optional
        A rest-frame template spectrum used instead of the comb (continuum-subtracted the same
        way); candidates then list no lines.
    dz : float, optional
        Largest lag step in z; default: the finest pixel step of the data.
    window : int, optional
        Running-median continuum window in pixels (default 101).

    Returns
    -------
    `ScanResult`

    Raises
    ------
    ValueError
        Unknown line set, bad range, too few usable pixels, or no line in the data.
    TypeError
        ``spectrum`` is not a Spectrum.
    """
    _check_spectrum(spectrum)
    top = _check_top(top)
    for name, val in (("z_min", z_min), ("z_max", z_max)):
        if isinstance(val, u.Quantity) or not np.isscalar(val) or not np.isfinite(val) \
                or val <= -1:
            raise ValueError(f"Argument '{name}' must be a finite number > -1; got {val!r}.")
    if not z_max > z_min:
        raise ValueError(f"Arguments 'z_min' < 'z_max' required; got {z_min!r}, {z_max!r}.")
    step = None
    if dz is not None:
        if not np.isscalar(dz) or not dz > 0:
            raise ValueError(f"Argument 'dz' must be a positive number; got {dz!r}.")
        step = float(dz) / (1.0 + float(z_max))
    s_min, s_max = float(np.log1p(z_min)), float(np.log1p(z_max))
    core = _scan_core(spectrum, lines, s_min, s_max, template, step, _window(spectrum, window))
    cands = [Candidate(z=float(np.expm1(s)), z_err=float(np.exp(s) * e), score=p,
                       n_matched=len(m), lines=m)
             for s, p, e, m in _peaks(core, top, s_min, s_max)]
    return ScanResult(candidates=cands, z=np.expm1(core["lag"]), score=core["score"],
                      line_set=core["set_name"], medium=core["medium"], width=core["sigma"])


def scan_velocity(spectrum, lines="nebular", v_min=-500 * u.km / u.s, v_max=500 * u.km / u.s,
                  top=5, convention=None, template=None, window=None):
    """Search a spectrum near z = 0 for its line-of-sight velocity.

    Parameters
    ----------
    spectrum : `specutils.Spectrum`
        As for `scan_redshift`.
    lines : str
        A set of `zline.physics.catalog.LINE_SETS` (e.g. "nebular", "radio").
    v_min, v_max : `~astropy.units.Quantity` ['speed']
        Velocity range searched.
    top : int
        Number of candidates returned.
    convention : str, optional
        One of `zline.physics.kinematics.CONVENTIONS`; default "radio" for a frequency axis,
        else "optical".
    template, window
        As for `scan_redshift`.

    Returns
    -------
    `ScanResult`
        Each candidate carries ``velocity`` and ``velocity_err`` (km/s) in ``convention``; its
        ``z`` is the equivalent total shift.
    """
    from zline.physics.kinematics import CONVENTIONS, shift_factor, velocity_from  # noqa: PLC0415

    _check_spectrum(spectrum)
    top = _check_top(top)
    for name, val in (("v_min", v_min), ("v_max", v_max)):
        if not isinstance(val, u.Quantity) or not val.unit.is_equivalent(u.km / u.s):
            raise u.UnitTypeError(f"Argument '{name}' must be a Quantity in speed units "
                                  f"(e.g. -500 * u.km / u.s); got {val!r}.")
    if not v_max > v_min:
        raise ValueError(f"Arguments 'v_min' < 'v_max' required; got {v_min}, {v_max}.")
    if convention is None:
        _, is_freq = _wavelength_axis(spectrum)
        convention = "radio" if is_freq else "optical"
    if convention not in CONVENTIONS:
        raise ValueError(f"Argument 'convention' must be one of {CONVENTIONS!r}; "
                         f"got {convention!r}.")
    s_min = float(np.log(shift_factor(velocity=v_min, convention=convention)))
    s_max = float(np.log(shift_factor(velocity=v_max, convention=convention)))
    core = _scan_core(spectrum, lines, s_min, s_max, template, None, _window(spectrum, window))
    one = 1.0 * u.AA
    cands = []
    for s, p, e, m in _peaks(core, top, s_min, s_max):
        v = velocity_from(np.exp(s) * one, one, convention=convention).to(u.km / u.s)
        e = e if np.isfinite(e) else 0.0
        v_hi = velocity_from(np.exp(s + e) * one, one, convention=convention)
        v_lo = velocity_from(np.exp(s - e) * one, one, convention=convention)
        cands.append(Candidate(z=float(np.expm1(s)), z_err=float(np.exp(s) * e), score=p,
                               n_matched=len(m), lines=m, velocity=v,
                               velocity_err=(0.5 * (v_hi - v_lo)).to(u.km / u.s)))
    return ScanResult(candidates=cands, z=np.expm1(core["lag"]), score=core["score"],
                      line_set=core["set_name"], medium=core["medium"], width=core["sigma"])
