"""Parameter bookkeeping and covariance for `zline.physics.fitting` (internal).

A model is a polynomial continuum plus line components.  Each component has

* a centre that is ``"follow"`` (another component's centre times their rest ratio), or
  ``"shared"`` (one parameter ``mu`` for all shared components, placed at
  their rest ratios ``mu * rel_k``), ``"free"`` (its own parameter, bounded to a range) or
  ``"fixed"`` (not fitted);
* a width group: all components of a group share one velocity width (sigma proportional to the
  centre), which is either fitted between a floor and a ceiling or fixed;
* a flux that is free or tied to another component's flux by a fixed ratio.
"""

import math

import numpy as np
from scipy.special import voigt_profile

__all__ = ["Model", "covariance", "COND_LIMIT", "GAUSS_FWHM"]

GAUSS_FWHM = 2.0 * math.sqrt(2.0 * math.log(2.0))

#: Smallest accepted ratio of the smallest to the largest eigenvalue of the column-scaled normal
#: matrix J^T J; below it a parameter is taken as not constrained by the data.
COND_LIMIT = 1e-11


class Model:
    """Continuum polynomial + components; see the module docstring.

    Parameters
    ----------
    rel : ndarray
        Rest positions relative to component 0 (used by shared centres).
    order : int
        Continuum polynomial order, in t = (x - x0) / hw.
    centre_mode : sequence of str
        ``"shared"``, ``"free"`` or ``"fixed"`` per component.
    fixed_centre : ndarray
        Centre of each component (used for ``"fixed"``; for the others only as a reference).
    width_group : sequence of int
        Width group per component (0, 1, ...).
    fixed_sigma : dict
        ``{group: sigma at the group's first component}`` for groups whose width is not fitted.
    ratios : dict
        ``{i: (j, r)}``: flux_i = r * flux_j.
    profile : str
        ``"gaussian"`` or ``"voigt"``.
    """

    def __init__(self, rel, order, centre_mode, fixed_centre, width_group, fixed_sigma, ratios,
                 profile, x0, hw, follow=None):
        self.rel = np.asarray(rel, dtype=float)
        self.n_comp = self.rel.size
        self.order = int(order)
        self.mode = list(centre_mode)
        self.fixed_centre = np.asarray(fixed_centre, dtype=float)
        self.group = np.asarray(width_group, dtype=int)
        self.n_group = int(self.group.max()) + 1
        self.ref = [int(np.flatnonzero(self.group == g)[0]) for g in range(self.n_group)]
        self.fixed_sigma = dict(fixed_sigma)
        self.ratios = dict(ratios)
        self.follow = dict(follow or {})  # {k: j}: centre_k = centre_j * rel_k / rel_j
        self.profile = profile
        self.x0, self.hw = x0, hw
        names = [f"c{k}" for k in range(self.order + 1)]
        if "shared" in self.mode:
            names.append("mu")
        names += [f"mu{k}" for k in range(self.n_comp) if self.mode[k] == "free"]
        names += [f"sig{g}" for g in range(self.n_group) if g not in self.fixed_sigma]
        if profile == "voigt":
            names += [f"gam{g}" for g in range(self.n_group) if g not in self.fixed_sigma]
        self.free_flux = [k for k in range(self.n_comp) if k not in self.ratios]
        names += [f"F{k}" for k in self.free_flux]
        self.names = names
        self.idx = {n: i for i, n in enumerate(names)}

    def centres(self, p):
        mu = self.fixed_centre.copy()
        for k, mode in enumerate(self.mode):
            if mode == "shared":
                mu[k] = p[self.idx["mu"]] * self.rel[k]
            elif mode == "free":
                mu[k] = p[self.idx[f"mu{k}"]]
        for k, j in self.follow.items():
            mu[k] = mu[j] * self.rel[k] / self.rel[j]
        return mu

    def unpack(self, p):
        mu = self.centres(p)
        s_g = np.array([self.fixed_sigma[g] if g in self.fixed_sigma else p[self.idx[f"sig{g}"]]
                        for g in range(self.n_group)])
        scale = mu / mu[self.ref][self.group]
        sig = s_g[self.group] * scale
        gam = None
        if self.profile == "voigt":
            g_g = np.array([1e-3 * self.fixed_sigma[g] if g in self.fixed_sigma
                            else p[self.idx[f"gam{g}"]] for g in range(self.n_group)])
            gam = g_g[self.group] * scale
        flux = np.zeros(self.n_comp)
        for k in self.free_flux:
            flux[k] = p[self.idx[f"F{k}"]]
        for i, (j, r) in self.ratios.items():
            flux[i] = r * flux[j]
        return p[: self.order + 1], mu, sig, gam, flux

    def continuum(self, p, x):
        return np.polynomial.polynomial.polyval((x - self.x0) / self.hw, p[: self.order + 1])

    def shapes(self, p, x):
        _, mu, sig, gam, _ = self.unpack(p)
        d = x[None, :] - mu[:, None]
        if self.profile == "voigt":
            return voigt_profile(d, sig[:, None], gam[:, None])
        return np.exp(-0.5 * (d / sig[:, None]) ** 2) / (sig[:, None] * math.sqrt(2 * math.pi))

    def __call__(self, p, x):
        flux = self.unpack(p)[4]
        return self.continuum(p, x) + flux @ self.shapes(p, x)

    def fwhm(self, p):
        _, _, sig, gam, _ = self.unpack(p)
        fg = GAUSS_FWHM * np.abs(sig)
        if self.profile != "voigt":
            return fg
        fl = 2.0 * np.abs(gam)
        # Olivero & Longbothum 1977 approximation (from memory), accurate to ~0.02 %
        return 0.5346 * fl + np.sqrt(0.2166 * fl**2 + fg**2)


def covariance(jac, held=None):
    """Covariance of least-squares parameters from the full Jacobian, with a proper inverse.

    Parameters
    ----------
    jac : ndarray, shape (n_data, n_par)
        Jacobian of the weighted residuals.
    held : ndarray of bool, optional
        Parameters held fixed (e.g. a width at its floor): their rows and columns are zero.

    Returns
    -------
    cov : ndarray or None
        The covariance, or None when a parameter is not constrained.
    bad : int or None
        Index of the least constrained parameter when ``cov`` is None.

    The columns are scaled to unit norm before the eigen-decomposition, so the test is on the
    correlation structure only; an eigenvalue ratio below `COND_LIMIT` (or a column of zeros)
    means that some combination of parameters is not fixed by the data.
    """
    jac = np.asarray(jac, dtype=float)
    npar = jac.shape[1]
    held = np.zeros(npar, dtype=bool) if held is None else np.asarray(held, dtype=bool)
    free = np.flatnonzero(~held)
    cov = np.zeros((npar, npar))
    if free.size == 0:
        return cov, None
    j = jac[:, free]
    if not np.all(np.isfinite(j)):
        return None, int(free[int(np.argmax(~np.isfinite(j).all(axis=0)))])
    norms = np.linalg.norm(j, axis=0)
    if np.any(norms == 0):
        return None, int(free[int(np.argmin(norms))])
    js = j / norms
    w, v = np.linalg.eigh(js.T @ js)
    if not w[0] > COND_LIMIT * w[-1]:
        return None, int(free[int(np.argmax(np.abs(v[:, 0])))])
    inv = (v / w) @ v.T / np.outer(norms, norms)
    cov[np.ix_(free, free)] = inv
    return cov, None
