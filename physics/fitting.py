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
* ``ew`` (equivalent width) is ``-flux / continuum(center)`` in the spectral unit, the usual
  convention ``integral(1 - F/C)``: **positive for absorption, negative for emission**, the same
  sign as `specutils.analysis.equivalent_width`.
* ``fwhm_kms`` is ``c * fwhm / center`` (the same to first order for wavelength and frequency axes).
* Uncertainties come from the covariance of the fit: the inverse of J^T J over the full
  Jacobian (`zline.physics._fitmodel.covariance`), scaled by the flux errors of the spectrum.
  Only when the spectrum carries no uncertainty is it scaled by the reduced chi-square
  (``errors_from == "scatter"``).  A parameter the data do not constrain (a singular normal
  matrix, a centre at the edge of its search range, a width at its ceiling) makes the line
  *not measured* (``measured`` False, ``reason`` says why) instead of giving it a tiny error.
* Widths are bounded: the FWHM floor is the spectral resolution (`resolution_fwhm`: the
  ``resolution`` entry of ``spectrum.meta["zline"]`` when the reader found one, else
  `SAMPLING_FWHM_PIXELS` pixels); the ceiling depends on the line kind (`WIDTH_CEILING`).  A
  width that settles on the floor is held there (the line is unresolved) and noted.
* Detection is ``|S/N| >= DETECTION_SNR`` with the sign the line's ``kind`` expects (emission
  and broad lines positive, absorption negative, ``"any"`` either).  A line not detected gets
  an upper limit on the size of its flux: ``max(s F, 0) + UPPER_LIMIT_SIGMA * sigma_F`` with
  ``s`` the expected sign and F, sigma_F from a fit with the profile held at its expected
  centre and width; it holds at >= 99.87 % (one-sided 3 sigma) for any true flux >= 0.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import astropy.units as u
import numpy as np
from astropy.constants import c as _c
from astropy.nddata import StdDevUncertainty
from scipy.optimize import least_squares

from zline.physics._threads import one_blas_thread

__all__ = ["LineFit", "Component", "fit_line", "resolution_fwhm", "PROFILES",
           "KINDS", "DETECTION_SNR", "UPPER_LIMIT_SIGMA", "WIDTH_CEILING", "SAMPLING_FWHM_PIXELS"]

PROFILES = {
    "gaussian": "Gaussian, parameters centre, sigma and integrated flux",
    "voigt": "Voigt (Gaussian sigma, Lorentzian half width gamma), integrated flux",
}
#: Signal-to-noise ratio below which a line counts as not detected and gets an upper limit.
DETECTION_SNR = 3.0
#: Upper limits are ``max(s F, 0) + UPPER_LIMIT_SIGMA * sigma_F``: one-sided 99.87 % confidence.
UPPER_LIMIT_SIGMA = 3.0
#: Line kinds: the sign detection expects (+1, -1 or 0 for either).
KINDS = {"emission": 1, "broad": 1, "absorption": -1, "any": 0}
#: FWHM ceiling by line kind (common practice: narrow nebular lines of galaxies stay below
#: ~1500 km/s, stellar absorption features of galaxies below ~3000 km/s, quasar broad lines reach
#: ~10 000 km/s); ``"any"``: the fit window.
WIDTH_CEILING = {"emission": 1500 * u.km / u.s, "absorption": 3000 * u.km / u.s,
                 "broad": 20000 * u.km / u.s, "any": None}
#: FWHM floor in pixels when the spectrum states no resolution (a spectrum is sampled with about
#: two pixels per resolution element, common practice; 1.5 leaves room for slightly
#: under-sampled data).
SAMPLING_FWHM_PIXELS = 1.5

_C_KMS = _c.to_value(u.km / u.s)


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
        Equivalent width ``-flux / continuum(center)``; positive for absorption (as specutils).
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
        Upper limit on the size of the flux when the line is not detected (see the module
        docstring), else None.
    upper_limit_sigma : `~astropy.units.Quantity` or None
        sigma_F of the fixed-profile fit behind ``upper_limit``.
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
    kind : str
        One of `KINDS`: the sign `detected` expects.
    measured : bool
        False when a parameter of the line is not constrained by the data (see ``reason``).
    reason : str
        Why the line is not measured, or a note (e.g. the width held at the resolution floor).
    fwhm_floor : `~astropy.units.Quantity` or None
        The FWHM floor used (the resolution), in the spectral unit.
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
    kind: str = "any"
    measured: bool = True
    reason: str = ""
    fwhm_floor: u.Quantity | None = None
    upper_limit_sigma: u.Quantity | None = None
    _model: Any = field(default=None, repr=False, compare=False)

    @property
    def detected(self) -> bool:
        """True when measured and ``|snr| >= DETECTION_SNR`` with the sign ``kind`` expects."""
        if not (self.measured and np.isfinite(self.snr)):
            return False
        sign = KINDS.get(self.kind, 0)
        return bool((abs(self.snr) if sign == 0 else sign * self.snr) >= DETECTION_SNR)

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
                    "fwhm_kms_err", "ew", "ew_err", "continuum", "continuum_err", "upper_limit",
                    "upper_limit_sigma", "fwhm_floor"):
            q = getattr(self, key)
            out[key] = None if q is None else {"value": float(q.value), "unit": q.unit.to_string()}
        out.update(snr=float(self.snr), chi2_dof=float(self.chi2_dof), dof=int(self.dof),
                   success=bool(self.success), message=str(self.message), label=self.label,
                   profile=self.profile, errors_from=self.errors_from, n_pixels=int(self.n_pixels),
                   kind=self.kind, measured=bool(self.measured), reason=self.reason,
                   detected=self.detected)
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
        with np.errstate(divide="ignore", invalid="ignore"):  # zero inverse variance: inf, dropped
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
# resolution and components


