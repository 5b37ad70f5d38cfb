"""One shift for all lines of the class used for z, with a likelihood-interval error.

The last step of `zline.physics.measure`: every line of that class (detected or not) moves with
one velocity ``v``; the other lines of the windows stay where their own fits put them.  For each
trial ``v`` and each trial common velocity width of the moving lines, the continuum polynomials
and all fluxes are a linear least-squares problem (a moving line's flux held to the sign of its
kind), so chi^2(v, width) is cheap and is computed for many trials at once.  The width is
integrated out (chi^2(v) = -2 ln of the likelihood summed over a grid uniform in ln width), the
shift is the global minimum over the whole search span and the error is where chi^2(v) rises
by 1 on either side.

Why this and not the curvature of per-line fits: at low S/N each free line centre chases the
highest noise peak near it and a free width collapses onto it, so the curvature at those minima
is too sharp; the lines that pass detection are the ones noise pushed up.  Here no line has a
centre of its own, no line is chosen by its S/N, the width is a nuisance parameter treated the
same at every ``v``, and the minimum is searched over the whole window rather than near a start
the detections suggested.  Holding fluxes to their sign keeps a set of noise dips and bumps from
matching the set elsewhere in the window.

Low-S/N factor.  The Delta chi^2 = 1 interval assumes chi^2(v) is quadratic; for a set whose
moving lines have a joint S/N ``S`` of a few (``S**2`` = chi^2 without them minus chi^2 at the
shift) the likelihood of a line position has broader wings and the statistic at the true shift
averages more than 1 by a term falling as 1/S^2 (a Bartlett-type correction).  The interval is
therefore widened by ``sqrt(1 + LOW_SNR_TERM / S**2)``.  ``LOW_SNR_TERM = 8`` was measured on
invented spectra separate from the tests (the Monte-Carlo set of tests/physics/test_measure.py
at its lines' S/N 3 and 4, another seed, 401 and 291 trials with a z): mean Delta chi^2 at the
true shift 1.21 +- 0.09 at median S^2 = 37 and 1.05 +- 0.09 at S^2 = 56; with b = 8 the
fraction of trials whose |pull| < 1 is 0.69 and 0.72 (0.683 expected) and the pull std 1.05 and
0.99 (1.16 and 1.06 without it).  At S = 20 the factor is 1.01.
"""

import math
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
from astropy.constants import c as _c
import astropy.units as u

__all__ = ["JointWindow", "JointShift", "joint_shift", "WIDTH_STEP", "LOW_SNR_TERM"]

#: Ratio of neighbouring trial widths of the moving lines (the grid runs from the larger of the
#: resolution floor and 1/3 of the found width to the smaller of 3 times it and the ceiling of
#: the line kind).
WIDTH_STEP = 1.1
#: b of the low-S/N factor sqrt(1 + b / S^2) on the interval (module docstring).
LOW_SNR_TERM = 8.0

_C_KMS = _c.to_value(u.km / u.s)
_SQ2PI = math.sqrt(2.0 * math.pi)


@dataclass
class JointWindow:
    """One window of `joint_shift`: data, continuum order and lines.

    ``moving`` marks the lines that move with v (placed at ``base * f(v)``); the others stay at
    ``base``.  ``sigma`` are Gaussian sigmas in the spectral unit (for the moving lines, the
    sigma at width scale 1).  ``sign``: +1 (emission) or -1 (absorption) holds a line's flux
    to that sign, 0 leaves it free (default).
    """

    x: np.ndarray
    y: np.ndarray
    err: np.ndarray
    order: int
    base: np.ndarray
    sigma: np.ndarray
    moving: np.ndarray
    sign: np.ndarray | None = None

    def __post_init__(self):
        self.base = np.asarray(self.base, dtype=float)
        self.sigma = np.asarray(self.sigma, dtype=float)
        self.moving = np.asarray(self.moving, dtype=bool)
        self.sign = (np.zeros(self.base.shape) if self.sign is None
                     else np.asarray(self.sign, dtype=float))
        self._const = None


