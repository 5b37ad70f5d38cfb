"""Doppler and cosmological shifts of spectral positions.

A line at rest position ``rest`` is seen at ``observed`` after a cosmological redshift ``z`` and a
peculiar (line-of-sight) velocity ``v``. The two compose multiplicatively:

    lambda_obs / lambda_rest = nu_rest / nu_obs = (1 + z) (1 + z_v)

where ``1 + z_v`` depends on the velocity convention (keys of `CONVENTIONS`, the same definitions
as astropy's ``doppler_optical``, ``doppler_radio`` and ``doppler_relativistic`` equivalencies):

``"optical"``       ``1 + z_v = 1 + v/c``             (v = c (lambda - lambda0) / lambda0)
``"radio"``         ``1 + z_v = 1 / (1 - v/c)``       (v = c (nu0 - nu) / nu0)
``"relativistic"``  ``1 + z_v = sqrt((1 + b) / (1 - b))``, ``b = v/c``

Positive velocities recede (redshift).
"""

import astropy.constants as const
import astropy.units as u
import numpy as np

__all__ = [
    "CONVENTIONS",
    "CONVENTION_DEFINITIONS",
    "shift_factor",
    "observed_position",
    "redshift_from",
    "velocity_from",
    "redshift_to_velocity",
    "velocity_to_redshift",
]

#: Convention name -> definition of 1 + z_v in terms of b = v/c.
CONVENTION_DEFINITIONS = {
    "optical": "1 + z_v = 1 + v/c (v = c (lambda - lambda0)/lambda0)",
    "radio": "1 + z_v = 1/(1 - v/c) (v = c (nu0 - nu)/nu0)",
    "relativistic": "1 + z_v = sqrt((1 + v/c)/(1 - v/c))",
}
#: Velocity convention names accepted everywhere in this module.
CONVENTIONS = tuple(CONVENTION_DEFINITIONS)

_C_KMS = const.c.to_value(u.km / u.s)
_KMS = u.km / u.s


def _check_convention(convention):
    if convention not in CONVENTION_DEFINITIONS:
        allowed = ", ".join(f"'{c}'" for c in CONVENTIONS)
        raise ValueError(
            f"Unknown velocity convention {convention!r} for argument 'convention'; expected "
            f"one of {allowed}.")
    return convention


def _beta(velocity, argument="velocity"):
    if not isinstance(velocity, u.Quantity):
        raise TypeError(
            f"Argument '{argument}' must be an astropy Quantity with a speed unit "
            f"(e.g. 300 * u.km / u.s); got {type(velocity).__name__} {velocity!r:.60}.")
    if not velocity.unit.is_equivalent(_KMS):
        raise u.UnitTypeError(
            f"Argument '{argument}' must have a speed unit (e.g. km / s); got unit "
            f"'{velocity.unit}' ({velocity.unit.physical_type}).")
    beta = velocity.to_value(_KMS) / _C_KMS
    if np.any(~(np.abs(beta) < 1)):
        worst = np.asarray(velocity.to_value(_KMS)).ravel()[np.argmax(~(np.abs(beta) < 1))]
        raise ValueError(
            f"Argument '{argument}' must satisfy |v| < c = {_C_KMS:.3f} km / s; got {worst} km / s.")
    return beta


def _redshift(z, argument="z"):
    if isinstance(z, u.Quantity):
        if z.unit.physical_type != "dimensionless":
            raise u.UnitTypeError(
                f"Argument '{argument}' must be a dimensionless redshift; got unit '{z.unit}'.")
        z = z.to_value(u.dimensionless_unscaled)
    z = np.asarray(z, dtype=float)
    if np.any(~(z > -1)):
        worst = z.ravel()[np.argmax(~(z > -1))]
        raise ValueError(f"Argument '{argument}' must be a redshift > -1; got {worst}.")
    return z


def _velocity_factor(beta, convention):
    if convention == "optical":
        return 1.0 + beta
    if convention == "radio":
        return 1.0 / (1.0 - beta)
    return np.sqrt((1.0 + beta) / (1.0 - beta))


def _scalar(x):
    return float(x) if np.ndim(x) == 0 else x


def shift_factor(z=0.0, velocity=0 * _KMS, convention="optical"):
    """Total shift factor ``1 + z_total = (1 + z)(1 + z_v)``.

    Multiply wavelengths by it; divide frequencies, energies and wavenumbers by it.

    Parameters
    ----------
    z : float or array_like
        Cosmological (or any multiplicative) redshift, > -1.
    velocity : `~astropy.units.Quantity` ['speed']
        Line-of-sight velocity, |v| < c, positive receding; broadcasts against ``z``.
    convention : str
        One of `CONVENTIONS`.

    Returns
    -------
    float or `numpy.ndarray`
    """
    _check_convention(convention)
    zz = _redshift(z)
    beta = _beta(velocity)
    return _scalar((1.0 + zz) * _velocity_factor(beta, convention))