def resolution_fwhm(spectrum, position):
    """Instrumental FWHM at ``position``: the FWHM floor of every fit.

    Parameters
    ----------
    spectrum : `specutils.Spectrum`
        ``spectrum.meta["zline"]["resolution"]`` (a resolving power R = lambda / FWHM, plain
        number) or ``["resolution_fwhm"]`` (a Quantity: spectral width or velocity) is used when
        present; otherwise `SAMPLING_FWHM_PIXELS` times the local pixel width.
    position : `~astropy.units.Quantity`
        Spectral position (any spectral unit).

    Returns
    -------
    fwhm : `~astropy.units.Quantity`
        In the spectrum's spectral unit.
    source : str
        ``"resolving power"``, ``"resolution FWHM"`` or ``"sampling"``.
    """
    axis = u.Quantity(spectrum.spectral_axis)
    sunit = axis.unit
    x = _as_spectral(position, sunit, "position", "resolution")
    zmeta = spectrum.meta.get("zline", {}) if hasattr(getattr(spectrum, "meta", None), "get") else {}
    res = zmeta.get("resolution") if hasattr(zmeta, "get") else None
    width = zmeta.get("resolution_fwhm") if hasattr(zmeta, "get") else None
    if isinstance(width, u.Quantity):
        return _as_width(width, x, sunit, "resolution_fwhm", "resolution") * sunit, \
            "resolution FWHM"
    if res is not None and not isinstance(res, u.Quantity) and np.isfinite(res) and res > 0:
        return abs(x) / float(res) * sunit, "resolving power"
    xv = np.asarray(axis.value, dtype=float)
    xv = np.sort(xv[np.isfinite(xv)])
    k = int(np.clip(np.searchsorted(xv, x), 1, xv.size - 1))
    lo, hi = max(k - 5, 0), min(k + 5, xv.size - 1)
    dx = float(np.median(np.diff(xv[lo:hi + 1])))
    return SAMPLING_FWHM_PIXELS * dx * sunit, "sampling"


@dataclass
class Component:
    """One line of a `fit_group` model.

    Attributes
    ----------
    label : str
        Name of the line.
    position : `~astropy.units.Quantity`
        Expected observed position (start value; the fixed centre for ``centre="fixed"``).
    centre : str
        ``"shared"`` (moves with the other shared components at their rest ratios, one shift),
        ``"free"`` (its own centre within ``position +- centre_range``), ``"fixed"`` or
        ``"follow"`` (the centre of component ``follows`` times their rest ratio).
    rest : `~astropy.units.Quantity` or None
        Rest position (only the ratios between shared components matter); default ``position``.
    centre_range : `~astropy.units.Quantity` or None
        Half range of a free centre (spectral width or velocity); default: the whole window.
    width_group : int
        Components of one group share one velocity width.
    fwhm : `~astropy.units.Quantity` or None
        Start FWHM (spectral width or velocity); default 4 pixels, at least the floor.
    fix_width : bool
        Hold the group's width at ``fwhm`` (set on the group's first component).
    kind : str
        One of `KINDS` (expected sign and width ceiling).
    follows : int or None
        For ``centre="follow"``: index of the component whose centre this one follows.
    """

    label: str
    position: u.Quantity
    centre: str = "shared"
    rest: u.Quantity | None = None
    centre_range: u.Quantity | None = None
    width_group: int = 0
    fwhm: u.Quantity | None = None
    fix_width: bool = False
    kind: str = "any"
    follows: int | None = None


# --------------------------------------------------------------------------------------------
# public: one line or a blend


def _spectrum_arrays(spectrum, who="fit_line"):
    flux_q = getattr(spectrum, "flux", None)
    axis_q = getattr(spectrum, "spectral_axis", None)
    if not isinstance(flux_q, u.Quantity) or axis_q is None:
        raise TypeError(f"{who}: 'spectrum' must be a specutils.Spectrum, got "
                        f"{type(spectrum).__name__}")
    if flux_q.ndim != 1:
        raise ValueError(f"{who}: 'spectrum' must be one-dimensional, got flux shape "
                         f"{flux_q.shape}")
    return (np.asarray(u.Quantity(axis_q).value, dtype=float), np.asarray(flux_q.value, float),
            u.Quantity(axis_q).unit, flux_q.unit)