def _constant_part(w):
    """Columns that do not move (continuum polynomial, lines held in place), divided by the
    errors, with their products; cached on the window."""
    if w._const is None:
        x, mov = w.x, np.asarray(w.moving, dtype=bool)
        t = (x - x.mean()) / max(np.ptp(x), 1e-300) * 2.0
        cols = [t**k for k in range(w.order + 1)]
        cols += [np.exp(-0.5 * ((x - m) / s) ** 2) / (s * _SQ2PI)
                 for m, s in zip(w.base[~mov], w.sigma[~mov])]
        c = np.array(cols) / w.err
        b = w.y / w.err
        sign = np.concatenate([np.zeros(w.order + 1), w.sign[~mov], w.sign[mov]])
        w._const = (c, b, c @ c.T, c @ b, float(b @ b), sign)
    return w._const


def _chi2_surface(w, factors, scales):
    """chi^2 of one window, shape (n_factor, n_scale), fluxes and continuum solved linearly."""
    c, b, cc, cb, bb, sign = _constant_part(w)
    mov = np.asarray(w.moving, dtype=bool)
    nf, ns, q = factors.size, scales.size, c.shape[0]
    mu = w.base[mov] * factors[:, None]  # (F, Lm)
    sig = w.sigma[mov] * scales[:, None]  # (S, Lm)
    # the moving profiles only where they reach (6 sigma around every trial place)
    lo = np.searchsorted(w.x, mu.min() - 6 * sig.max()) if mu.size else 0
    hi = np.searchsorted(w.x, mu.max() + 6 * sig.max(), side="right") if mu.size else 0
    x, cs, bs = w.x[lo:hi], c[:, lo:hi], b[lo:hi]
    g = np.exp(-0.5 * ((x - mu[:, None, :, None]) / sig[None, :, :, None]) ** 2)
    g = g / (sig[None, :, :, None] * _SQ2PI) / w.err[lo:hi]  # (F, S, Lm, n)
    k = q + g.shape[2]
    m = np.empty((nf, ns, k, k))
    m[..., :q, :q] = cc
    gc = g @ cs.T
    m[..., q:, :q] = gc
    m[..., :q, q:] = gc.swapaxes(-1, -2)
    m[..., q:, q:] = g @ g.swapaxes(-1, -2)
    r = np.empty((nf, ns, k))
    r[..., :q] = cb
    r[..., q:] = g @ bs
    diag = np.einsum("...ii->...i", m)
    m = m + (1e-12 * diag.max(axis=-1) + 1e-300)[..., None, None] * np.eye(k)
    coef = np.linalg.solve(m, r[..., None])[..., 0]
    clamp = np.zeros(coef.shape, dtype=bool)
    for _ in range(k):  # fluxes of the wrong sign for their kind go to zero, in turn
        wrong = sign * coef < 0
        if not wrong.any():
            break
        clamp |= wrong
        keep = ~clamp
        mk = np.where(keep[..., :, None] & keep[..., None, :], m, 0.0)
        mk = mk + np.einsum("...i,ij->...ij", clamp.astype(float), np.eye(k))
        r = np.where(keep, r, 0.0)
        coef = np.linalg.solve(mk, r[..., None])[..., 0]
    return bb - np.einsum("...i,...i->...", r, coef)


