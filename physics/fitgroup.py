"""Fit the lines of one window together: the engine of `zline.physics.fitting.fit_line` and of
`zline.physics.measure.measure_spectrum` (conventions in `zline.physics.fitting`).

Steps: usable pixels of the window (`_window_data`), start values and bounds with the continuum
from the sidebands (`_starts`), a bounded least-squares fit, parameters on a bound sorted into
held (a width on the resolution floor) and not measured (`_held_and_reasons`), the covariance
from the full Jacobian (`zline.physics._fitmodel.covariance`), derived quantities with errors
(`_derived`) and, for lines not detected, fluxes with the profile held (`_fixed_profile_flux`)
for the upper limits.
"""

import astropy.units as u
import numpy as np
from scipy.optimize import least_squares

from zline.physics._fitmodel import GAUSS_FWHM, Model, covariance
from zline.physics._threads import one_blas_thread
from zline.physics.fitting import (_C_KMS, DETECTION_SNR, KINDS, PROFILES, SAMPLING_FWHM_PIXELS,
                                   UPPER_LIMIT_SIGMA, WIDTH_CEILING, Component, LineFit,
                                   _as_spectral, _as_width, _regions, _spectrum_arrays,
                                   _std_errors, resolution_fwhm)

__all__ = ["fit_group"]


def _window_data(spectrum, lo, hi, exclude, label):
    """Usable pixels of [lo, hi] in increasing order: x, y, err (None without uncertainty)."""
    x_all, y_all, sunit, _ = _spectrum_arrays(spectrum)
    err_all = _std_errors(spectrum)
    good = (x_all >= lo) & (x_all <= hi) & np.isfinite(y_all) & np.isfinite(x_all)
    if spectrum.mask is not None:
        good &= ~np.asarray(spectrum.mask, dtype=bool)
    if err_all is not None:
        good &= np.isfinite(err_all) & (err_all > 0)
    for a, b in _regions(exclude, sunit, label):
        good &= ~((x_all >= a) & (x_all <= b))
    order = np.argsort(x_all[good], kind="stable")  # decreasing axes (frequency) too
    err = err_all[good][order] if err_all is not None else None
    return x_all[good][order], y_all[good][order], err


def _starts(model, comps, x, ys, es, t, mu0, fw0, floor, ceiling, lo, hi):
    """Start vector and bounds; the continuum from the sidebands (outside the line cores)."""
    order = model.order
    core = np.zeros(x.size, dtype=bool)
    for m, f in zip(mu0, fw0):
        core |= np.abs(x - m) < 1.5 * f
    side = ~core if (~core).sum() >= order + 2 else np.ones_like(core)
    cont0 = np.polynomial.polynomial.polyfit(t[side], ys[side], order, w=1.0 / es[side])
    p0, lb, ub = list(cont0), [-np.inf] * (order + 1), [np.inf] * (order + 1)
    if "shared" in model.mode:
        k = model.mode.index("shared")
        r = model.rel[k]
        p0.append(mu0[k] / r)
        lb.append(lo / r)
        ub.append(hi / r)
    for k, c in enumerate(comps):
        if model.mode[k] != "free":
            continue
        half = (hi - lo) if c["range"] is None else c["range"]
        a, b = max(lo, mu0[k] - half), min(hi, mu0[k] + half)
        p0.append(min(max(mu0[k], a + 1e-9 * (b - a)), b - 1e-9 * (b - a)))
        lb.append(a)
        ub.append(b)
    for g in range(model.n_group):
        if g in model.fixed_sigma:
            continue
        k = model.ref[g]
        s_lo, s_hi = floor[k] / GAUSS_FWHM, ceiling[k] / GAUSS_FWHM
        s0 = fw0[k] / GAUSS_FWHM
        p0.append(min(max(s0, s_lo * 1.02), s_hi * 0.98))
        lb.append(s_lo)
        ub.append(s_hi)
    if model.profile == "voigt":
        for g in range(model.n_group):
            if g in model.fixed_sigma:
                continue
            k = model.ref[g]
            g_lo = 1e-3 * floor[k] / GAUSS_FWHM
            p0.append(max(0.5 * fw0[k] / GAUSS_FWHM, 1.01 * g_lo))
            lb.append(g_lo)
            ub.append(ceiling[k])
    resid0 = ys - np.polynomial.polynomial.polyval(t, cont0)
    for k in model.free_flux:
        peak = float(np.interp(mu0[k], x, resid0))
        p0.append(peak * fw0[k] / GAUSS_FWHM * np.sqrt(2 * np.pi))
        lb.append(-np.inf)
        ub.append(np.inf)
    return np.array(p0), np.array(lb), np.array(ub)


