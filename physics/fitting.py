"""Fit one emission or absorption line (or a blend) in a 1D spectrum.

The fit is a single weighted least-squares problem over a window around the line: a low-order
polynomial continuum plus one or more line profiles.  The continuum is first estimated on the
sidebands of the window (the window minus the line cores and any excluded ranges); those
coefficients start the joint fit, in which continuum and lines are fitted together so that the
line uncertainties include the continuum's.

Conventions
-----------
* ``flux`` is the integral of (data - continuum) over the spectral axis in the spectrum's own
  spectral unit: positive for emission, negative for absorption.
* ``ew`` (equivalent width) is ``flux / continuum(center)`` in the spectral unit: **positive for
  emission, negative for absorption**.  This is the opposite sign to
  `specutils.analysis.equivalent_width`, which returns ``integral(1 - F/C)`` (negative for
  emission).
* ``fwhm_kms`` is ``c * fwhm / center`` (the same to first order for wavelength and frequency axes).
* Uncertainties come from the covariance of the fit, which is scaled by the flux errors of the
  spectrum.  Only when the spectrum carries no uncertainty is the covariance scaled by the
  reduced chi-square (``errors_from == "scatter"``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import astropy.units as u
import numpy as np
from astropy.constants import c as _c
from astropy.nddata import StdDevUncertainty
from scipy.optimize import least_squares
from scipy.special import voigt_profile

__all__ = ["LineFit", "fit_line", "PROFILES", "DETECTION_SNR"]

PROFILES = {
    "gaussian": "Gaussian, parameters centre, sigma and integrated flux",
    "voigt": "Voigt (Gaussian sigma, Lorentzian half width gamma), integrated flux",
}
#: Signal-to-noise ratio below which a line counts as not detected and gets an upper limit.
DETECTION_SNR = 3.0

_C_KMS = _c.to_value(u.km / u.s)
_GAUSS_FWHM = 2.0 * math.sqrt(2.0 * math.log(2.0))


@dataclass
class LineFit:
    """Result of `fit_line` for one line (component).

    Attributes
    ----------
    center, center_err : `~astropy.units.Quantity`
        Fitted observed line centre and its 1-sigma error, in the spectral unit of the spectrum.
    flux, flux_err : `~astropy.units.Quantity`
        Integrated line flux (flux unit x spectral unit); positive for emission.
    fwhm, fwhm_err : `~astropy.units.Quantity`
        Full width at half maximum in the spectral unit.
    fwhm_kms, fwhm_kms_err : `~astropy.units.Quantity` ['speed']
        FWHM as a velocity, ``c * fwhm / center``.
    ew, ew_err : `~astropy.units.Quantity`
        Equivalent width ``flux / continuum(center)``; positive for emission (opposite to specutils).
    snr : float
        ``flux / flux_err``.
    continuum, continuum_err : `~astropy.units.Quantity`
        Continuum level at the centre.
    chi2_dof : float
        Reduced chi-square of the fit (for the whole window).
    dof : int
        Degrees of freedom.
    success : bool
        Whether the optimizer converged.
    message : str
        Optimizer message.
    upper_limit : `~astropy.units.Quantity` or None
        3-sigma flux upper limit when ``snr < 3`` (the line counts as not detected), else None.
    label : str
        Name of the line.
    profile : str
        Profile used (one of `PROFILES`).
    errors_from : str
        ``"uncertainty"`` (flux errors of the spectrum) or ``"scatter"`` (no uncertainty given:
        covariance scaled by chi2/dof).
    window : `~astropy.units.Quantity`
        The (low, high) spectral window fitted.
    n_pixels : int
        Number of pixels used.
    components : tuple of LineFit
        All components of a blend (the first is this one); empty for the components themselves.
    """

    center: u.Quantity
    center_err: u.Quantity
    flux: u.Quantity
    flux_err: u.Quantity
    fwhm: u.Quantity
    fwhm_err: u.Quantity
    fwhm_kms: u.Quantity
    fwhm_kms_err: u.Quantity
    ew: u.Quantity
    ew_err: u.Quantity
    snr: float
    continuum: u.Quantity
    continuum_err: u.Quantity
    chi2_dof: float
    dof: int
    success: bool
    message: str
    upper_limit: u.Quantity | None = None
    label: str = ""
    profile: str = "gaussian"
    errors_from: str = "uncertainty"
    window: u.Quantity | None = None
    n_pixels: int = 0
    components: tuple = ()
    _model: Any = field(default=None, repr=False, compare=False)

    @property
    def detected(self) -> bool:
        """True when ``snr >= 3``."""
        return bool(np.isfinite(self.snr) and self.snr >= DETECTION_SNR)

    def model_flux(self, spectral_axis):
        """Evaluate the fitted model (continuum + all components) on ``spectral_axis``.

        Parameters
        ----------
        spectral_axis : `~astropy.units.Quantity`
            Any spectral unit (converted to the spectrum's unit).

        Returns
        -------
        `~astropy.units.Quantity`
            Model flux in the spectrum's flux unit.
        """
        return self._model(spectral_axis, True)

    def continuum_flux(self, spectral_axis):
        """Evaluate the fitted continuum on ``spectral_axis`` (see `model_flux`)."""
        return self._model(spectral_axis, False)

    def to_dict(self) -> dict:
        """Plain-JSON dict of the measured values (values and unit strings)."""
        out = {}
        for key in ("center", "center_err", "flux", "flux_err", "fwhm", "fwhm_err", "fwhm_kms",
                    "fwhm_kms_err", "ew", "ew_err", "continuum", "continuum_err", "upper_limit"):
            q = getattr(self, key)
            out[key] = None if q is None else {"value": float(q.value), "unit": q.unit.to_string()}
        out.update(snr=float(self.snr), chi2_dof=float(self.chi2_dof), dof=int(self.dof),
                   success=bool(self.success), message=str(self.message), label=self.label,
                   profile=self.profile, errors_from=self.errors_from, n_pixels=int(self.n_pixels))
        out["window"] = (None if self.window is None else
                         {"value": [float(v) for v in self.window.value],
                          "unit": self.window.unit.to_string()})
        return out


# --------------------------------------------------------------------------------------------
# input handling


def _as_spectral(value, unit, name, label):
    if not isinstance(value, u.Quantity):
        raise TypeError(f"fit_line: argument {name!r} for line {label!r} must be an astropy "
                        f"Quantity with a spectral unit (e.g. 6563*u.AA), got {value!r}")
    try:
        return value.to_value(unit, equivalencies=u.spectral())
    except u.UnitConversionError as exc:
        raise u.UnitConversionError(
            f"fit_line: argument {name!r} for line {label!r} has unit {value.unit!s}, which does "
            f"not convert to the spectral axis unit {unit!s}") from exc


def _as_width(value, x0, unit, name, label):
    """A width (delta) in spectral units; velocity widths are converted at x0."""
    if not isinstance(value, u.Quantity):
        raise TypeError(f"fit_line: argument {name!r} for line {label!r} must be a Quantity "
                        f"(spectral unit or km/s), got {value!r}")
    if value.unit.physical_type == "speed":
        return abs(x0) * value.to_value(u.km / u.s) / _C_KMS
    try:
        return abs(value.to_value(unit))
    except u.UnitConversionError as exc:
        raise u.UnitConversionError(
            f"fit_line: argument {name!r} for line {label!r} must be a width in {unit!s} or a "
            f"velocity, got unit {value.unit!s}") from exc


def _std_errors(spectrum):
    unc = spectrum.uncertainty
    if unc is None:
        return None
    try:
        std = unc.represent_as(StdDevUncertainty).array
    except (AttributeError, TypeError, ValueError) as exc:
        raise ValueError(f"fit_line: the spectrum's uncertainty of type {type(unc).__name__} "
                         f"cannot be turned into standard deviations") from exc
    return np.asarray(std, dtype=float)


def _regions(exclude, unit, label):
    if exclude is None:
        return []
    subs = getattr(exclude, "subregions", None)
    if subs is not None:
        items = subs
    elif isinstance(exclude, u.Quantity) and exclude.shape == (2,):
        items = [exclude]
    else:
        items = list(exclude)
    out = []
    for item in items:
        lo, hi = item[0], item[1]
        a = _as_spectral(lo, unit, "exclude", label)
        b = _as_spectral(hi, unit, "exclude", label)
        out.append((min(a, b), max(a, b)))
    return out


# --------------------------------------------------------------------------------------------
# model


class _Model:
    """Parameter bookkeeping for continuum polynomial + line components."""

    def __init__(self, n_comp, order, ratios, rest, tie_center, tie_width, profile, x0, hw):
        self.n_comp = n_comp
        self.order = order
        self.profile = profile
        self.x0, self.hw = x0, hw
        self.rest = rest  # relative positions mu_k / mu_0 (for tied centres) or None
        self.tie_center = tie_center and n_comp > 1
        self.tie_width = tie_width and n_comp > 1
        self.ratios = ratios  # {i: (j, r)}: flux_i = r * flux_j
        names = [f"c{k}" for k in range(order + 1)]
        names += ["mu0"] if self.tie_center else [f"mu{k}" for k in range(n_comp)]
        nw = 1 if self.tie_width else n_comp
        names += [f"sig{k}" for k in range(nw)]
        if profile == "voigt":
            names += [f"gam{k}" for k in range(nw)]
        self.free_flux = [k for k in range(n_comp) if k not in ratios]
        names += [f"F{k}" for k in self.free_flux]
        self.names = names
        self.idx = {n: i for i, n in enumerate(names)}

    def unpack(self, p):
        cont = p[: self.order + 1]
        if self.tie_center:
            mu = p[self.idx["mu0"]] * self.rest
        else:
            mu = np.array([p[self.idx[f"mu{k}"]] for k in range(self.n_comp)])
        if self.tie_width:
            sig = p[self.idx["sig0"]] * mu / mu[0]
            gam = (p[self.idx["gam0"]] * mu / mu[0]) if self.profile == "voigt" else None
        else:
            sig = np.array([p[self.idx[f"sig{k}"]] for k in range(self.n_comp)])
            gam = (np.array([p[self.idx[f"gam{k}"]] for k in range(self.n_comp)])
                   if self.profile == "voigt" else None)
        flux = np.zeros(self.n_comp)
        for k in self.free_flux:
            flux[k] = p[self.idx[f"F{k}"]]
        for i, (j, r) in self.ratios.items():
            flux[i] = r * flux[j]
        return cont, mu, sig, gam, flux

    def continuum(self, p, x):
        return np.polynomial.polynomial.polyval((x - self.x0) / self.hw, p[: self.order + 1])

    def shapes(self, p, x):
        _, mu, sig, gam, _ = self.unpack(p)
        d = x[None, :] - mu[:, None]
        if self.profile == "voigt":
            return voigt_profile(d, sig[:, None], gam[:, None])
        return np.exp(-0.5 * (d / sig[:, None]) ** 2) / (sig[:, None] * math.sqrt(2 * math.pi))

    def __call__(self, p, x):
        _, _, _, _, flux = self.unpack(p)
        return self.continuum(p, x) + flux @ self.shapes(p, x)

    def fwhm(self, p):
        _, _, sig, gam, _ = self.unpack(p)
        fg = _GAUSS_FWHM * np.abs(sig)
        if self.profile != "voigt":
            return fg
        fl = 2.0 * np.abs(gam)
        # Olivero & Longbothum 1977 approximation (from memory), accurate to ~0.02 %
        return 0.5346 * fl + np.sqrt(0.2166 * fl**2 + fg**2)


def _gradient(fun, p, steps):
    f0 = np.atleast_1d(fun(p))
    g = np.empty((f0.size, p.size))
    for i in range(p.size):
        h = steps[i]
        pp, pm = p.copy(), p.copy()
        pp[i] += h
        pm[i] -= h
        g[:, i] = (np.atleast_1d(fun(pp)) - np.atleast_1d(fun(pm))) / (2 * h)
    return f0, g


# --------------------------------------------------------------------------------------------
# public


def fit_line(spectrum, center, window=None, continuum_order=1, profile="gaussian",
             components=None, tie_width=False, tie_ratio=None, exclude=None, *,
             fwhm=None, tie_center=True, label=None):
    """Fit a line (or a blend of lines) with a local polynomial continuum.

    Parameters
    ----------
    spectrum : `specutils.Spectrum`
        1D spectrum; its uncertainty (any astropy uncertainty convertible to standard deviations)
        weights the fit, its mask (True = bad) and non-finite pixels are dropped.
    center : `~astropy.units.Quantity` ['length', 'frequency', 'energy', 'wavenumber']
        Observed position (initial guess) of the line, or of the first component of a blend.
    window : `~astropy.units.Quantity`, optional
        Either a pair ``[low, high]`` in any spectral unit, or a single full width (spectral unit
        or km/s) centred on the line (blends: on the span of the components).  Default: 16 FWHM
        guesses or 40 pixels, whichever is wider, around the line(s).
    continuum_order : int
        Polynomial order of the local continuum (0 = constant, 1 = linear, ...).
    profile : str
        One of `PROFILES` (``"gaussian"``, ``"voigt"``).
    components : `~astropy.units.Quantity` or dict, optional
        Rest positions of the components of a blend (first = the line at ``center``), either a
        Quantity array or a dict ``{label: rest Quantity}``.  Only their ratios matter: with
        ``tie_center=True`` (default) all centres move together through one redshift.
    tie_width : bool
        Give all components the same velocity width (sigma_k / center_k equal).
    tie_ratio : dict, optional
        Fixed flux ratios ``{(i, j): r}`` meaning ``flux_i = r * flux_j``; ``i``/``j`` are indices
        into ``components`` or their labels, e.g. ``{("[N II] 6585", "[N II] 6550"): 2.94}``.
    exclude : sequence of (low, high) Quantity pairs or `specutils.SpectralRegion`, optional
        Spectral ranges left out of the fit (bad pixels, unrelated features).
    fwhm : `~astropy.units.Quantity`, optional
        Initial FWHM guess (spectral unit or km/s); it also sets the profile assumed for an upper
        limit.  Default: 4 pixels.
    tie_center : bool
        For blends: tie centres through one redshift (default) or fit each freely.
    label : str, optional
        Name of the line for messages and the result.

    Returns
    -------
    LineFit
        Result for the line at ``center``; ``.components`` holds every component of a blend.

    Raises
    ------
    ValueError
        Window outside the spectrum, too few usable pixels, bad option or tie.
    TypeError
        Bare numbers where a Quantity is expected.
    """
    flux_q = getattr(spectrum, "flux", None)
    axis_q = getattr(spectrum, "spectral_axis", None)
    if not isinstance(flux_q, u.Quantity) or axis_q is None:
        raise TypeError(f"fit_line: 'spectrum' must be a specutils.Spectrum, got "
                        f"{type(spectrum).__name__}")
    if flux_q.ndim != 1:
        raise ValueError(f"fit_line: 'spectrum' must be one-dimensional, got flux shape "
                         f"{flux_q.shape}")
    if profile not in PROFILES:
        raise ValueError(f"fit_line: unknown profile {profile!r}; options: "
                         f"{', '.join(sorted(PROFILES))}")
    if not isinstance(continuum_order, (int, np.integer)) or not 0 <= continuum_order <= 5:
        raise ValueError(f"fit_line: 'continuum_order' must be an integer 0..5, got "
                         f"{continuum_order!r}")
    sunit = axis_q.unit
    funit = flux_q.unit
    x_all = np.asarray(u.Quantity(axis_q).value, dtype=float)
    y_all = np.asarray(flux_q.value, dtype=float)
    label = label if label is not None else (
        f"{center:.6g}" if isinstance(center, u.Quantity) else str(center))
    mu_guess0 = _as_spectral(center, sunit, "center", label)

    # components
    comp_labels = [label]
    if components is None:
        rel = np.array([1.0])
    else:
        if isinstance(components, dict):
            comp_labels = [str(k) for k in components]
            rest_vals = [_as_spectral(v, sunit, "components", label) for v in components.values()]
        else:
            cq = np.atleast_1d(components)
            rest_vals = [_as_spectral(v, sunit, "components", label) for v in cq]
            comp_labels = [label] + [f"{label} +{k}" for k in range(1, len(rest_vals))]
        if len(rest_vals) < 1:
            raise ValueError(f"fit_line: 'components' for line {label!r} is empty")
        rel = np.asarray(rest_vals, dtype=float) / rest_vals[0]
    n_comp = rel.size
    ratios = {}
    for key, r in (tie_ratio or {}).items():
        try:
            i, j = key
        except (TypeError, ValueError):
            raise ValueError(f"fit_line: 'tie_ratio' keys must be (i, j) pairs, got {key!r}") from None
        ii = [comp_labels.index(k) if isinstance(k, str) and k in comp_labels else k for k in (i, j)]
        for k, orig in zip(ii, (i, j)):
            if not isinstance(k, (int, np.integer)) or not 0 <= k < n_comp:
                raise ValueError(f"fit_line: 'tie_ratio' names component {orig!r}, which is not "
                                 f"one of {comp_labels} or an index 0..{n_comp - 1}")
        ratios[int(ii[0])] = (int(ii[1]), float(r))
    for i, (j, _) in ratios.items():
        if j in ratios or i == j:
            raise ValueError(f"fit_line: 'tie_ratio' ties component {comp_labels[i]!r} to "
                             f"{comp_labels[j]!r}, which is itself tied; tie to a free component")
    mu_guess = mu_guess0 * rel

    dx_med = float(np.median(np.abs(np.diff(x_all)))) if x_all.size > 1 else 0.0
    fw_guess = (_as_width(fwhm, mu_guess0, sunit, "fwhm", label) if fwhm is not None
                else 4.0 * dx_med)
    if not fw_guess > 0:
        raise ValueError(f"fit_line: FWHM guess for line {label!r} must be positive, got {fwhm!r}")

    # window
    span_lo, span_hi = float(mu_guess.min()), float(mu_guess.max())
    if window is None:
        half = max(8.0 * fw_guess, 20.0 * dx_med)
        lo, hi = span_lo - half, span_hi + half
    else:
        if not isinstance(window, u.Quantity):
            raise TypeError(f"fit_line: 'window' for line {label!r} must be a Quantity (a "
                            f"[low, high] pair or one full width), got {window!r}")
        if window.isscalar or window.size == 1:
            half = 0.5 * _as_width(window.reshape(()), mu_guess0, sunit, "window", label)
            lo, hi = span_lo - half, span_hi + half
        elif window.size == 2:
            a, b = _as_spectral(window, sunit, "window", label)
            lo, hi = min(a, b), max(a, b)
        else:
            raise ValueError(f"fit_line: 'window' for line {label!r} must be one width or a "
                             f"[low, high] pair, got {window.size} values")
    xmin, xmax = float(np.nanmin(x_all)), float(np.nanmax(x_all))
    win_txt = f"[{lo:.6g}, {hi:.6g}] {sunit}"
    rng_txt = f"[{xmin:.6g}, {xmax:.6g}] {sunit}"
    if hi < xmin or lo > xmax:
        raise ValueError(f"fit_line: window {win_txt} for line {label!r} lies outside the "
                         f"spectral range {rng_txt}")
    if not (lo <= span_lo <= hi and lo <= span_hi <= hi):
        raise ValueError(f"fit_line: line {label!r} (components at "
                         f"{np.array2string(mu_guess, precision=6)} {sunit}) is not inside the "
                         f"window {win_txt}")

    err_all = _std_errors(spectrum)
    good = (x_all >= lo) & (x_all <= hi) & np.isfinite(y_all) & np.isfinite(x_all)
    if spectrum.mask is not None:
        good &= ~np.asarray(spectrum.mask, dtype=bool)
    if err_all is not None:
        good &= np.isfinite(err_all) & (err_all > 0)
    for a, b in _regions(exclude, sunit, label):
        good &= ~((x_all >= a) & (x_all <= b))
    order_x = np.argsort(x_all[good], kind="stable")  # decreasing axes (frequency) too
    x = x_all[good][order_x]
    y = y_all[good][order_x]
    w_err = err_all[good][order_x] if err_all is not None else np.ones_like(y)

    hw = max(0.5 * (hi - lo), 1e-300)
    x0 = 0.5 * (hi + lo)
    model = _Model(n_comp, int(continuum_order), ratios, rel, tie_center, tie_width, profile,
                   x0, hw)
    npar = len(model.names)
    if x.size < npar + 3:
        raise ValueError(f"fit_line: window {win_txt} for line {label!r} has {x.size} usable "
                         f"pixels, need at least {npar + 3} for {npar} parameters (spectral "
                         f"range {rng_txt}); widen the window or lower continuum_order")

    # flux scaling for conditioning
    fscale = float(np.nanmedian(np.abs(w_err))) if err_all is not None else float(
        np.nanstd(y) or np.nanmax(np.abs(y)) or 1.0)
    fscale = fscale if fscale > 0 else 1.0
    ys, es = y / fscale, w_err / fscale

    # sideband continuum as the starting point
    core = np.zeros(x.size, dtype=bool)
    for m in mu_guess:
        core |= np.abs(x - m) < 1.5 * fw_guess
    side = ~core if (~core).sum() >= continuum_order + 2 else np.ones_like(core)
    t = (x - x0) / hw
    cont0 = np.polynomial.polynomial.polyfit(t[side], ys[side], int(continuum_order),
                                            w=1.0 / es[side])
    sig0 = fw_guess / _GAUSS_FWHM
    p0, lb, ub = list(cont0), [-np.inf] * len(cont0), [np.inf] * len(cont0)
    dx_min = max(float(np.min(np.abs(np.diff(x)))) if x.size > 1 else dx_med, 1e-300)
    mus = [mu_guess0] if model.tie_center else list(mu_guess)
    for m in mus:
        p0.append(m)
        lb.append(lo)
        ub.append(hi)
    nw = 1 if model.tie_width else n_comp
    sig_lo, sig_hi = 0.2 * dx_min, max(hi - lo, 2 * dx_min)
    for _ in range(nw):
        p0.append(min(max(sig0, 1.01 * sig_lo), 0.99 * sig_hi))
        lb.append(sig_lo)
        ub.append(sig_hi)
    if profile == "voigt":
        for _ in range(nw):
            p0.append(min(max(0.5 * sig0, 1.01 * 1e-3 * dx_min), 0.99 * sig_hi))
            lb.append(1e-3 * dx_min)
            ub.append(sig_hi)
    resid0 = ys - np.polynomial.polynomial.polyval(t, cont0)
    for k in model.free_flux:
        peak = float(np.interp(mu_guess[k], x, resid0))
        p0.append(peak * sig0 * math.sqrt(2 * math.pi))
        lb.append(-np.inf)
        ub.append(np.inf)
    p0, lb, ub = np.array(p0), np.array(lb), np.array(ub)

    def resid(p):
        return (ys - model(p, x)) / es

    res = least_squares(resid, p0, bounds=(lb, ub), x_scale="jac", method="trf",
                        xtol=1e-10, ftol=1e-10, gtol=1e-10, max_nfev=2000)
    p = res.x
    dof = x.size - npar
    chi2 = float(np.sum(res.fun**2))
    chi2_dof = chi2 / dof if dof > 0 else float("nan")
    jac = res.jac
    try:
        cov = np.linalg.pinv(jac.T @ jac)
    except np.linalg.LinAlgError:
        cov = np.full((npar, npar), np.nan)
    errors_from = "uncertainty"
    if err_all is None:
        cov = cov * chi2_dof
        errors_from = "scatter"
    steps = 1e-6 * np.maximum(np.abs(p), 1.0)
    shape_params = [i for i, name in enumerate(model.names) if name[:2] in ("mu", "si", "ga")]
    steps[shape_params] = 1e-4 * sig0

    def derived(pp):
        _, mu, _, _, fl = model.unpack(pp)
        fw = model.fwhm(pp)
        cmu = model.continuum(pp, mu)
        return np.concatenate([mu, fl, fw, cmu, fl / cmu, _C_KMS * fw / mu])

    vals, grad = _gradient(derived, p, steps)
    var = np.einsum("ij,jk,ik->i", grad, cov, grad)
    errs = np.sqrt(np.clip(var, 0, None))
    n = n_comp
    mu_v, fl_v, fw_v, c_v, ew_v, fk_v = (vals[i * n:(i + 1) * n] for i in range(6))
    mu_e, fl_e, fw_e, c_e, ew_e, fk_e = (errs[i * n:(i + 1) * n] for i in range(6))
    snr = np.where(fl_e > 0, fl_v / np.where(fl_e > 0, fl_e, 1.0), np.nan)

    # upper limits: fixed profile (centre and FWHM at the guesses), linear refit
    upper = [None] * n
    if np.any(~(snr >= DETECTION_SNR)):
        pf = p.copy()
        if model.tie_center:
            pf[model.idx["mu0"]] = mu_guess0
        else:
            for k in range(n):
                pf[model.idx[f"mu{k}"]] = mu_guess[k]
        for k in range(nw):
            pf[model.idx[f"sig{k}"]] = sig0
            if profile == "voigt":
                pf[model.idx[f"gam{k}"]] = 1e-3 * dx_min
        shp = model.shapes(pf, x)
        cols = [t**k for k in range(model.order + 1)]
        eff = np.array(shp)
        for i, (j, r) in ratios.items():
            eff[j] = eff[j] + r * shp[i]
        cols += [eff[k] for k in model.free_flux]
        a = np.array(cols).T / es[:, None]
        covl = np.linalg.pinv(a.T @ a)
        if err_all is None:
            rl = ys / es - a @ (covl @ (a.T @ (ys / es)))
            covl = covl * (float(rl @ rl) / max(dof, 1))
        sd = np.sqrt(np.clip(np.diag(covl), 0, None))[model.order + 1:]
        sd_by_comp = {}
        for pos, k in enumerate(model.free_flux):
            sd_by_comp[k] = sd[pos]
        for i, (j, r) in ratios.items():
            sd_by_comp[i] = abs(r) * sd_by_comp[j]
        for k in range(n):
            if not snr[k] >= DETECTION_SNR:
                upper[k] = DETECTION_SNR * sd_by_comp[k] * fscale * funit * sunit

    def evaluate(axis, with_lines, _p=p.copy()):
        xa = _as_spectral(axis, sunit, "spectral_axis", label)
        xa = np.asarray(xa, dtype=float)
        out = model(_p, xa.ravel()) if with_lines else model.continuum(_p, xa.ravel())
        return (out.reshape(xa.shape) * fscale) * funit

    win_q = u.Quantity([lo, hi], sunit)
    results = []
    for k in range(n):
        results.append(LineFit(
            center=mu_v[k] * sunit, center_err=mu_e[k] * sunit,
            flux=fl_v[k] * fscale * funit * sunit, flux_err=fl_e[k] * fscale * funit * sunit,
            fwhm=fw_v[k] * sunit, fwhm_err=fw_e[k] * sunit,
            fwhm_kms=fk_v[k] * u.km / u.s, fwhm_kms_err=fk_e[k] * u.km / u.s,
            ew=ew_v[k] * sunit, ew_err=ew_e[k] * sunit, snr=float(snr[k]),
            continuum=c_v[k] * fscale * funit, continuum_err=c_e[k] * fscale * funit,
            chi2_dof=chi2_dof, dof=int(dof), success=bool(res.success), message=str(res.message),
            upper_limit=upper[k], label=comp_labels[k], profile=profile, errors_from=errors_from,
            window=win_q, n_pixels=int(x.size), _model=evaluate))
    primary = results[0]
    primary.components = tuple(results) if n > 1 else (primary,)
    return primary