def _components_of(center, components, label, sunit):
    """(labels, rest values or None) of a fit_line call."""
    if components is None:
        return [label], None
    if isinstance(components, dict):
        labels = [str(k) for k in components]
        rest = [_as_spectral(v, sunit, "components", label) for v in components.values()]
    else:
        rest = [_as_spectral(v, sunit, "components", label) for v in np.atleast_1d(components)]
        labels = [label] + [f"{label} +{k}" for k in range(1, len(rest))]
    if len(rest) < 1:
        raise ValueError(f"fit_line: 'components' for line {label!r} is empty")
    return labels, rest


def _ties(tie_ratio, labels):
    ratios = {}
    n = len(labels)
    for key, r in (tie_ratio or {}).items():
        try:
            i, j = key
        except (TypeError, ValueError):
            raise ValueError(f"fit_line: 'tie_ratio' keys must be (i, j) pairs, got {key!r}") from None
        ii = [labels.index(k) if isinstance(k, str) and k in labels else k for k in (i, j)]
        for k, orig in zip(ii, (i, j)):
            if not isinstance(k, (int, np.integer)) or not 0 <= k < n:
                raise ValueError(f"fit_line: 'tie_ratio' names component {orig!r}, which is not "
                                 f"one of {labels} or an index 0..{n - 1}")
        ratios[int(ii[0])] = (int(ii[1]), float(r))
    for i, (j, _) in ratios.items():
        if j in ratios or i == j:
            raise ValueError(f"fit_line: 'tie_ratio' ties component {labels[i]!r} to "
                             f"{labels[j]!r}, which is itself tied; tie to a free component")
    return ratios


def _default_window(window, mus, fw, dx, sunit, label):
    span_lo, span_hi = float(min(mus)), float(max(mus))
    if window is None:
        half = max(8.0 * fw, 20.0 * dx)
        return span_lo - half, span_hi + half
    if not isinstance(window, u.Quantity):
        raise TypeError(f"fit_line: 'window' for line {label!r} must be a Quantity (a "
                        f"[low, high] pair or one full width), got {window!r}")
    if window.isscalar or window.size == 1:
        half = 0.5 * _as_width(window.reshape(()), mus[0], sunit, "window", label)
        return span_lo - half, span_hi + half
    if window.size == 2:
        a, b = _as_spectral(window, sunit, "window", label)
        return min(a, b), max(a, b)
    raise ValueError(f"fit_line: 'window' for line {label!r} must be one width or a "
                     f"[low, high] pair, got {window.size} values")


@one_blas_thread
def fit_line(spectrum, center, window=None, continuum_order=1, profile="gaussian",
             components=None, tie_width=False, tie_ratio=None, exclude=None, *,
             fwhm=None, tie_center=True, label=None, kind="any", fwhm_min=None,
             fwhm_max=None):
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
    kind : str
        One of `KINDS`: the sign a detection needs and the width ceiling (`WIDTH_CEILING`);
        ``"any"`` (default) accepts either sign, with the window as the ceiling.
    fwhm_min, fwhm_max : `~astropy.units.Quantity`, optional
        FWHM floor and ceiling (spectral width or km/s); default `resolution_fwhm` and the
        kind's ceiling.

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
    x_all, _, sunit, _ = _spectrum_arrays(spectrum)
    label = label if label is not None else (
        f"{center:.6g}" if isinstance(center, u.Quantity) else str(center))
    mu_first = _as_spectral(center, sunit, "center", label)
    if kind not in KINDS:
        raise ValueError(f"fit_line: unknown kind {kind!r}; options: {', '.join(sorted(KINDS))}")
    labels, rest = _components_of(center, components, label, sunit)
    ratios = _ties(tie_ratio, labels)
    mus = [mu_first] if rest is None else [mu_first * r / rest[0] for r in rest]
    dx = float(np.median(np.abs(np.diff(x_all)))) if x_all.size > 1 else 0.0
    fw = _as_width(fwhm, mu_first, sunit, "fwhm", label) if fwhm is not None else 4.0 * dx
    if not fw > 0:
        raise ValueError(f"fit_line: FWHM guess for line {label!r} must be positive, got {fwhm!r}")
    lo, hi = _default_window(window, mus, fw, dx, sunit, label)
    mode = "shared" if (tie_center or len(mus) == 1) else "free"
    comps = [Component(label=lab, position=m * sunit, centre=mode,
                       rest=None if rest is None else rest[k] * sunit,
                       width_group=0 if tie_width else k, fwhm=fw * sunit, kind=kind)
             for k, (lab, m) in enumerate(zip(labels, mus))]
    from zline.physics.fitgroup import fit_group

    fits = fit_group(spectrum, comps, u.Quantity([lo, hi], sunit),
                     continuum_order=continuum_order, profile=profile, ratios=ratios,
                     exclude=exclude, fwhm_min=fwhm_min, fwhm_max=fwhm_max, label=label)
    primary = fits[0]
    primary.components = tuple(fits)
    return primary
