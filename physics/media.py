"""Vacuum <-> air wavelength conversion for standard air.

Four published dispersion formulas are offered (keys of `AIR_FORMULAS`); each gives the refractive
index ``n`` of air as a function of the *vacuum* wavenumber ``sigma = 1 / lambda_vac`` [um^-1]:

``"morton2000"`` (default)
    Morton 2000, ApJS 130, 403, eq. 8: ``n - 1 = 8.34254e-5 + 2.406147e-2 / (130 - s2)
    + 1.5998e-4 / (38.9 - s2)`` with ``s2 = sigma**2``. Dry air, 15 C, 101 325 Pa.
``"edlen1966"``
    Edlen 1966, Metrologia 2, 71: ``(n - 1) 1e8 = 8342.13 + 2406030 / (130 - s2)
    + 15997 / (38.9 - s2)``. Dry air with 300 ppm CO2, 15 C, 101 325 Pa.
``"ciddor1996"``
    Ciddor 1996, Appl. Opt. 35, 1566, eq. 1, the published dispersion of standard air (dry,
    450 ppm CO2, 15 C, 101 325 Pa): ``(n - 1) 1e8 = 5792105 / (238.0185 - s2)
    + 167917 / (57.362 - s2)``.
``"greisen2006"``
    Greisen et al. 2006, A&A 446, 747, eq. 65: ``n - 1 = 1e-6 (287.6155 + 1.62887 s2
    + 0.01360 s2**2)``. Air at **0 C**, 101 325 Pa: differs from the 15 C formulas by ~0.1 A in
    the optical; never mix the two kinds in one line list.

Convention below 2000 A
-----------------------
Spectroscopists quote wavelengths below 2000 A in vacuum, whatever the medium of the rest of the
list (common practice). `vacuum_to_air` therefore returns vacuum wavelengths below 2000 A
**unchanged**, and `air_to_vacuum` returns unchanged every input below the air image of 2000 A
(vacuum), so that the two functions stay exact inverses on both sides of the cut. Such values,
and values beyond the formula's upper limit (where the formula is still applied, as an
extrapolation), raise a `MediumRangeWarning`.
"""

import warnings

import astropy.units as u
import numpy as np

__all__ = [
    "AIR_FORMULAS",
    "UV_VACUUM_LIMIT",
    "MediumRangeWarning",
    "refractive_index",
    "vacuum_to_air",
    "air_to_vacuum",
]

#: Vacuum wavelength below which lines are quoted in vacuum by convention (common practice).
UV_VACUUM_LIMIT = 2000.0 * u.AA

#: Formula name -> description with the wavelength range in which it is valid.
AIR_FORMULAS = {
    "morton2000": "Morton 2000 (ApJS 130, 403, eq. 8): dry air, 15 C, 101325 Pa; "
    "valid 2000 A - 2 um",
    "edlen1966": "Edlen 1966 (Metrologia 2, 71): dry air, 300 ppm CO2, 15 C, 101325 Pa; "
    "valid 2000 A - 2 um",
    "ciddor1996": "Ciddor 1996 (Appl. Opt. 35, 1566, eq. 1): standard dry air, 450 ppm CO2, "
    "15 C, 101325 Pa; valid 3000 A - 1.69 um",
    "greisen2006": "Greisen et al. 2006 (A&A 446, 747, eq. 65): air at 0 C, 101325 Pa; "
    "valid 2000 A - 2 um",
}

# Vacuum wavelength range [A] for each formula, as stated in the descriptions above.
_VALID_RANGE_AA = {
    "morton2000": (2000.0, 20000.0),
    "edlen1966": (2000.0, 20000.0),
    "ciddor1996": (3000.0, 16900.0),
    "greisen2006": (2000.0, 20000.0),
}

_UV_LIMIT_AA = UV_VACUUM_LIMIT.to_value(u.AA)


class MediumRangeWarning(UserWarning):
    """A wavelength lies outside the range in which an air formula is valid."""


def _check_formula(formula):
    if formula not in AIR_FORMULAS:
        allowed = ", ".join(f"'{name}'" for name in AIR_FORMULAS)
        raise ValueError(
            f"Unknown air formula {formula!r} for argument 'formula'; expected one of {allowed}."
        )
    return formula


# n - 1 = c0 + k1 / (a1 - s2) + k2 / (a2 - s2) with s2 = sigma**2 [um^-2], or for Greisen
# n - 1 = p0 + p1 s2 + p2 s2**2 (coefficients from the papers named in the module docstring).
_POLES = {
    "morton2000": (8.34254e-5, 2.406147e-2, 130.0, 1.5998e-4, 38.9),
    "edlen1966": (8.34213e-5, 2.406030e-2, 130.0, 1.5997e-4, 38.9),
    "ciddor1996": (0.0, 5.792105e-2, 238.0185, 1.67917e-3, 57.362),
}
_GREISEN = (287.6155e-6, 1.62887e-6, 0.01360e-6)