def _check_spectral(value, argument):
    if not isinstance(value, u.Quantity):
        raise TypeError(
            f"Argument '{argument}' must be an astropy Quantity with a spectral unit "
            f"(wavelength, frequency, energy or wavenumber); got {type(value).__name__} "
            f"{value!r:.60}.")
    if not value.unit.is_equivalent(u.m, equivalencies=u.spectral()):
        raise u.UnitTypeError(
            f"Argument '{argument}' must have a spectral unit (wavelength, frequency, energy or "
            f"wavenumber); got unit '{value.unit}' ({value.unit.physical_type}).")
    return value


def _as_wavelength_m(value):
    return value.to_value(u.m, equivalencies=u.spectral())


def observed_position(rest, z=0.0, velocity=0 * _KMS, convention="optical"):
    """Observed position of a line given its rest position, redshift and velocity.

    Parameters
    ----------
    rest : `~astropy.units.Quantity`
        Rest position(s): wavelength, frequency, energy or wavenumber.
    z : float or array_like
        Redshift (> -1); broadcasts against ``rest`` and ``velocity``.
    velocity : `~astropy.units.Quantity` ['speed']
        Line-of-sight velocity (|v| < c).
    convention : str
        One of `CONVENTIONS`.

    Returns
    -------
    `~astropy.units.Quantity`
        Observed position(s) in the unit of ``rest``: wavelengths are multiplied by
        `shift_factor`, frequencies, energies and wavenumbers divided by it.

    Examples
    --------
    >>> import astropy.units as u
    >>> observed_position(6564.61 * u.AA, z=0.1)  # doctest: +FLOAT_CMP
    <Quantity 7221.071 Angstrom>
    """
    _check_spectral(rest, "rest")
    factor = shift_factor(z, velocity, convention)
    if rest.unit.is_equivalent(u.m):
        return rest * factor
    return rest / factor


def _ratio(observed, rest):
    _check_spectral(observed, "observed")
    _check_spectral(rest, "rest")
    ratio = _as_wavelength_m(observed) / _as_wavelength_m(rest)
    if np.any(~(ratio > 0)):
        raise ValueError(
            "Arguments 'observed' and 'rest' must be positive spectral positions; got a ratio "
            f"observed/rest of {np.min(ratio)} (as wavelengths).")
    return ratio


def redshift_from(observed, rest):
    """Total redshift ``z = lambda_obs / lambda_rest - 1`` of an observed line.

    Parameters
    ----------
    observed, rest : `~astropy.units.Quantity`
        Spectral positions in any spectral units (converted with ``u.spectral()``); broadcast.

    Returns
    -------
    float or `numpy.ndarray`
    """
    return _scalar(_ratio(observed, rest) - 1.0)


def _velocity_from_factor(factor, convention):
    if convention == "optical":
        beta = factor - 1.0
    elif convention == "radio":
        beta = 1.0 - 1.0 / factor
    else:
        f2 = factor * factor
        beta = (f2 - 1.0) / (f2 + 1.0)
    return beta * _C_KMS * _KMS


def velocity_from(observed, rest, convention="optical", z=0.0):
    """Line-of-sight velocity of an observed line after removing a redshift ``z``.

    Parameters
    ----------
    observed, rest : `~astropy.units.Quantity`
        Spectral positions in any spectral units; broadcast.
    convention : str
        One of `CONVENTIONS`.
    z : float or array_like
        Redshift (> -1) taken out before the velocity is computed, so that
        ``observed_position(rest, z, velocity_from(observed, rest, convention, z), convention)``
        gives back ``observed``.

    Returns
    -------
    `~astropy.units.Quantity` ['speed']
        Velocity in km / s.
    """
    _check_convention(convention)
    zz = _redshift(z)
    return _velocity_from_factor(_ratio(observed, rest) / (1.0 + zz), convention)


def redshift_to_velocity(z, convention="optical"):
    """Velocity whose Doppler factor in ``convention`` equals ``1 + z``.

    Parameters
    ----------
    z : float or array_like
        Redshift (> -1). The relativistic velocity stays below c; the optical one exceeds c for
        z > 1 and the radio one (v/c = z/(1+z)) reaches -c at z = -1/2, so such values cannot be
        passed back as a velocity.
    convention : str
        One of `CONVENTIONS`.

    Returns
    -------
    `~astropy.units.Quantity` ['speed'] in km / s
    """
    _check_convention(convention)
    return _velocity_from_factor(1.0 + _redshift(z), convention)


def velocity_to_redshift(velocity, convention="optical"):
    """Redshift ``z_v`` equivalent to a velocity in ``convention``.

    Parameters
    ----------
    velocity : `~astropy.units.Quantity` ['speed']
        Velocity (|v| < c).
    convention : str
        One of `CONVENTIONS`.

    Returns
    -------
    float or `numpy.ndarray`
    """
    _check_convention(convention)
    return _scalar(_velocity_factor(_beta(velocity), convention) - 1.0)
