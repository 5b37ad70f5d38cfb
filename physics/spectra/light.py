"""`LightSpectrum`: what the reader found in a file (arrays, units and the zline meta) before it
becomes a `specutils.Spectrum`; building it needs neither specutils nor astropy.nddata."""

import numpy as np

from ._base import uncertainty_types

__all__ = ["LightSpectrum", "to_spectrum"]


class LightSpectrum:
    """A checked 1D spectrum as plain arrays and units, with the same meta as `read_spectrum`.

    Attributes
    ----------
    spectral_axis : `~astropy.units.Quantity`
        Ascending spectral axis.
    flux : `~astropy.units.Quantity`
    uncertainty : ndarray or None
        The uncertainty values, of the kind ``uncertainty_kind`` ('stdev', 'variance', 'ivar'),
        in ``uncertainty_unit``.
    mask : ndarray of bool
        True where a pixel is bad.
    meta : dict
        ``meta["zline"]`` as described in `read_spectrum`; ``meta["header"]`` the FITS header.
    rest_value : `~astropy.units.Quantity` or None
    velocity_convention : str or None

    Examples
    --------
    >>> import astropy.units as u
    >>> light = LightSpectrum([5000.0, 5001.0] * u.AA, [1.0, 2.0] * u.Jy, mask=[False, True])
    >>> light.n_masked, light.flux.unit
    (1, Unit("Jy"))
    """

    def __init__(self, spectral_axis, flux, uncertainty=None, uncertainty_kind=None,
                 uncertainty_unit=None, mask=None, meta=None, rest_value=None,
                 velocity_convention=None):
        self.spectral_axis = spectral_axis
        self.flux = flux
        self.uncertainty = uncertainty
        self.uncertainty_kind = uncertainty_kind if uncertainty is not None else None
        self.uncertainty_unit = uncertainty_unit
        self.mask = None if mask is None else np.asarray(mask, dtype=bool)
        self.meta = {} if meta is None else meta
        self.rest_value = rest_value
        self.velocity_convention = velocity_convention

    @property
    def n_masked(self):
        """How many pixels the mask marks bad."""
        return int(np.count_nonzero(self.mask)) if self.mask is not None else 0

    def __repr__(self):
        axis = self.spectral_axis
        return (f"<LightSpectrum {axis.size} pixels, {axis.unit}, flux in {self.flux.unit}, "
                f"uncertainty {self.uncertainty_kind}>")


def to_spectrum(light, ctx):
    """The `specutils.Spectrum` of ``light`` (its meta dict is shared, not copied)."""
    from specutils import Spectrum

    uncertainty = None
    if light.uncertainty is not None:
        uncertainty = uncertainty_types()[light.uncertainty_kind](light.uncertainty,
                                                                  unit=light.uncertainty_unit)
    kwargs = {}
    if light.rest_value is not None:
        kwargs["rest_value"] = light.rest_value
        kwargs["velocity_convention"] = light.velocity_convention or "radio"
    try:
        return Spectrum(flux=light.flux, spectral_axis=light.spectral_axis,
                        uncertainty=uncertainty, mask=light.mask, meta=light.meta, **kwargs)
    except Exception:  # damaged data: said in plain words below
        ctx.fail("specutils could not build a spectrum from the data read (axis, flux, "
                 "uncertainty and mask); check the file's shapes and values")