def _n_minus_1(s2, formula, derivative=False):
    """``n - 1`` (and ``d(n - 1)/d(s2)`` if asked) for ``s2 = sigma**2`` in um^-2."""
    if formula == "greisen2006":
        p0, p1, p2 = _GREISEN
        nm1 = p0 + s2 * (p1 + p2 * s2)
        return (nm1, p1 + 2 * p2 * s2) if derivative else nm1
    c0, k1, a1, k2, a2 = _POLES[formula]
    t1 = k1 / (a1 - s2)
    t2 = k2 / (a2 - s2)
    nm1 = c0 + t1 + t2
    return (nm1, t1 * t1 / k1 + t2 * t2 / k2) if derivative else nm1


def _index_angstrom(vac_aa, formula):
    s2 = 1e8 / np.square(np.asarray(vac_aa, dtype=float))
    return 1.0 + _n_minus_1(s2, formula)


def _vac_to_air_angstrom(vac_aa, formula="morton2000"):
    """Vacuum -> air, float array in A, no checks or warnings (hot path).

    Values below 2000 A are returned unchanged (the UV vacuum convention).
    """
    vac = np.asarray(vac_aa, dtype=float)
    keep = vac < _UV_LIMIT_AA
    if not keep.any():
        return vac / _index_angstrom(vac, formula)
    with np.errstate(divide="ignore", invalid="ignore"):
        air = vac / _index_angstrom(vac, formula)
    return np.where(keep, vac, air)


def _air_to_vac_angstrom(air_aa, formula="morton2000"):
    """Air -> vacuum, float array in A, Newton iteration, no checks or warnings (hot path).

    Solves ``lambda_vac / n(lambda_vac) = lambda_air``. Values below the air image of 2000 A are
    returned unchanged (the UV vacuum convention), so this is the exact inverse of
    `_vac_to_air_angstrom` outside [air(2000 A), 2000 A).
    """
    air = np.asarray(air_aa, dtype=float)
    keep = air < _uv_limit_air(formula)
    any_keep = keep.any()
    safe = np.where(keep, _UV_LIMIT_AA, air) if any_keep else air
    vac = safe * _index_angstrom(safe, formula)  # first guess, ~1e-8 relative
    for _ in range(8):
        s2 = 1e8 / (vac * vac)
        nm1, dnm1 = _n_minus_1(s2, formula, derivative=True)
        n = 1.0 + nm1
        # g(vac) = vac / n - air; dn/dvac = dnm1 * ds2/dvac = -2 dnm1 s2 / vac
        # g'(vac) = 1/n - vac dn/dvac / n**2 = (n + 2 s2 dnm1) / n**2
        step = (vac - safe * n) * n / (n + 2.0 * s2 * dnm1)
        vac = vac - step
        if np.max(np.abs(step) / vac, initial=0.0) <= 1e-15:
            break
    return np.where(keep, air, vac) if any_keep else vac


_UV_LIMIT_AIR_CACHE = {}


def _uv_limit_air(formula):
    if formula not in _UV_LIMIT_AIR_CACHE:
        _UV_LIMIT_AIR_CACHE[formula] = float(
            _UV_LIMIT_AA / _index_angstrom(_UV_LIMIT_AA, formula))
    return _UV_LIMIT_AIR_CACHE[formula]


def _as_angstrom(value, argument):
    if not isinstance(value, u.Quantity):
        raise TypeError(
            f"Argument '{argument}' must be an astropy Quantity with a length unit "
            f"(e.g. 6563 * u.AA); got {type(value).__name__} {value!r:.60}.")
    if not value.unit.is_equivalent(u.AA):
        raise u.UnitTypeError(
            f"Argument '{argument}' must have a length unit (e.g. Angstrom, nm, um); "
            f"got unit '{value.unit}' ({value.unit.physical_type}). Convert frequencies or "
            f"energies to vacuum wavelengths first.")
    aa = value.to_value(u.AA)
    if np.any(aa <= 0):
        raise ValueError(
            f"Argument '{argument}' must hold positive wavelengths; got minimum "
            f"{np.nanmin(aa):g} Angstrom.")
    return aa


