"""Nebular diagnostics: Balmer decrement, extinction curve and dereddening.

* Intrinsic H I Case B ratios to Hbeta for n_e = 1e2 ... 1e6 cm^-3 and T = 5000 ... 20 000 K
  (`CASE_B_TABLE`, Storey & Hummer 1995), interpolated bilinearly in (log T, log n_e); values
  outside the table are refused.
* The extinction curve A_lambda / A_V = a(x) + b(x) / R_V, x = 1 / lambda [um^-1], built from
  the published polynomials of Cardelli, Clayton & Mathis 1989 (ApJ 345, 245), with the optical
  coefficients of O'Donnell 1994 (ApJ 422, 158) as an option (`CURVES`).
* `balmer_decrement` turns an observed Halpha / Hbeta flux ratio into E(B-V) and A_V with errors;
  `deredden` corrects fluxes.
"""

import math
from typing import NamedTuple

import astropy.units as u
import numpy as np

__all__ = ["CASE_B_TABLE", "CURVES", "CASE_B_LINES", "case_b_ratio", "extinction_curve",
           "k_lambda", "balmer_decrement", "deredden", "BalmerDecrement",
           "HALPHA_AIR", "HBETA_AIR"]

#: Case B ratios to Hbeta (Storey & Hummer 1995, MNRAS 272, 41: the H I recombination data as
#: distributed with PyNeb, file h_i_rec_SH95; values read from it, rounded to 4 decimals).  At
#: n_e = 100 cm^-3 they are Osterbrock & Ferland 2006, Table 4.4 (as quoted).  Rows: density,
#: columns: temperature.
CASE_B_TABLE = {
    "source": "Storey & Hummer 1995, MNRAS 272, 41 (Case B, H I), as distributed with PyNeb",
    "density": np.array([1e2, 1e3, 1e4, 1e5, 1e6]) * u.cm**-3,
    "temperature": np.array([5000.0, 7500.0, 10000.0, 12500.0, 15000.0, 20000.0]) * u.K,
    "Halpha": np.array([
        [3.0409, 2.9291, 2.8632, 2.8205, 2.7884, 2.7466],
        [3.0258, 2.9198, 2.8569, 2.8158, 2.7838, 2.7434],
        [3.0009, 2.9050, 2.8468, 2.8073, 2.7781, 2.7394],
        [2.9666, 2.8812, 2.8299, 2.7933, 2.7679, 2.7322],
        [2.9183, 2.8497, 2.8064, 2.7768, 2.7539, 2.7245]]),
    "Hgamma": np.array([
        [0.4584, 0.4645, 0.4683, 0.4711, 0.4729, 0.4755],
        [0.4588, 0.4648, 0.4686, 0.4713, 0.4731, 0.4755],
        [0.4600, 0.4655, 0.4691, 0.4717, 0.4733, 0.4756],
        [0.4617, 0.4665, 0.4697, 0.4720, 0.4737, 0.4758],
        [0.4648, 0.4688, 0.4715, 0.4734, 0.4747, 0.4764]]),
    "Hdelta": np.array([
        [0.2515, 0.2560, 0.2589, 0.2610, 0.2624, 0.2643],
        [0.2519, 0.2563, 0.2592, 0.2612, 0.2626, 0.2643],
        [0.2525, 0.2568, 0.2596, 0.2615, 0.2626, 0.2644],
        [0.2540, 0.2577, 0.2601, 0.2618, 0.2630, 0.2646],
        [0.2578, 0.2605, 0.2623, 0.2635, 0.2644, 0.2656]]),
}
#: Lines with tabulated ratios (to Hbeta).
CASE_B_LINES = {"Halpha": "H I 3-2", "Hbeta": "H I 4-2 (the reference, ratio 1)",
                "Hgamma": "H I 5-2", "Hdelta": "H I 6-2"}
_CASES = {"B": "optically thick in the Lyman lines (Case B)"}

