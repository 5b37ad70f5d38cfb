"""Read 1D spectra from FITS files, bytes, HDU lists or arrays into a specutils ``Spectrum``.

`read_light` reads the same files into a `LightSpectrum` (arrays, units and the same meta)
without importing specutils, astropy.nddata or astropy.wcs, for quick looks such as ``zline info``;
`read_spectrum` is `read_light` plus the wrapping into a ``Spectrum``.

The FITS headers and data are read with :mod:`astropy.io.fits`; the raw headers are checked
first (`_fitscheck`), then the layout registry (`registry`) picks the module that reads the HDU
(``layout_image``, ``layout_rows``, ``layout_table`` ...), and `_build` assembles the spectrum.
Every guess made about a file is recorded in ``spectrum.meta["zline"]["flags"]`` as
``{"code", "message"}`` (codes in `FLAG_CODES`; the messages also in ``["assumptions"]``).

Every failure is a :class:`SpectrumFormatError` (a ``ValueError``) whose message names the file,
the HDU, the keyword or column, what was expected, what was found and what to try.
"""

from ._base import FLAG_CODES, HEADER_FACTS, MEDIA, MEDIUM_KEYWORDS, SpectrumFormatError
from ._plausible import MAX_RESOLVING_POWER, WAVELENGTH_LIMITS
from .describe import describe_spectrum
from .layout_rows import ROW_NAME_KEYWORDS
from .light import LightSpectrum
from .reader import read_light, read_spectrum, spectrum_from_arrays

__all__ = ["SpectrumFormatError", "read_spectrum", "spectrum_from_arrays", "describe_spectrum",
           "read_light", "LightSpectrum",
           "MEDIA", "UNCERTAINTY_TYPES", "HEADER_FACTS", "MEDIUM_KEYWORDS", "FLAG_CODES",
           "ROW_NAME_KEYWORDS", "WAVELENGTH_LIMITS", "MAX_RESOLVING_POWER"]


def __getattr__(name):
    # UNCERTAINTY_TYPES names astropy.nddata classes: imported on first use, not at start-up
    if name == "UNCERTAINTY_TYPES":
        from ._base import uncertainty_types

        return uncertainty_types()
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