def _held_and_reasons(model, res, lb, ub, comps):
    """Width parameters on the floor are held (unresolved); other bounds make lines unmeasured."""
    p = res.x
    held = np.zeros(p.size, dtype=bool)
    notes = [""] * model.n_comp
    bad = [""] * model.n_comp
    span = np.where(np.isfinite(ub - lb), ub - lb, 1.0)
    at_lo = (p - lb) <= 1e-6 * span
    at_hi = (ub - p) <= 1e-6 * span
    for name, i in model.idx.items():
        if not (at_lo[i] or at_hi[i]):
            continue
        if name.startswith("sig") or name.startswith("gam"):
            members = np.flatnonzero(model.group == int(name[3:]))
            if at_lo[i]:
                held[i] = True
                for k in members:
                    notes[k] = notes[k] or "width held at the resolution floor (unresolved)"
            else:
                for k in members:
                    bad[k] = bad[k] or "width at its ceiling for the line kind"
        elif name == "mu":
            for k in range(model.n_comp):
                if model.mode[k] == "shared":
                    bad[k] = bad[k] or "centre at the edge of the window"
        elif name.startswith("mu"):
            k = int(name[2:])
            bad[k] = bad[k] or "centre at the edge of its search range"
    return held, notes, bad


def _param_owner(model, name):
    """Components a parameter belongs to."""
    if name == "mu":
        return [k for k in range(model.n_comp) if model.mode[k] == "shared"]
    if name.startswith("mu") or name.startswith("F"):
        return [int(name[2:] if name.startswith("mu") else name[1:])]
    if name.startswith("sig") or name.startswith("gam"):
        return list(np.flatnonzero(model.group == int(name[3:])))
    return list(range(model.n_comp))


def _derived(model, p, cov, sig0):
    """Centre, flux, FWHM, continuum, EW and FWHM(km/s) per component, with errors."""
    def derived(pp):
        _, mu, _, _, fl = model.unpack(pp)
        fw = model.fwhm(pp)
        cmu = model.continuum(pp, mu)
        return np.concatenate([mu, fl, fw, cmu, fl / cmu, _C_KMS * fw / mu])

    steps = 1e-6 * np.maximum(np.abs(p), 1.0)
    for i, name in enumerate(model.names):
        if name[:2] in ("mu", "si", "ga"):
            steps[i] = 1e-4 * sig0
    f0 = derived(p)
    if cov is None:
        return f0, np.full(f0.size, np.nan)
    grad = np.empty((f0.size, p.size))
    for i in range(p.size):
        pp, pm = p.copy(), p.copy()
        pp[i] += steps[i]
        pm[i] -= steps[i]
        grad[:, i] = (derived(pp) - derived(pm)) / (2 * steps[i])
    var = np.einsum("ij,jk,ik->i", grad, cov, grad)
    return f0, np.sqrt(np.clip(var, 0, None))


def _fixed_profile_flux(model, p, mu_expect, x, t, ys, es, scatter, dof):
    """Flux and sigma of every component with the profiles held (linear least squares)."""
    pf = p.copy()
    for name, i in model.idx.items():
        if name == "mu":
            k = model.mode.index("shared")
            pf[i] = mu_expect[k] / model.rel[k]
        elif name.startswith("mu"):
            pf[i] = mu_expect[int(name[2:])]
    a = _design(model, pf, x, t, es)
    coef, *_ = np.linalg.lstsq(a, ys / es, rcond=None)
    cov, _ = covariance(a)
    if cov is None:
        return np.full(model.n_comp, np.nan), np.full(model.n_comp, np.nan)
    if scatter:
        rl = ys / es - a @ coef
        cov = cov * (float(rl @ rl) / max(dof, 1))
    sd = np.sqrt(np.clip(np.diag(cov), 0, None))[model.order + 1:]
    f = coef[model.order + 1:]
    flux, err = np.zeros(model.n_comp), np.zeros(model.n_comp)
    for pos, k in enumerate(model.free_flux):
        flux[k], err[k] = f[pos], sd[pos]
    for i, (j, r) in model.ratios.items():
        flux[i], err[i] = r * flux[j], abs(r) * err[j]
    return flux, err