def _warn_range(vac_aa, formula, medium_in):
    lo, hi = _VALID_RANGE_AA[formula]
    vac = np.asarray(vac_aa, dtype=float)
    if vac.size == 0 or (vac.min() >= lo and vac.max() <= hi):
        return
    n_uv = int(np.count_nonzero(vac < _UV_LIMIT_AA))
    if n_uv:
        warnings.warn(
            f"{n_uv} {medium_in} wavelength(s) below 2000 A were returned unchanged: wavelengths "
            f"below 2000 A are quoted in vacuum by convention. Convert only lines above 2000 A, "
            f"or keep UV lines in vacuum.", MediumRangeWarning, stacklevel=3)
    lo, hi = lo * (1 - 1e-12), hi * (1 + 1e-12)  # ignore float rounding at the limits
    outside = (vac >= _UV_LIMIT_AA) & ((vac < lo) | (vac > hi))
    n_out = int(np.count_nonzero(outside))
    if n_out:
        warnings.warn(
            f"{n_out} wavelength(s) lie outside the valid range of '{formula}' "
            f"({AIR_FORMULAS[formula].rsplit('valid ', 1)[-1]}); the formula was extrapolated. "
            f"Choose a formula valid there (see AIR_FORMULAS) or treat these values with care.",
            MediumRangeWarning, stacklevel=3)


def refractive_index(vacuum_wavelength, formula="morton2000"):
    """Refractive index of air at a vacuum wavelength.

    Parameters
    ----------
    vacuum_wavelength : `~astropy.units.Quantity` ['length']
        Vacuum wavelength(s).
    formula : str
        One of `AIR_FORMULAS`.

    Returns
    -------
    n : float or `numpy.ndarray`
        Refractive index (no UV cut is applied here; a `MediumRangeWarning` is raised outside the
        formula's valid range).
    """
    _check_formula(formula)
    vac = _as_angstrom(vacuum_wavelength, "vacuum_wavelength")
    lo, hi = _VALID_RANGE_AA[formula]
    bad = int(np.count_nonzero((vac < lo * (1 - 1e-12)) | (vac > hi * (1 + 1e-12))))
    if bad:
        warnings.warn(
            f"{bad} vacuum wavelength(s) lie outside the valid range of '{formula}' "
            f"({lo:g} - {hi:g} A); the formula was extrapolated.", MediumRangeWarning,
            stacklevel=2)
    with np.errstate(divide="ignore", invalid="ignore"):
        n = _index_angstrom(vac, formula)
    return n if np.ndim(n) else float(n)


def vacuum_to_air(wavelength, formula="morton2000"):
    """Convert vacuum wavelengths to standard-air wavelengths.

    Parameters
    ----------
    wavelength : `~astropy.units.Quantity` ['length']
        Vacuum wavelength(s), any length unit.
    formula : str
        One of `AIR_FORMULAS` (default ``"morton2000"``).

    Returns
    -------
    `~astropy.units.Quantity` ['length']
        Air wavelength(s) in the unit of ``wavelength``. Values below 2000 A are returned
        unchanged (UV lines are quoted in vacuum) with a `MediumRangeWarning`.

    Raises
    ------
    TypeError
        If ``wavelength`` is not a Quantity.
    astropy.units.UnitTypeError
        If ``wavelength`` is not a length.
    ValueError
        If ``formula`` is unknown.

    Examples
    --------
    >>> import astropy.units as u
    >>> vacuum_to_air(633.0 * u.nm, formula="ciddor1996")  # doctest: +FLOAT_CMP
    <Quantity 632.82500477 nm>
    """
    _check_formula(formula)
    vac = _as_angstrom(wavelength, "wavelength")
    _warn_range(vac, formula, "vacuum")
    air = _vac_to_air_angstrom(vac, formula)
    return (air * u.AA).to(wavelength.unit)


def air_to_vacuum(wavelength, formula="morton2000"):
    """Convert standard-air wavelengths to vacuum wavelengths.

    The formulas give ``n`` as a function of the vacuum wavelength, so the inverse is found by
    Newton iteration on ``lambda_vac / n(lambda_vac) = lambda_air``; it converges to the float64
    limit: within 4e-12 A of an extended-precision root between 2000 A and 2 um (measured in the
    tests), i.e. far better than the 1e-6 A required of it.

    Parameters
    ----------
    wavelength : `~astropy.units.Quantity` ['length']
        Air wavelength(s), any length unit.
    formula : str
        One of `AIR_FORMULAS` (default ``"morton2000"``).

    Returns
    -------
    `~astropy.units.Quantity` ['length']
        Vacuum wavelength(s) in the unit of ``wavelength``. Inputs below the air image of
        2000 A (vacuum) are returned unchanged with a `MediumRangeWarning`.

    Examples
    --------
    >>> import astropy.units as u
    >>> air_to_vacuum(4861.363 * u.AA, formula="ciddor1996")  # doctest: +FLOAT_CMP
    <Quantity 4862.72103112 Angstrom>
    """
    _check_formula(formula)
    air = _as_angstrom(wavelength, "wavelength")
    vac = _air_to_vac_angstrom(air, formula)
    uv = air < _uv_limit_air(formula)
    _warn_range(np.where(uv, -1.0, vac) if uv.any() else vac, formula, "air")
    return (vac * u.AA).to(wavelength.unit)