def _profile(windows, v, scales, length_axis):
    """chi^2 of the shifts ``v`` with the width integrated out: -2 ln of the likelihood summed
    over the width grid (a uniform prior in ln width), and the index of the best width at each
    ``v``."""
    f = 1.0 + np.atleast_1d(np.asarray(v, dtype=float)) / _C_KMS
    f = f if length_axis else 1.0 / f
    total = np.zeros((f.size, scales.size))
    for w in windows:  # in slices of shifts, so that a fine spectrum stays in memory
        chunk = max(1, int(2e6 // max(1, w.x.size * scales.size * int(w.moving.sum()))))
        for a in range(0, f.size, chunk):
            total[a:a + chunk] += _chi2_surface(w, f[a:a + chunk], scales)
    ref = total.min(axis=1)
    marg = ref - 2.0 * np.log(np.exp(-0.5 * (total - ref[:, None])).sum(axis=1))
    return marg, np.argmin(total, axis=1)


class JointShift(NamedTuple):
    """Result of `joint_shift` (km/s; errors nan when the interval does not close)."""

    v: float
    err_low: float
    err_high: float
    width_scale: float
    snr: float
    err_raw: float


def joint_shift(windows, start_kms, span_kms, length_axis=True, min_scale=None, max_scale=None,
                step_kms=None):
    """Shift (km/s, relative to the positions ``base``) and its error.

    Parameters
    ----------
    windows : list of JointWindow
    start_kms : float
        Centre of the search.
    span_kms : float
        Search half-span: the global minimum over ``start_kms +- span_kms`` is the shift.
    length_axis : bool
        Positions scale as (1 + v/c) on a wavelength axis, 1 / (1 + v/c) otherwise.
    min_scale, max_scale : float, optional
        Range of the moving lines' common width scale (the resolution floor and the ceiling of
        the line kind over the windows' sigmas), within 1/3 to 3 (the defaults).  The grid
        steps by `WIDTH_STEP`.
    step_kms : float, optional
        Step of the first grid over the span; default half the narrowest moving sigma times
        max(smallest scale, 1/2).

    Returns
    -------
    JointShift
        ``v``; ``err_low``, ``err_high``: where the width-integrated chi^2 rises by 1 on
        either side, times ``sqrt(1 + LOW_SNR_TERM / snr**2)`` (`LOW_SNR_TERM`); ``err_raw``
        their mean before that factor; ``width_scale``: the best width at ``v``; ``snr``: the
        moving lines' joint S/N, sqrt(chi^2 without them - chi^2 at ``v``) (width-integrated).
    """
    lo_s = max(1.0 / 3.0, 0.0 if min_scale is None else float(min_scale))
    hi_s = max(3.0 if max_scale is None else float(max_scale), lo_s)
    n_s = int(np.floor(np.log(hi_s / lo_s) / np.log(WIDTH_STEP) + 1e-9)) + 1
    scales = lo_s * WIDTH_STEP ** np.arange(n_s)
    if step_kms is None:
        sv = [s / abs(b) * _C_KMS for w in windows
              for s, b, m in zip(w.sigma, w.base, w.moving) if m]
        step_kms = 0.5 * max(lo_s, 0.5) * min(sv)
    span = max(float(span_kms), 2 * step_kms)
    n = int(np.ceil(span / step_kms))
    grid = start_kms + np.linspace(-span, span, 2 * n + 1)
    chi, _ = _profile(windows, grid, scales[::2], length_axis)  # every other width: the place
    j = int(np.argmin(chi))
    # refine the minimum between the neighbours, then a parabola through the best three
    fine = np.linspace(grid[max(j - 1, 0)], grid[min(j + 1, grid.size - 1)], 17)
    chif, _ = _profile(windows, fine, scales, length_axis)
    i = int(np.clip(np.argmin(chif), 1, fine.size - 2))
    a, b, c = chif[i - 1], chif[i], chif[i + 1]
    h = fine[1] - fine[0]
    curv = a - 2 * b + c
    v0 = fine[i] + (float(np.clip(0.5 * h * (a - c) / curv, -h, h)) if curv > 0 else 0.0)
    (c0, c_far), (k0, _) = _profile(windows, [v0, v0 + 1e3 * _C_KMS], scales, length_axis)
    c0 = min(c0, float(chif.min()))
    guess = np.sqrt(2.0 / (curv / h**2)) if curv > 0 else step_kms

    def crossing(direction):
        # walk out until the chi^2 passes c0 + 1, then interpolate on a dense grid
        reach = 2.0 * guess
        while reach <= 4 * span:
            pts = v0 + direction * np.linspace(0.0, reach, 9)[1:]
            vals, _ = _profile(windows, pts, scales, length_axis)
            over = np.flatnonzero(vals >= c0 + 1.0)
            if over.size:
                q = int(over[0])
                lo_v = v0 if q == 0 else pts[q - 1]
                dense = np.linspace(lo_v, pts[q], 9)
                dv, _ = _profile(windows, dense, scales, length_axis)
                p = int(np.flatnonzero(dv >= c0 + 1.0)[0])
                if p == 0:
                    return abs(dense[0] - v0)
                x1, x2, y1, y2 = dense[p - 1], dense[p], dv[p - 1], dv[p]
                return abs(x1 + (c0 + 1.0 - y1) / (y2 - y1) * (x2 - x1) - v0)
            reach *= 2.0
        return float("nan")

    low, high = crossing(-1), crossing(+1)
    snr = float(np.sqrt(max(c_far - c0, 0.0)))
    factor = np.sqrt(1.0 + LOW_SNR_TERM / max(snr, 1e-3) ** 2)
    return JointShift(float(v0), low * factor, high * factor, float(scales[k0]), snr,
                      0.5 * (low + high))
