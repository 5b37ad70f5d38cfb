"""Refuse spectral axes no instrument gives: values at or below zero, wavelengths outside
1 mÅ to 1 km, or a pixel step finer than a resolving power of 10^9 (a wrong unit or step)."""

import numpy as np
import astropy.units as u

__all__ = ["WAVELENGTH_LIMITS", "MAX_RESOLVING_POWER", "check_axis"]

#: The wavelengths (as an equivalent vacuum wavelength) a spectrum may cover: 1 mÅ (hard X-ray,
#: ~12 MeV) to 1 km (300 kHz radio).
WAVELENGTH_LIMITS = (1e-3 * u.AA, 1 * u.km)
#: Above this value / step per pixel the step is taken for a wrong keyword, not an instrument.
MAX_RESOLVING_POWER = 1e9


def check_axis(axis, ctx, source):
    """Fail through ``ctx`` when the ascending, finite ``axis`` (a Quantity) is implausible.

    ``source`` names where the axis came from (keywords or a column) for the message.
    """
    values = axis.value
    unit = axis.unit
    if np.any(values <= 0):
        i = int(np.argmax(values <= 0))
        ctx.fail(f"{source} give spectral values at or below zero ({values[i]:.6g} {unit} at "
                 f"pixel {i + 1}); expected positive wavelengths, frequencies or energies; "
                 f"check the reference value and step")
    lam = axis.to_value(u.AA, equivalencies=u.spectral())
    lo, hi = float(np.min(lam)), float(np.max(lam))
    low, high = (lim.to_value(u.AA) for lim in WAVELENGTH_LIMITS)
    if lo < low or hi > high:
        ctx.fail(f"{source} give {values.min():.6g} to {values.max():.6g} {unit}, i.e. "
                 f"wavelengths of {lo:.3g} to {hi:.3g} Angstrom, outside 1 mAngstrom to 1 km; "
                 f"check the unit (CUNITn or TUNITn): e.g. GHz values stated or taken as Hz, keV "
                 f"as J, nm as m")
    if values.size > 1:
        power = np.abs(values[1:]) / np.abs(np.diff(values))
        if float(np.max(power)) > MAX_RESOLVING_POWER:
            i = int(np.argmax(power))
            ctx.fail(f"{source} give a step of {abs(values[i + 1] - values[i]):.3g} {unit} at "
                     f"{values[i]:.6g} {unit}, a resolving power of {power[i]:.3g} per pixel "
                     f"(more than {MAX_RESOLVING_POWER:.0e}); check the step keyword (CDELTn or "
                     f"CDn_n) and the unit")
