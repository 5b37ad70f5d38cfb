"""`describe_spectrum`: the JSON-ready summary ``zline info`` prints."""

import math

import numpy as np

from ._base import SpectrumFormatError, uncertainty_kind
from .light import LightSpectrum

__all__ = ["describe_spectrum"]


def describe_spectrum(spectrum):
    """Summarise a spectrum as a JSON-ready dict (the ``zline info`` keys).

    Parameters
    ----------
    spectrum : `specutils.Spectrum` or `LightSpectrum`
        What `read_spectrum` or `read_light` returned (the summary is the same for both).

    Returns
    -------
    dict
        ``file, hdu`` (index), ``hdu_name`` (EXTNAME), ``layout, n_pixels, spectral_min, spectral_max, spectral_unit, medium,
        medium_assumed, flux_unit, uncertainty, n_masked, assumptions, flags, notes, header`` and,
        when known, ``rest_value`` (with ``rest_unit``) and ``velocity_convention``.  ``flags`` is
        the list of ``{"code", "message"}`` of every guess (see `FLAG_CODES`).  Numbers that are
        not finite are given as None, so the dict is valid JSON.
    """
    if isinstance(spectrum, LightSpectrum):
        ukind = spectrum.uncertainty_kind
    else:
        from specutils import Spectrum

        if not isinstance(spectrum, Spectrum):
            raise SpectrumFormatError(f"describe_spectrum expects a specutils Spectrum or a "
                                      f"LightSpectrum; got {type(spectrum).__name__}")
        ukind = uncertainty_kind(spectrum.uncertainty)
    z = spectrum.meta.get("zline", {}) if hasattr(spectrum.meta, "get") else {}
    axis = spectrum.spectral_axis
    mask = spectrum.mask
    info = dict(
        file=z.get("file"), hdu=z.get("hdu"), hdu_name=z.get("hdu_name"), layout=z.get("layout", "spectrum"),
        n_pixels=int(axis.size), spectral_min=float(np.min(axis.value)),
        spectral_max=float(np.max(axis.value)), spectral_unit=axis.unit.to_string(),
        medium=z.get("medium"), medium_assumed=bool(z.get("medium_assumed", False)),
        flux_unit=spectrum.flux.unit.to_string(), uncertainty=ukind,
        n_masked=int(np.count_nonzero(mask)) if mask is not None else 0,
        reversed=bool(z.get("reversed", False)),
        assumptions=list(z.get("assumptions", [])),
        flags=[dict(f) for f in z.get("flags", [])], notes=list(z.get("notes", [])),
        header=dict(z.get("header", {})))
    if z.get("rest_value") is not None:
        info["rest_value"] = float(z["rest_value"].value)
        info["rest_unit"] = z["rest_value"].unit.to_string()
    if z.get("velocity_convention"):
        info["velocity_convention"] = z["velocity_convention"]
    return _finite_or_none(info)


def _finite_or_none(value):
    """The same structure with every NaN or infinite float replaced by None."""
    if isinstance(value, dict):
        return {k: _finite_or_none(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_finite_or_none(v) for v in value]
    if isinstance(value, (float, np.floating)):
        return float(value) if math.isfinite(value) else None
    return value