def _design(model, p, x, t, es):
    """Error-weighted design matrix of the linear parameters (continuum powers, free fluxes) with
    the line shapes of ``p``; a line tied by a flux ratio adds its shape to its partner's column."""
    shp = model.shapes(p, x)
    eff = np.array(shp)
    for i, (j, r) in model.ratios.items():
        eff[j] = eff[j] + r * shp[i]
    cols = [t**k for k in range(model.order + 1)] + [eff[k] for k in model.free_flux]
    return np.array(cols).T / es[:, None]


class _Linear:
    """Result of a fit whose parameters are all linear (continuum and fluxes)."""

    success, message = True, "linear least squares"

    def __init__(self, x, jac, fun):
        self.x, self.jac, self.fun = x, jac, fun
        self.active_mask = np.zeros(x.size, dtype=int)


def _solve(model, x, ys, es, t, p0, lb, ub):
    """Bounded nonlinear least squares, or one linear solve when no shape parameter is free."""
    if all(name[0] in "cF" for name in model.names):
        a = _design(model, p0, x, t, es)
        coef, *_ = np.linalg.lstsq(a, ys / es, rcond=None)
        return _Linear(coef, -a, ys / es - a @ coef)
    return least_squares(lambda p: (ys - model(p, x)) / es, p0, bounds=(lb, ub),
                         x_scale="jac", method="trf", xtol=1e-10, ftol=1e-10, gtol=1e-10,
                         max_nfev=2000)


def _component_arrays(comps, sunit, x_all, spectrum, fwhm_min, fwhm_max, lo, hi, label):
    """Plain-float description of the components: positions, widths, floors, ceilings."""
    out = []
    for c in comps:
        if not isinstance(c, Component):
            raise TypeError(f"fit_group: components must be Component objects, got {c!r}")
        if c.centre not in ("shared", "free", "fixed", "follow"):
            raise ValueError(f"fit_group: component {c.label!r} has centre {c.centre!r}; "
                             f"options: fixed, follow, free, shared")
        if c.centre == "follow" and not (isinstance(c.follows, int) and 0 <= c.follows < len(comps)
                                         and comps[c.follows].centre != "follow"):
            raise ValueError(f"fit_group: component {c.label!r} follows {c.follows!r}, which is "
                             f"not the index of a component with its own centre")
        if c.kind not in KINDS:
            raise ValueError(f"fit_group: component {c.label!r} has kind {c.kind!r}; options: "
                             f"{', '.join(sorted(KINDS))}")
        mu = _as_spectral(c.position, sunit, "center", c.label)
        rest = mu if c.rest is None else _as_spectral(c.rest, sunit, "components", c.label)
        floor = (_as_width(fwhm_min, mu, sunit, "fwhm_min", c.label) if fwhm_min is not None
                 else resolution_fwhm(spectrum, mu * sunit)[0].value)
        ceil_q = fwhm_max if fwhm_max is not None else WIDTH_CEILING[c.kind]
        ceiling = ((hi - lo) if ceil_q is None
                   else _as_width(ceil_q, mu, sunit, "fwhm_max", c.label))
        ceiling = max(ceiling, 2.0 * floor)
        pix = resolution_fwhm(spectrum, mu * sunit)[0].value / SAMPLING_FWHM_PIXELS \
            if fwhm_min is None else floor / SAMPLING_FWHM_PIXELS
        fw = (_as_width(c.fwhm, mu, sunit, "fwhm", c.label) if c.fwhm is not None
              else 4.0 * abs(pix))
        if not fw > 0:
            raise ValueError(f"fit_line: FWHM guess for line {c.label!r} must be positive, got "
                             f"{c.fwhm!r}")
        rng = (None if c.centre_range is None
               else _as_width(c.centre_range, mu, sunit, "centre_range", c.label))
        out.append(dict(label=c.label, mu=mu, rest=rest, floor=floor, ceiling=ceiling,
                        fwhm=fw if c.fix_width else min(max(fw, floor), ceiling), range=rng,
                        mode=c.centre, group=int(c.width_group), fix=bool(c.fix_width),
                        kind=c.kind, follows=c.follows))
    return out