#: Extinction curves by name.
CURVES = {
    "ccm89": "Cardelli, Clayton & Mathis 1989, ApJ 345, 245 (0.3 <= x <= 10 um^-1)",
    "odonnell94": "as ccm89 with the optical (1.1 <= x < 3.3 um^-1) coefficients of "
                  "O'Donnell 1994, ApJ 422, 158",
}

#: Air wavelengths used for Halpha and Hbeta on the extinction curve (common practice values).
HALPHA_AIR = 6562.80 * u.AA
HBETA_AIR = 4861.33 * u.AA

# Optical polynomials in y = x - 1.82, coefficients of y**0 ... y**n.
_CCM_OPT_A = (1.0, 0.17699, -0.50447, -0.02427, 0.72085, 0.01979, -0.77530, 0.32999)
_CCM_OPT_B = (0.0, 1.41338, 2.28305, 1.07233, -5.38434, -0.62251, 5.30260, -2.09002)
_OD_OPT_A = (1.0, 0.104, -0.609, 0.701, 1.137, -1.718, -0.827, 1.647, -0.505)
_OD_OPT_B = (0.0, 1.952, 2.908, -3.989, -7.985, 11.102, 5.491, -10.805, 3.347)


def _check_quantity(value, name, func, ptype=None):
    if not isinstance(value, u.Quantity):
        raise TypeError(f"{func}: {name!r} must be a Quantity"
                        f"{' of type ' + ptype if ptype else ''}, got {value!r}")
    if ptype is not None and value.unit.physical_type != ptype:
        raise u.UnitTypeError(f"{func}: {name!r} must be a {ptype}, got unit {value.unit!s} "
                              f"({value.unit.physical_type})")
    return value


def case_b_ratio(line="Halpha", temperature=10000 * u.K, density=100 * u.cm**-3, case="B"):
    """Intrinsic recombination ratio ``line / Hbeta``.

    Parameters
    ----------
    line : str
        One of `CASE_B_LINES`.
    temperature : `~astropy.units.Quantity` ['temperature']
        Electron temperature, 5000 ... 20 000 K (the table's range; linear in log T between).
    density : `~astropy.units.Quantity` ['number density']
        Electron density, 1e2 ... 1e6 cm^-3 (linear in log n_e between the tabulated decades).
    case : str
        Only ``"B"``.

    Raises
    ------
    ValueError
        Temperature, density, case or line outside what the table holds.

    Examples
    --------
    >>> import astropy.units as u
    >>> round(case_b_ratio("Halpha", 10000 * u.K, 1e4 * u.cm**-3), 4)
    2.8468
    """
    if case not in _CASES:
        raise ValueError(f"case_b_ratio: case {case!r} is not tabulated; options: "
                         f"{sorted(_CASES)}")
    if line not in CASE_B_LINES:
        raise ValueError(f"case_b_ratio: line {line!r} not tabulated; options: "
                         f"{', '.join(sorted(CASE_B_LINES))}")
    _check_quantity(temperature, "temperature", "case_b_ratio", "temperature")
    _check_quantity(density, "density", "case_b_ratio", "number density")
    t_tab = CASE_B_TABLE["temperature"].to_value(u.K)
    n_tab = CASE_B_TABLE["density"].to_value(u.cm**-3)
    t = float(temperature.to_value(u.K, equivalencies=u.temperature()))
    n = float(density.to_value(u.cm**-3))
    if not n_tab[0] * (1 - 1e-9) <= n <= n_tab[-1] * (1 + 1e-9):
        raise ValueError(f"case_b_ratio: density {density} is outside the table "
                         f"({n_tab[0]:.0e} ... {n_tab[-1]:.0e} cm^-3); no extrapolation")
    if not t_tab[0] <= t <= t_tab[-1]:
        raise ValueError(f"case_b_ratio: temperature {temperature} is outside the table "
                         f"({t_tab[0]:.0f} ... {t_tab[-1]:.0f} K); no extrapolation")
    if line == "Hbeta":
        return 1.0
    lt, ln = np.log(t_tab), np.log(n_tab)
    x = float(np.clip(math.log(t), lt[0], lt[-1]))
    y = float(np.clip(math.log(n), ln[0], ln[-1]))
    by_density = [np.interp(x, lt, row) for row in CASE_B_TABLE[line]]
    return float(np.interp(y, ln, by_density))


