"""One shift for all detected narrow lines of a set, with a profile-likelihood error.

The last step of `zline.physics.measure`: every window that holds a detected narrow line is
modelled as in its own fit (continuum polynomial, every line of the window, each line's fitted
FWHM held), but the detected narrow lines all move with one velocity ``v``.  For each trial
``v`` the continuum and fluxes are a linear least-squares problem, so chi^2(v) is cheap; the
shift is its minimum and the error is where chi^2 rises by 1 on either side.  Unlike the
curvature at the minimum, that interval stays honest for faint lines, whose centroid errors have
broad wings.
"""

import math
from dataclasses import dataclass

import numpy as np
from astropy.constants import c as _c
import astropy.units as u

__all__ = ["JointWindow", "joint_shift", "WIDTH_SCALES"]

#: Scales of the moving lines' common width tried by `joint_shift`.
WIDTH_SCALES = 1.08 ** np.arange(-10, 11)

_C_KMS = _c.to_value(u.km / u.s)
_SQ2PI = math.sqrt(2.0 * math.pi)


@dataclass
class JointWindow:
    """One window of `joint_shift`: data, continuum order and lines.

    ``moving`` marks the lines that move with v (placed at ``base * f(v)``); the others stay at
    ``base``.  ``sigma`` are Gaussian sigmas in the spectral unit.
    """

    x: np.ndarray
    y: np.ndarray
    err: np.ndarray
    order: int
    base: np.ndarray
    sigma: np.ndarray
    moving: np.ndarray


def _chi2(w, factor, width=1.0):
    mu = np.where(w.moving, w.base * factor, w.base)
    sig = np.where(w.moving, w.sigma * width, w.sigma)
    t = (w.x - w.x.mean()) / max(np.ptp(w.x), 1e-300) * 2.0
    cols = [t**k for k in range(w.order + 1)]
    cols += [np.exp(-0.5 * ((w.x - m) / s) ** 2) / (s * _SQ2PI) for m, s in zip(mu, sig)]
    a = np.array(cols).T / w.err[:, None]
    b = w.y / w.err
    coef, *_ = np.linalg.lstsq(a, b, rcond=None)
    r = b - a @ coef
    return float(r @ r)


def joint_shift(windows, start_kms, scale_kms, length_axis=True, n_grid=31, min_scale=None):
    """Shift (km/s, relative to the positions ``base``) and its Delta chi^2 = 1 error.

    Parameters
    ----------
    windows : list of JointWindow
    start_kms : float
        Where to centre the search (e.g. the mean of the per-line shifts).
    scale_kms : float
        A rough error; the grid spans +-8 of it (widened when the interval is not closed).
    length_axis : bool
        Positions scale as (1 + v/c) on a wavelength axis, 1 / (1 + v/c) otherwise.
    min_scale : float, optional
        Smallest width scale allowed (the resolution floor over the windows' sigmas).

    The moving lines' sigmas are first scaled by the factor of `WIDTH_SCALES` that fits best at
    ``start_kms`` (one velocity width for all of them, measured from all of them).

    Returns
    -------
    (v, v_low_err, v_high_err, width_scale) : floats; v and its errors in km/s (nan when the
    minimum is not bracketed)
    """
    scale = [1.0]

    def total(v, k=None):
        f = 1.0 + v / _C_KMS
        f = f if length_axis else 1.0 / f
        return sum(_chi2(w, f, scale[0] if k is None else k) for w in windows)

    # the common velocity width of the moving lines, at the start shift (all lines together)
    ks = WIDTH_SCALES[WIDTH_SCALES >= (min_scale or 0.0) * (1 - 1e-9)]
    ks = ks if ks.size else np.array([float(min_scale)])
    scale[0] = float(ks[int(np.argmin([total(start_kms, k) for k in ks]))])

    half = 8.0 * max(scale_kms, 1e-6)
    for _ in range(3):
        grid = np.linspace(start_kms - half, start_kms + half, n_grid)
        chi = np.array([total(v) for v in grid])
        k = int(np.argmin(chi))
        if 0 < k < n_grid - 1 and chi[0] > chi[k] + 1 and chi[-1] > chi[k] + 1:
            break
        start_kms, half = grid[k], 2.0 * half
    else:
        return float("nan"), float("nan"), float("nan"), scale[0]
    # refine the minimum on a fine grid between the neighbours, then the Delta chi2 = 1 crossings
    fine = np.linspace(grid[k - 1], grid[k + 1], 21)
    chif = np.array([total(v) for v in fine])
    j = int(np.clip(np.argmin(chif), 1, fine.size - 2))
    a, b, c = chif[j - 1], chif[j], chif[j + 1]
    h = fine[1] - fine[0]
    curv = a - 2 * b + c
    v0 = fine[j] + (0.5 * h * (a - c) / curv if curv > 0 else 0.0)  # parabola through three
    c0 = total(v0)

    def crossing(direction):
        lo_v, step = v0, (grid[1] - grid[0]) * direction
        hi_v = v0 + step
        while total(hi_v) < c0 + 1.0:
            lo_v, hi_v = hi_v, hi_v + step
            if abs(hi_v - v0) > 4 * half:
                return float("nan")
        for _ in range(16):
            mid = 0.5 * (lo_v + hi_v)
            if total(mid) < c0 + 1.0:
                lo_v = mid
            else:
                hi_v = mid
        return abs(0.5 * (lo_v + hi_v) - v0)

    return float(v0), crossing(-1), crossing(+1), scale[0]
