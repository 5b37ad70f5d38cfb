"""Line identifications ("locks") and the redshift / velocity that they imply.

Each lock pairs a rest position with a measured observed position and its error.  The redshift
is estimated by weighted least squares in ``y = ln(1 + z)``: every lock gives
``y_i = ln(lambda_obs / lambda_rest)`` (positions are first converted to wavelength with
`astropy.units.spectral`, so frequency and energy locks work the same way) with
``sigma_i = sigma_obs / obs``; the estimate is the weighted mean of the ``y_i``.

Outliers are *flagged*, never silently dropped: a robust first pass (weighted median) and then
iterated weighted means flag locks with ``|y_i - y_hat| / sigma_i > clip``.  By default the
flagged locks are left out of the final estimate (``use_outliers=False``), and the solution
using every lock is reported alongside (``z_all``, ``z_all_err``, ``chi2_dof_all``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, fields
from typing import Iterable, Iterator

import astropy.units as u
import numpy as np
from astropy.constants import c as _c

from zline.physics.fitting import LineFit, fit_line

__all__ = ["Lock", "Identifications", "RedshiftSolution", "solve_redshift", "fit_line",
           "CONVENTIONS", "MEDIA", "SOLVE_FOR"]

_C_KMS = _c.to_value(u.km / u.s)

CONVENTIONS = {
    "optical": "v = c z (z from wavelengths)",
    "radio": "v = c (1 - nu_obs / nu_rest) = c (1 - lambda_rest / lambda_obs)",
    "relativistic": "v = c ((1+z)^2 - 1) / ((1+z)^2 + 1)",
}
MEDIA = {"vacuum": "positions in vacuum", "air": "positions in standard air (converted to vacuum)"}
SOLVE_FOR = {"z": "redshift is the primary result", "velocity": "velocity is the primary result"}


def _check_quantity(value, name, label):
    if not isinstance(value, u.Quantity):
        raise TypeError(f"Lock {label!r}: {name!r} must be an astropy Quantity with a spectral "
                        f"unit (e.g. 6563*u.AA), got {value!r}")
    if not value.unit.is_equivalent(u.AA, equivalencies=u.spectral()):
        raise u.UnitsError(f"Lock {label!r}: {name!r} has unit {value.unit!s}, expected a "
                           f"spectral unit (length, frequency, energy or wavenumber)")
    if not value.isscalar:
        raise ValueError(f"Lock {label!r}: {name!r} must be a scalar Quantity, got shape "
                         f"{value.shape}")


@dataclass
class Lock:
    """One line identification.

    Parameters
    ----------
    label : str
        Name of the line (e.g. ``"H I 3-2"``).
    rest : `~astropy.units.Quantity`
        Rest position in any spectral unit, in ``medium``.
    observed : `~astropy.units.Quantity`
        Observed position (same medium as ``rest``).
    observed_err : `~astropy.units.Quantity`
        1-sigma error of ``observed`` (a spectral unit convertible to ``observed``'s, or km/s).
    species : str
        Carrier (e.g. ``"H I"``).
    note : str
        Free text.
    medium : str
        ``"vacuum"`` or ``"air"``: the medium of both ``rest`` and ``observed``.
    fit : LineFit, optional
        The line fit that gave ``observed``.
    """

    label: str
    rest: u.Quantity
    observed: u.Quantity
    observed_err: u.Quantity
    species: str = ""
    note: str = ""
    medium: str = "vacuum"
    fit: LineFit | None = field(default=None, compare=False)

    def __post_init__(self):
        if not isinstance(self.label, str) or not self.label:
            raise ValueError(f"Lock: 'label' must be a non-empty string, got {self.label!r}")
        _check_quantity(self.rest, "rest", self.label)
        _check_quantity(self.observed, "observed", self.label)
        if not isinstance(self.observed_err, u.Quantity):
            raise TypeError(f"Lock {self.label!r}: 'observed_err' must be a Quantity (spectral "
                            f"unit of 'observed', or km/s), got {self.observed_err!r}")
        if self.medium not in MEDIA:
            raise ValueError(f"Lock {self.label!r}: unknown medium {self.medium!r}; options: "
                             f"{', '.join(sorted(MEDIA))}")
        rel = self.relative_error
        if not (np.isfinite(rel) and rel > 0):
            raise ValueError(f"Lock {self.label!r}: 'observed_err' must be positive and finite, "
                             f"got {self.observed_err!r}")

    @property
    def relative_error(self) -> float:
        """``observed_err / observed`` (dimensionless; the same in every spectral unit)."""
        err = self.observed_err
        if err.unit.physical_type == "speed":
            return abs(err.to_value(u.km / u.s)) / _C_KMS
        try:
            return abs(err.to_value(self.observed.unit) / self.observed.value)
        except u.UnitConversionError as exc:
            raise u.UnitsError(f"Lock {self.label!r}: 'observed_err' unit {err.unit!s} does not "
                               f"match 'observed' unit {self.observed.unit!s} (give the error in "
                               f"the same unit or in km/s)") from exc

    def vacuum_wavelengths(self, air_formula="morton2000"):
        """(rest, observed) as vacuum wavelengths in Angstrom (floats)."""
        rest = self.rest.to(u.AA, equivalencies=u.spectral())
        obs = self.observed.to(u.AA, equivalencies=u.spectral())
        if self.medium == "air":
            rest, obs = _air_to_vacuum(rest, air_formula), _air_to_vacuum(obs, air_formula)
        return float(rest.value), float(obs.value)

    @classmethod
    def from_fit(cls, label, rest, fit: LineFit, species="", note="", medium="vacuum") -> "Lock":
        """Lock a line at the centre measured by `fit_line` (observed = fit.center +- center_err).

        Raises ValueError when the fit failed or gave no finite positive centre error.
        """
        if not isinstance(fit, LineFit):
            raise TypeError(f"Lock.from_fit {label!r}: 'fit' must be a LineFit, got "
                            f"{type(fit).__name__}")
        if not fit.success or not (np.isfinite(fit.center_err.value) and fit.center_err.value > 0):
            raise ValueError(f"Lock.from_fit {label!r}: the fit has no usable centre "
                             f"(success={fit.success}, center_err={fit.center_err}); "
                             f"refit before locking")
        return cls(label, rest, fit.center, fit.center_err, species=species, note=note,
                   medium=medium, fit=fit)

    def to_dict(self) -> dict:
        """Plain-JSON dict (values with unit strings)."""
        def q(v):
            return {"value": float(v.value), "unit": v.unit.to_string()}
        return {"label": self.label, "rest": q(self.rest), "observed": q(self.observed),
                "observed_err": q(self.observed_err), "species": self.species,
                "note": self.note, "medium": self.medium,
                "fit": None if self.fit is None else self.fit.to_dict()}

    @classmethod
    def from_dict(cls, data: dict) -> "Lock":
        """Inverse of `to_dict`.  A stored ``fit`` is measurement output and is not rebuilt."""
        def q(key):
            item = data.get(key)
            if not isinstance(item, dict) or "value" not in item or "unit" not in item:
                raise ValueError(f"Lock.from_dict: key {key!r} must be a dict with 'value' and "
                                 f"'unit', got {item!r}")
            return u.Quantity(float(item["value"]), u.Unit(item["unit"]))
        if "label" not in data:
            raise ValueError(f"Lock.from_dict: missing key 'label' in {sorted(data)}")
        return cls(label=str(data["label"]), rest=q("rest"), observed=q("observed"),
                   observed_err=q("observed_err"), species=str(data.get("species", "")),
                   note=str(data.get("note", "")), medium=str(data.get("medium", "vacuum")))


def _air_to_vacuum(wavelength, formula):
    try:
        from zline.physics.media import air_to_vacuum
    except ImportError:  # media module not available: the same formulas in specutils
        from specutils.utils.wcs_utils import air_to_vac
        methods = {"morton2000": "Morton2000", "edlen1966": "Edlen1966",
                   "ciddor1996": "Ciddor1996", "greisen2006": "Greisen2006"}
        if formula not in methods:
            raise ValueError(f"unknown air_formula {formula!r}; options: "
                             f"{', '.join(sorted(methods))}") from None
        return air_to_vac(wavelength, method=methods[formula])
    return air_to_vacuum(wavelength, formula=formula)


class Identifications:
    """An ordered collection of `Lock` objects with unique labels."""

    def __init__(self, locks: Iterable[Lock] = ()):
        self._locks: list[Lock] = []
        for lock in locks:
            self.add(lock)

    def add(self, lock: Lock, replace: bool = False) -> Lock:
        """Add a lock; a lock with the same label raises ValueError unless ``replace=True``."""
        if not isinstance(lock, Lock):
            raise TypeError(f"Identifications.add: expected a Lock, got {type(lock).__name__}")
        for i, old in enumerate(self._locks):
            if old.label == lock.label:
                if not replace:
                    raise ValueError(f"Identifications.add: a lock labelled {lock.label!r} "
                                     f"exists; pass replace=True to replace it")
                self._locks[i] = lock
                return lock
        self._locks.append(lock)
        return lock

    def remove(self, key: str | int) -> Lock:
        """Remove and return the lock with this label (str) or at this index (int)."""
        if isinstance(key, (int, np.integer)) and not isinstance(key, bool):
            if not -len(self._locks) <= key < len(self._locks):
                raise IndexError(f"Identifications.remove: index {key} out of range for "
                                 f"{len(self._locks)} locks")
            return self._locks.pop(key)
        for i, lock in enumerate(self._locks):
            if lock.label == key:
                return self._locks.pop(i)
        raise KeyError(f"Identifications.remove: no lock labelled {key!r}; labels: "
                       f"{self.labels}")

    def __getitem__(self, key):
        if isinstance(key, str):
            for lock in self._locks:
                if lock.label == key:
                    return lock
            raise KeyError(f"no lock labelled {key!r}; labels: {self.labels}")
        return self._locks[key]

    def __iter__(self) -> Iterator[Lock]:
        return iter(list(self._locks))

    def __len__(self) -> int:
        return len(self._locks)

    def __contains__(self, label) -> bool:
        return any(lock.label == label for lock in self._locks)

    @property
    def labels(self) -> list[str]:
        """Labels in order."""
        return [lock.label for lock in self._locks]

    def solve(self, **kwargs) -> "RedshiftSolution":
        """`solve_redshift` on these locks."""
        return solve_redshift(self._locks, **kwargs)

    def to_dicts(self) -> list[dict]:
        """Plain-JSON list of dicts."""
        return [lock.to_dict() for lock in self._locks]

    @classmethod
    def from_dicts(cls, items: Iterable[dict]) -> "Identifications":
        """Inverse of `to_dicts`."""
        return cls(Lock.from_dict(item) for item in items)


@dataclass
class RedshiftSolution:
    """Result of `solve_redshift`.

    Attributes
    ----------
    z, z_err : float
        Redshift and its 1-sigma error (scaled by ``sqrt(chi2_dof)`` when that exceeds 1).
    velocity, velocity_err : `~astropy.units.Quantity` ['speed']
        The same shift as a velocity in ``convention``.
    chi2_dof : float
        Reduced chi-square of the locks used (nan with one lock).
    dof : int
        ``n_used - 1``.
    residuals : `~astropy.units.Quantity` ['speed']
        ``c (y_i - y_hat)`` for every lock (outliers included), km/s.
    normalized_residuals : ndarray
        ``(y_i - y_hat) / sigma_i``.
    outliers : ndarray of bool
        Flagged locks.
    n_used : int
        Number of locks in the estimate.
    convention : str
        Velocity convention.
    scaled : bool
        Whether the errors were scaled by ``sqrt(chi2_dof)``.
    solve_for : str
        ``"z"`` or ``"velocity"``.
    z_all, z_all_err, chi2_dof_all : float
        The estimate with every lock (outliers included).
    labels : list of str
        Lock labels in order.
    """

    z: float
    z_err: float
    velocity: u.Quantity
    velocity_err: u.Quantity
    chi2_dof: float
    dof: int
    residuals: u.Quantity
    normalized_residuals: np.ndarray
    outliers: np.ndarray
    n_used: int
    convention: str
    scaled: bool
    solve_for: str
    z_all: float
    z_all_err: float
    chi2_dof_all: float
    labels: list = field(default_factory=list)

    def to_dict(self) -> dict:
        """Plain-JSON dict."""
        out = {}
        for f in fields(self):
            v = getattr(self, f.name)
            if isinstance(v, u.Quantity):
                out[f.name] = {"value": v.value.tolist(), "unit": v.unit.to_string()}
            elif isinstance(v, np.ndarray):
                out[f.name] = v.tolist()
            elif isinstance(v, (float, np.floating)):
                out[f.name] = None if not np.isfinite(v) else float(v)
            else:
                out[f.name] = v
        return out


def _velocity(s, convention):
    """Velocity (km/s) and dv/dln(s) for shift factor s = 1 + z."""
    if convention == "optical":
        return _C_KMS * (s - 1.0), _C_KMS * s
    if convention == "radio":
        return _C_KMS * (1.0 - 1.0 / s), _C_KMS / s
    s2 = s * s
    return _C_KMS * (s2 - 1.0) / (s2 + 1.0), _C_KMS * 4.0 * s2 / (s2 + 1.0) ** 2


def _wmean(y, w):
    sw = float(np.sum(w))
    return float(np.sum(w * y) / sw), 1.0 / math.sqrt(sw)


def _wmedian(y, w):
    order = np.argsort(y)
    cw = np.cumsum(w[order])
    return float(y[order][np.searchsorted(cw, 0.5 * cw[-1])])


def _estimate(y, sig, use):
    w = 1.0 / sig[use] ** 2
    yhat, err = _wmean(y[use], w)
    n = int(use.sum())
    dof = n - 1
    chi2 = float(np.sum(((y[use] - yhat) / sig[use]) ** 2))
    chi2_dof = chi2 / dof if dof > 0 else float("nan")
    scaled = bool(dof > 0 and chi2_dof > 1.0)
    if scaled:
        err *= math.sqrt(chi2_dof)
    return yhat, err, chi2_dof, dof, scaled


def solve_redshift(locks, convention=None, solve_for="z", *, clip=3.0, use_outliers=False,
                   air_formula="morton2000", max_iter=10) -> RedshiftSolution:
    """Redshift (and velocity) from locked line identifications.

    Parameters
    ----------
    locks : iterable of Lock or Identifications
        At least one lock.
    convention : str, optional
        Velocity convention, one of `CONVENTIONS`.  Default: ``"radio"`` when every observed
        position is a frequency, else ``"optical"``.
    solve_for : str
        One of `SOLVE_FOR`; both z and the velocity are always reported, this names the primary
        result (``"velocity"`` suits z ~ 0 nebular and radio work).
    clip : float
        Flag locks with ``|y_i - y_hat| / sigma_i > clip``.
    use_outliers : bool
        Keep flagged locks in the estimate (they are flagged either way).
    air_formula : str
        Air-to-vacuum formula for locks with ``medium="air"``.
    max_iter : int
        Clipping iterations.

    Returns
    -------
    RedshiftSolution
    """
    locks = list(locks)
    if not locks:
        raise ValueError("solve_redshift: 'locks' is empty; lock at least one line")
    for lock in locks:
        if not isinstance(lock, Lock):
            raise TypeError(f"solve_redshift: expected Lock objects, got {type(lock).__name__}")
    if solve_for not in SOLVE_FOR:
        raise ValueError(f"solve_redshift: unknown solve_for {solve_for!r}; options: "
                         f"{', '.join(sorted(SOLVE_FOR))}")
    if convention is None:
        freq = all(lock.observed.unit.physical_type == "frequency" for lock in locks)
        convention = "radio" if freq else "optical"
    if convention not in CONVENTIONS:
        raise ValueError(f"solve_redshift: unknown convention {convention!r}; options: "
                         f"{', '.join(sorted(CONVENTIONS))}")
    pairs = np.array([lock.vacuum_wavelengths(air_formula) for lock in locks])
    y = np.log(pairs[:, 1] / pairs[:, 0])
    sig = np.array([lock.relative_error for lock in locks])
    n = y.size

    outliers = np.zeros(n, dtype=bool)
    if n >= 3:
        center = _wmedian(y, 1.0 / sig**2)
        for _ in range(max_iter):
            flags = np.abs(y - center) / sig > clip
            if (~flags).sum() < max(2, math.ceil(n / 2)):
                flags = np.zeros(n, dtype=bool)  # the errors, not a few locks, are the problem
            if np.array_equal(flags, outliers) and _ > 0:
                break
            outliers = flags
            center = _wmean(y[~outliers], 1.0 / sig[~outliers] ** 2)[0]

    use = np.ones(n, dtype=bool) if use_outliers else ~outliers
    yhat, yerr, chi2_dof, dof, scaled = _estimate(y, sig, use)
    y_all, y_all_err, chi2_all, _, _ = _estimate(y, sig, np.ones(n, dtype=bool))
    s = math.exp(yhat)
    v, dv = _velocity(s, convention)
    return RedshiftSolution(
        z=s - 1.0, z_err=s * yerr,
        velocity=v * u.km / u.s, velocity_err=abs(dv) * yerr * u.km / u.s,
        chi2_dof=chi2_dof, dof=dof, residuals=_C_KMS * (y - yhat) * u.km / u.s,
        normalized_residuals=(y - yhat) / sig, outliers=outliers, n_used=int(use.sum()),
        convention=convention, scaled=scaled, solve_for=solve_for,
        z_all=math.exp(y_all) - 1.0, z_all_err=math.exp(y_all) * y_all_err,
        chi2_dof_all=chi2_all, labels=[lock.label for lock in locks])