def _poly(coeffs, y):
    out = np.zeros_like(y)
    for c in reversed(coeffs):
        out = out * y + c
    return out


def _ab(x, curve):
    """a(x), b(x) of the curve for x in um^-1 (array)."""
    a = np.empty_like(x)
    b = np.empty_like(x)
    ir = (x >= 0.3) & (x < 1.1)
    a[ir] = 0.574 * x[ir] ** 1.61
    b[ir] = -0.527 * x[ir] ** 1.61
    opt = (x >= 1.1) & (x < 3.3)
    y = x[opt] - 1.82
    ca, cb = (_CCM_OPT_A, _CCM_OPT_B) if curve == "ccm89" else (_OD_OPT_A, _OD_OPT_B)
    a[opt] = _poly(ca, y)
    b[opt] = _poly(cb, y)
    uv = (x >= 3.3) & (x < 8.0)
    xu = x[uv]
    fa = np.where(xu >= 5.9, -0.04473 * (xu - 5.9) ** 2 - 0.009779 * (xu - 5.9) ** 3, 0.0)
    fb = np.where(xu >= 5.9, 0.2130 * (xu - 5.9) ** 2 + 0.1207 * (xu - 5.9) ** 3, 0.0)
    a[uv] = 1.752 - 0.316 * xu - 0.104 / ((xu - 4.67) ** 2 + 0.341) + fa
    b[uv] = -3.090 + 1.825 * xu + 1.206 / ((xu - 4.62) ** 2 + 0.263) + fb
    fuv = (x >= 8.0) & (x <= 10.0)
    d = x[fuv] - 8.0
    a[fuv] = -1.073 - 0.628 * d + 0.137 * d**2 - 0.070 * d**3
    b[fuv] = 13.670 + 4.257 * d - 0.420 * d**2 + 0.374 * d**3
    return a, b


def extinction_curve(wavelength, r_v=3.1, curve="ccm89"):
    """A_lambda / A_V of the chosen curve.

    Parameters
    ----------
    wavelength : `~astropy.units.Quantity`
        Any spectral unit (converted to a wavelength); 0.1 ... 3.33 um (x = 0.3 ... 10 um^-1).
    r_v : float
        R_V = A_V / E(B-V).
    curve : str
        One of `CURVES`.

    Returns
    -------
    ndarray or float
        Dimensionless A_lambda / A_V.
    """
    if curve not in CURVES:
        raise ValueError(f"extinction_curve: unknown curve {curve!r}; options: "
                         + ", ".join(f"{k} ({v})" for k, v in sorted(CURVES.items())))
    _check_quantity(wavelength, "wavelength", "extinction_curve")
    if not (np.isfinite(r_v) and r_v > 0):
        raise ValueError(f"extinction_curve: 'r_v' must be positive, got {r_v!r}")
    lam = wavelength.to_value(u.um, equivalencies=u.spectral())
    x = np.atleast_1d(1.0 / np.asarray(lam, dtype=float))
    if np.any(~((x >= 0.3) & (x <= 10.0))):
        bad = lam if np.ndim(lam) == 0 else np.asarray(lam)[~((x >= 0.3) & (x <= 10.0))][0]
        raise ValueError(f"extinction_curve: wavelength {bad:.5g} um is outside the curve's "
                         f"range 0.1 ... 3.33 um (x = 0.3 ... 10 um^-1)")
    a, b = _ab(x, curve)
    out = a + b / r_v
    return float(out[0]) if np.ndim(lam) == 0 else out


def k_lambda(wavelength, r_v=3.1, curve="ccm89"):
    """k(lambda) = A_lambda / E(B-V) = R_V * A_lambda / A_V."""
    return r_v * np.asarray(extinction_curve(wavelength, r_v, curve))


class BalmerDecrement(NamedTuple):
    """Result of `balmer_decrement` (E(B-V) and A_V first)."""

    ebv: u.Quantity
    a_v: u.Quantity
    ebv_err: u.Quantity
    a_v_err: u.Quantity
    observed_ratio: float
    intrinsic_ratio: float
    k_difference: float