@one_blas_thread
def fit_group(spectrum, components, window, *, continuum_order=1, profile="gaussian",
              ratios=None, exclude=None, fwhm_min=None, fwhm_max=None, label=None):
    """Fit several lines of one window together: the engine behind `fit_line` and
    `zline.physics.measure.measure_spectrum`.

    Parameters
    ----------
    spectrum : `specutils.Spectrum`
        1D spectrum (uncertainty, mask as for `fit_line`).
    components : sequence of `Component`
        The lines; every line predicted inside the window belongs here, detected or not.
    window : `~astropy.units.Quantity`
        ``[low, high]`` in any spectral unit.
    continuum_order : int
        Order of the local polynomial continuum.
    profile : str
        One of `PROFILES`.
    ratios : dict, optional
        ``{i: (j, r)}``: flux of component i = r * flux of component j.
    exclude : optional
        Ranges left out (see `fit_line`).
    fwhm_min, fwhm_max : `~astropy.units.Quantity`, optional
        FWHM floor and ceiling (spectral width or velocity); default `resolution_fwhm` and
        `WIDTH_CEILING` of each component's kind.
    label : str, optional
        Name for messages; default the first component's label.

    Returns
    -------
    list of LineFit
        One per component, in order.
    """
    x_all, _, sunit, funit = _spectrum_arrays(spectrum, "fit_group")
    if profile not in PROFILES:
        raise ValueError(f"fit_line: unknown profile {profile!r}; options: "
                         f"{', '.join(sorted(PROFILES))}")
    if not isinstance(continuum_order, (int, np.integer)) or not 0 <= continuum_order <= 5:
        raise ValueError(f"fit_line: 'continuum_order' must be an integer 0..5, got "
                         f"{continuum_order!r}")
    if not components:
        raise ValueError("fit_group: no components to fit")
    label = label or components[0].label
    a, b = _as_spectral(window, sunit, "window", label)
    lo, hi = min(a, b), max(a, b)
    comps = _component_arrays(components, sunit, x_all, spectrum, fwhm_min, fwhm_max, lo, hi,
                              label)
    mu0 = np.array([c["mu"] for c in comps])
    fw0 = np.array([c["fwhm"] for c in comps])
    xmin, xmax = float(np.nanmin(x_all)), float(np.nanmax(x_all))
    win_txt = f"[{lo:.6g}, {hi:.6g}] {sunit}"
    rng_txt = f"[{xmin:.6g}, {xmax:.6g}] {sunit}"
    if hi < xmin or lo > xmax:
        raise ValueError(f"fit_line: window {win_txt} for line {label!r} lies outside the "
                         f"spectral range {rng_txt}")
    if not (np.all(mu0 >= lo) and np.all(mu0 <= hi)):
        raise ValueError(f"fit_line: line {label!r} (components at "
                         f"{np.array2string(mu0, precision=6)} {sunit}) is not inside the "
                         f"window {win_txt}")
    x, y, err = _window_data(spectrum, lo, hi, exclude, label)
    shared = [k for k, c in enumerate(comps) if c["mode"] == "shared"]
    ref_rest = comps[shared[0]]["rest"] if shared else comps[0]["rest"]
    rel = np.array([c["rest"] / ref_rest for c in comps])
    groups = [c["group"] for c in comps]
    remap = {g: i for i, g in enumerate(sorted(set(groups)))}
    groups = [remap[g] for g in groups]
    fixed_sigma = {}
    for k, c in enumerate(comps):
        if c["fix"] and groups[k] not in fixed_sigma:
            fixed_sigma[groups[k]] = c["fwhm"] / GAUSS_FWHM
    hw = max(0.5 * (hi - lo), 1e-300)
    x0 = 0.5 * (hi + lo)
    follow = {k: c["follows"] for k, c in enumerate(comps) if c["mode"] == "follow"}
    model = Model(rel, int(continuum_order), [c["mode"] for c in comps], mu0, groups,
                  fixed_sigma, ratios or {}, profile, x0, hw, follow)
    npar = len(model.names)
    if x.size < npar + 3:
        raise ValueError(f"fit_line: window {win_txt} for line {label!r} has {x.size} usable "
                         f"pixels, need at least {npar + 3} for {npar} parameters (spectral "
                         f"range {rng_txt}); widen the window or lower continuum_order")
    scatter = err is None
    fscale = (float(np.median(err)) if not scatter
              else float(np.nanstd(y) or np.nanmax(np.abs(y)) or 1.0)) or 1.0
    ys = y / fscale
    es = (err if not scatter else np.full(y.size, fscale)) / fscale
    t = (x - x0) / hw
    floor = np.array([c["floor"] for c in comps])
    ceiling = np.array([c["ceiling"] for c in comps])
    p0, lb, ub = _starts(model, comps, x, ys, es, t, mu0, fw0, floor, ceiling, lo, hi)
    res = _solve(model, x, ys, es, t, p0, lb, ub)
    p = res.x
    dof = x.size - npar
    chi2_dof = float(np.sum(res.fun**2)) / dof if dof > 0 else float("nan")
    held, notes, bad = _held_and_reasons(model, res, lb, ub, comps)
    cov, worst = covariance(res.jac, held)
    if cov is None:
        for k in _param_owner(model, model.names[worst]):
            bad[k] = bad[k] or (f"parameter {model.names[worst]} not constrained by the data "
                                f"(singular covariance)")
    elif scatter:
        cov = cov * chi2_dof
    vals, errs = _derived(model, p, cov, float(np.min(fw0)) / GAUSS_FWHM)
    n = model.n_comp
    mu_v, fl_v, fw_v, c_v, ew_v, fk_v = (vals[i * n:(i + 1) * n] for i in range(6))
    mu_e, fl_e, fw_e, c_e, ew_e, fk_e = (errs[i * n:(i + 1) * n] for i in range(6))
    for k in range(n):
        if bad[k]:
            mu_e[k] = fl_e[k] = fw_e[k] = c_e[k] = ew_e[k] = fk_e[k] = np.nan
    snr = np.where(fl_e > 0, fl_v / np.where(fl_e > 0, fl_e, 1.0), np.nan)
    sign = np.array([KINDS[c["kind"]] for c in comps])
    detected = np.array([not bad[k] and np.isfinite(snr[k]) and
                         (abs(snr[k]) if sign[k] == 0 else sign[k] * snr[k]) >= DETECTION_SNR
                         for k in range(n)])
    upper, upper_sd = [None] * n, [None] * n
    if not detected.all():
        p_lim = p.copy()
        for name, i in model.idx.items():  # widths of undetected lines at their expectations
            owners = _param_owner(model, name)
            if name[:2] in ("si", "ga") and not any(detected[k] for k in owners):
                p_lim[i] = p0[i]
        fl_l, sd_l = _fixed_profile_flux(model, p_lim, mu0, x, t, ys, es, scatter, dof)
        for k in np.flatnonzero(~detected):
            s = sign[k] if sign[k] != 0 else (1 if fl_l[k] >= 0 else -1)
            if np.isfinite(sd_l[k]):
                lim = max(s * fl_l[k], 0.0) + UPPER_LIMIT_SIGMA * sd_l[k]
                upper[k] = lim * fscale * funit * sunit
                upper_sd[k] = sd_l[k] * fscale * funit * sunit

    def evaluate(axis, with_lines, _p=p.copy()):
        xa = np.asarray(_as_spectral(axis, sunit, "spectral_axis", label), dtype=float)
        out = model(_p, xa.ravel()) if with_lines else model.continuum(_p, xa.ravel())
        return (out.reshape(xa.shape) * fscale) * funit

    win_q = u.Quantity([lo, hi], sunit)
    fl_unit = fscale * funit * sunit
    return [LineFit(
        center=mu_v[k] * sunit, center_err=mu_e[k] * sunit,
        flux=fl_v[k] * fl_unit, flux_err=fl_e[k] * fl_unit,
        fwhm=fw_v[k] * sunit, fwhm_err=fw_e[k] * sunit,
        fwhm_kms=fk_v[k] * u.km / u.s, fwhm_kms_err=fk_e[k] * u.km / u.s,
        ew=-ew_v[k] * sunit, ew_err=ew_e[k] * sunit, snr=float(snr[k]),
        continuum=c_v[k] * fscale * funit, continuum_err=c_e[k] * fscale * funit,
        chi2_dof=chi2_dof, dof=int(dof), success=bool(res.success), message=str(res.message),
        upper_limit=upper[k], upper_limit_sigma=upper_sd[k], label=comps[k]["label"],
        profile=profile, errors_from="scatter" if scatter else "uncertainty", window=win_q,
        n_pixels=int(x.size), kind=comps[k]["kind"], measured=not bad[k],
        reason=bad[k] or notes[k], fwhm_floor=floor[k] * sunit, _model=evaluate)
        for k in range(n)]