def _ebv(value):
    if isinstance(value, u.Quantity):
        return value.to_value(u.mag)
    return np.asarray(value, dtype=float)


def balmer_decrement(flux_ha, flux_hb, temperature=10000 * u.K, density=100 * u.cm**-3,
                     case="B", curve="ccm89", r_v=3.1, *, flux_ha_err=None, flux_hb_err=None):
    """Colour excess and visual extinction from the Halpha / Hbeta flux ratio.

    ``E(B-V) = 2.5 / (k(Hbeta) - k(Halpha)) * log10(R_obs / R_int)``, ``A_V = R_V E(B-V)``.
    A ratio below the intrinsic one gives a negative E(B-V) (returned as is, not clipped).

    Parameters
    ----------
    flux_ha, flux_hb : `~astropy.units.Quantity`
        Observed line fluxes (same physical type).
    temperature, density, case
        Passed to `case_b_ratio`.
    curve : str
        One of `CURVES`.
    r_v : float
        R_V.
    flux_ha_err, flux_hb_err : `~astropy.units.Quantity`, optional
        1-sigma flux errors (default 0).

    Returns
    -------
    BalmerDecrement
        ``ebv, a_v, ebv_err, a_v_err`` (mag), ``observed_ratio``, ``intrinsic_ratio``,
        ``k_difference`` = k(Hbeta) - k(Halpha).
    """
    _check_quantity(flux_ha, "flux_ha", "balmer_decrement")
    _check_quantity(flux_hb, "flux_hb", "balmer_decrement")
    try:
        ratio = float((flux_ha / flux_hb).to_value(u.one))
    except u.UnitConversionError as exc:
        raise u.UnitsError(f"balmer_decrement: 'flux_ha' ({flux_ha.unit!s}) and 'flux_hb' "
                           f"({flux_hb.unit!s}) must have the same physical type") from exc
    if not (np.isfinite(ratio) and ratio > 0):
        raise ValueError(f"balmer_decrement: Halpha / Hbeta must be positive and finite, got "
                         f"{ratio!r}")
    rel2 = 0.0
    for err, flux, name in ((flux_ha_err, flux_ha, "flux_ha_err"),
                            (flux_hb_err, flux_hb, "flux_hb_err")):
        if err is not None:
            _check_quantity(err, name, "balmer_decrement")
            rel2 += float((err / flux).to_value(u.one)) ** 2
    intrinsic = case_b_ratio("Halpha", temperature, density, case)
    dk = float(k_lambda(HBETA_AIR, r_v, curve) - k_lambda(HALPHA_AIR, r_v, curve))
    ebv = 2.5 / dk * math.log10(ratio / intrinsic)
    ebv_err = 2.5 / (dk * math.log(10.0)) * math.sqrt(rel2)
    return BalmerDecrement(ebv * u.mag, r_v * ebv * u.mag, ebv_err * u.mag,
                           r_v * ebv_err * u.mag, ratio, intrinsic, dk)


def deredden(flux, wavelength, ebv, r_v=3.1, curve="ccm89"):
    """Correct fluxes for extinction: ``flux * 10**(0.4 k(lambda) E(B-V))``.

    Parameters
    ----------
    flux : `~astropy.units.Quantity`
        Observed fluxes (any unit; kept).
    wavelength : `~astropy.units.Quantity`
        Rest-frame wavelength(s) of the lines (any spectral unit), broadcast with ``flux``.
    ebv : float or `~astropy.units.Quantity` ['mag']
        E(B-V) in magnitudes.
    r_v : float
        R_V.
    curve : str
        One of `CURVES`.

    Returns
    -------
    `~astropy.units.Quantity`
        Dereddened fluxes, unit of ``flux``.
    """
    _check_quantity(flux, "flux", "deredden")
    k = k_lambda(wavelength, r_v, curve)
    return flux * 10.0 ** (0.4 * k * _ebv(ebv))
