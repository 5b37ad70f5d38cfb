"""Read 1D spectra from FITS files, bytes, HDU lists or arrays into a specutils ``Spectrum``.

The FITS headers and data are read with :mod:`astropy.io.fits` and the spectral axis is computed
here from the World Coordinate System keywords (FITS WCS Paper I for the linear axis, Paper III
for spectral types and the ``-LOG`` algorithm; other Paper III algorithm codes go through
:mod:`astropy.wcs`).  Every guess made about a file (a unit that is not stated, the medium of a
wavelength table ...) is recorded in ``spectrum.meta["zline"]["assumptions"]``.

Every failure is a :class:`SpectrumFormatError` (a ``ValueError``) whose message names the file,
the HDU, the keyword or column, what was expected, what was found and what to try.
"""

import copy
import io
import math
import os
import re
import warnings

import numpy as np
import astropy.units as u
from astropy.constants import c as _c
from astropy.io import fits
from astropy.nddata import InverseVariance, StdDevUncertainty, VarianceUncertainty

__all__ = ["SpectrumFormatError", "read_spectrum", "spectrum_from_arrays", "describe_spectrum",
           "MEDIA", "UNCERTAINTY_TYPES", "HEADER_FACTS", "MEDIUM_KEYWORDS"]

#: Accepted values of ``medium=``.
MEDIA = {"vacuum": "wavelengths measured in vacuum", "air": "wavelengths measured in standard air"}

#: Accepted values of ``uncertainty_type=`` and the astropy class each one builds.
UNCERTAINTY_TYPES = {"stdev": StdDevUncertainty, "variance": VarianceUncertainty,
                     "ivar": InverseVariance}

#: Header keywords copied into ``meta["zline"]["header"]`` when present.
HEADER_FACTS = ("OBJECT", "DATE-OBS", "MJD-OBS", "OBSGEO-X", "OBSGEO-Y", "OBSGEO-Z", "SITELAT",
                "SITELONG", "SITEELEV", "RA", "DEC", "EXPTIME", "SPECSYS", "BUNIT", "TELESCOP",
                "INSTRUME", "RESTFRQ", "RESTFREQ", "RESTWAV")

_C_SI = _c.to_value(u.m / u.s)

#: Header keywords that state the medium of the wavelengths, and how their values read.
MEDIUM_KEYWORDS = {"VACUUM": "T means vacuum, F means air",
                   "AIRORVAC": "'air' or 'vac'",
                   "VAC_AIR": "'air' or 'vac'"}

# Column / extension names (lower case) and what they hold.
_AXIS_COLUMNS = {
    "wave": "length", "wavelength": "length", "lambda": "length", "lam": "length",
    "wavelen": "length", "wl": "length", "wave_air": "length", "wave_vac": "length",
    "awav": "length", "loglam": "log10-length", "log_wave": "log10-length",
    "freq": "frequency", "frequency": "frequency", "nu": "frequency",
    "energy": "energy", "ener": "energy", "channel_energy": "energy",
    "wavenumber": "wavenumber", "wavn": "wavenumber",
}
_FLUX_COLUMNS = ("flux", "flux_density", "spec", "fluxdens", "flam", "fnu", "specflux",
                 "intensity", "counts", "rate")
_ERR_COLUMNS = {
    "err": "stdev", "error": "stdev", "sigma": "stdev", "flux_err": "stdev",
    "flux_error": "stdev", "fluxerr": "stdev", "uncertainty": "stdev", "unc": "stdev",
    "noise": "stdev", "std": "stdev", "stddev": "stdev", "e_flux": "stdev", "err_flux": "stdev",
    "error_flux": "stdev", "ivar": "ivar", "inverse_variance": "ivar", "invvar": "ivar",
    "flux_ivar": "ivar", "var": "variance", "variance": "variance", "flux_var": "variance",
}
_MASK_COLUMNS = ("mask", "and_mask", "andmask", "quality", "dq", "badpix", "flag", "flags", "or_mask")
_FLUX_EXTNAMES = ("FLUX", "SCI", "DATA", "SPECTRUM", "SPEC")
_ERR_EXTNAMES = {
    "ERR": "stdev", "ERROR": "stdev", "SIGMA": "stdev", "STD": "stdev", "STDDEV": "stdev",
    "UNCERT": "stdev", "UNCERTAINTY": "stdev", "NOISE": "stdev", "VAR": "variance",
    "VARIANCE": "variance", "IVAR": "ivar", "INVVAR": "ivar", "INVERSE_VARIANCE": "ivar",
}
_MASK_EXTNAMES = ("MASK", "DQ", "QUALITY", "BADPIX", "FLAGS")

# FITS WCS Paper III spectral types: physical kind and the default (SI) unit.
_SPECTRAL_TYPES = {
    "WAVE": ("length", u.m), "AWAV": ("length", u.m), "FREQ": ("frequency", u.Hz),
    "ENER": ("energy", u.J), "WAVN": ("wavenumber", 1 / u.m),
    "VRAD": ("velocity", u.m / u.s), "VOPT": ("velocity", u.m / u.s),
    "VELO": ("velocity", u.m / u.s), "FELO": ("velocity", u.m / u.s),
}


class SpectrumFormatError(ValueError):
    """A source could not be read as a 1D spectrum.

    The message names the file, the HDU and keyword or column, what was expected, what was found
    and what to try.
    """


class _Ctx:
    """Where we are in a source, for error messages and the record of assumptions."""

    def __init__(self, name):
        self.name = name
        self.hdu = None
        self.hdu_index = None
        self.hdu_name = None
        self.assumptions = []
        self.notes = []

    def where(self):
        return f"{self.name!s}" + (f", HDU {self.hdu}" if self.hdu is not None else "")

    def fail(self, what):
        raise SpectrumFormatError(f"{self.where()}: {what}")

    def assume(self, text):
        self.assumptions.append(text)


# ----------------------------------------------------------------------------------------------
# units


#: Spellings of the Angstrom in survey headers that astropy does not parse ('1E-17 erg/cm^2/s/Ang').
_ANGSTROM_SPELLINGS = re.compile(r"(?<![A-Za-z])(Ang|Angs|Angstroms|angstroms|ang)(?![A-Za-z])")


def _parse_unit(text):
    """Parse a FITS unit string; return a Unit or None when it cannot be parsed."""
    text = str(text).strip()
    if not text:
        return None
    text = _ANGSTROM_SPELLINGS.sub("Angstrom", text)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        for fmt in ("fits", None):
            try:
                unit = u.Unit(text, format=fmt, parse_strict="raise")
            except (ValueError, TypeError):
                continue
            return _fix_angstrom(unit)
    return None


def _fix_angstrom(unit):
    """'erg/cm2/s/A' means Angstrom, not ampere: a flux density never contains a current."""
    try:
        bases = unit.bases
        powers = unit.powers
    except AttributeError:
        return unit
    if u.A in bases and any(b in bases for b in (u.erg, u.W, u.J)):
        new = unit.scale
        for b, p in zip(bases, powers):
            new = new * (u.AA if b is u.A else b) ** p
        return u.Unit(new)
    return unit


def _is_spectral(unit):
    try:
        return unit.is_equivalent(u.m, equivalencies=u.spectral())
    except (AttributeError, TypeError):
        return False


# ----------------------------------------------------------------------------------------------
# public entry points


def read_spectrum(source, hdu=None, medium=None, row=None, column=None, uncertainty_type=None,
                  spectral_unit=None, flux_unit=None):
    """Read a 1D spectrum into a `specutils.Spectrum`.

    Parameters
    ----------
    source : str, `os.PathLike`, bytes, memoryview, `~astropy.io.fits.HDUList`, `specutils.Spectrum`, tuple or dict
        A FITS file path (``.fits``, ``.fits.gz``), the raw bytes of a FITS file (as a browser
        upload delivers them), an open HDU list, an existing ``Spectrum`` (passed through, meta
        added), a tuple ``(spectral_axis, flux[, uncertainty])`` of Quantities, or a dict with the
        keys ``spectral_axis``, ``flux`` and optionally ``uncertainty`` and ``mask``.
    hdu : int or str, optional
        HDU index or EXTNAME (case-insensitive).  Default: the primary HDU when it holds an image,
        else the first spectrum-like extension; the choice is recorded in ``meta["zline"]["hdu"]``.
    medium : {'vacuum', 'air'}, optional
        Overrides what the file says (``AWAV`` means air, ``WAVE`` vacuum).  Where the file says
        nothing, vacuum is assumed and ``meta["zline"]["medium_assumed"]`` is True.  Frequency,
        energy and velocity axes have medium None.
    row, column : int, optional
        For a 2D image: take this row (spectral axis along NAXIS1) or this column (along NAXIS2).
        For a table with array-valued cells and several rows: the row to take.
    uncertainty_type : {'stdev', 'variance', 'ivar'}, optional
        Overrides the kind of the uncertainty found in the file.
    spectral_unit, flux_unit : str or `~astropy.units.Unit`, optional
        If the file does not state (or states an unreadable) unit, the values are taken to be in
        this unit instead of a guess; if it does, the data are converted to this unit.
        An unreadable flux unit without ``flux_unit=`` gives a dimensionless flux and an assumption.

    Returns
    -------
    spectrum : `specutils.Spectrum`
        Ascending spectral axis (a descending file is reversed, recorded as
        ``meta["zline"]["reversed"]``); non-finite flux, non-finite or non-positive uncertainty,
        zero inverse variance and nonzero mask values are masked.  ``meta["zline"]`` holds
        ``file, hdu`` (index), ``hdu_name``, ``layout, medium, medium_assumed, uncertainty, assumptions, header`` and more;
        ``meta["header"]`` the FITS header of the HDU read.

    Raises
    ------
    SpectrumFormatError
        For anything that cannot be read as a 1D spectrum.
    """
    from specutils import Spectrum

    if medium is not None and medium not in MEDIA:
        raise SpectrumFormatError(f"medium={medium!r} is not accepted; expected one of "
                                  f"{sorted(MEDIA)} or None")
    if uncertainty_type is not None and uncertainty_type not in UNCERTAINTY_TYPES:
        raise SpectrumFormatError(f"uncertainty_type={uncertainty_type!r} is not accepted; "
                                  f"expected one of {sorted(UNCERTAINTY_TYPES)} or None")
    opts = dict(hdu=hdu, medium=medium, row=row, column=column,
                uncertainty_type=uncertainty_type,
                spectral_unit=_user_unit(spectral_unit, "spectral_unit"),
                flux_unit=_user_unit(flux_unit, "flux_unit"))

    if isinstance(source, Spectrum):
        return _from_spectrum(source, opts)
    if isinstance(source, fits.HDUList):
        ctx = _Ctx(source.filename() or "<HDUList>")
        return _guard(ctx, lambda: _from_hdulist(source, ctx, opts))
    if isinstance(source, (tuple, list)):
        if not 2 <= len(source) <= 3:
            raise SpectrumFormatError(f"a tuple source must be (spectral_axis, flux[, uncertainty]);"
                                      f" got {len(source)} items")
        return spectrum_from_arrays(*source, medium=medium, uncertainty_type=uncertainty_type)
    if isinstance(source, dict):
        keys = {"spectral_axis", "flux", "uncertainty", "mask"}
        if not {"spectral_axis", "flux"} <= set(source) <= keys:
            raise SpectrumFormatError(f"a dict source needs the keys 'spectral_axis' and 'flux' "
                                      f"(optional 'uncertainty', 'mask'); got {sorted(source)}")
        return spectrum_from_arrays(**source, medium=medium, uncertainty_type=uncertainty_type)

    if isinstance(source, (bytes, bytearray, memoryview)):
        ctx = _Ctx("<uploaded bytes>")
        data = bytes(source)
        if not data:
            ctx.fail("the upload is empty (0 bytes); expected the contents of a FITS file")
        return _guard(ctx, lambda: _open_and_read(io.BytesIO(data), ctx, opts))
    if isinstance(source, (str, os.PathLike)):
        path = os.fspath(source)
        ctx = _Ctx(path)
        if not os.path.exists(path):
            ctx.fail("no such file; check the path")
        if os.path.isdir(path):
            ctx.fail("this is a directory; expected a FITS file")
        if os.path.getsize(path) == 0:
            ctx.fail("the file is empty (0 bytes); expected a FITS file")
        return _guard(ctx, lambda: _open_and_read(path, ctx, opts))
    if hasattr(source, "read"):
        ctx = _Ctx(getattr(source, "name", "<file object>"))
        return _guard(ctx, lambda: _open_and_read(source, ctx, opts))
    raise SpectrumFormatError(
        f"source of type {type(source).__name__} is not accepted; expected a path, bytes, an "
        f"HDUList, a specutils Spectrum, a (spectral_axis, flux[, uncertainty]) tuple or a dict")


def _user_unit(value, name):
    if value is None:
        return None
    try:
        return u.Unit(value)
    except (ValueError, TypeError) as exc:
        raise SpectrumFormatError(f"{name}={value!r} is not a unit astropy understands ({exc})")


def _guard(ctx, fn):
    """Run a reader; every exception that is not already ours becomes a SpectrumFormatError."""
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            spec = fn()
    except SpectrumFormatError:
        raise
    except MemoryError:
        ctx.fail("not enough memory to read the data; the header may state a wrong size")
    except Exception as exc:  # astropy/numpy raise many kinds on damaged files
        text = str(exc).splitlines()[0] if str(exc) else ""
        ctx.fail(f"could not be read as FITS ({type(exc).__name__}: {text}); expected a complete "
                 f"FITS file with a 1D spectrum; check the file is not truncated or corrupt "
                 f"(astropy's `fitsinfo FILE` lists what it can read)")
    messages = sorted({str(w.message).splitlines()[0] for w in caught})
    if messages:
        spec.meta["zline"]["warnings"] = messages
    return spec


def _open_and_read(target, ctx, opts):
    try:
        hdul = fits.open(target, memmap=False, lazy_load_hdus=False)
    except Exception as exc:
        text = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        ctx.fail(f"is not a readable FITS file ({type(exc).__name__}: {text}); expected a FITS "
                 f"file (.fits or .fits.gz) starting with SIMPLE = T; check that it is complete")
    with hdul:
        return _from_hdulist(hdul, ctx, opts)


# ----------------------------------------------------------------------------------------------
# HDU selection


def _choose(ctx, hdul, index):
    ctx.hdu = _hdu_label(hdul, index)
    ctx.hdu_index = int(index)
    ctx.hdu_name = hdul[index].name or None


def _hdu_label(hdul, index):
    name = hdul[index].name
    return f"{index} ({name})" if name else f"{index}"


def _has_image(h):
    return (isinstance(h, (fits.PrimaryHDU, fits.ImageHDU, fits.CompImageHDU))
            and h.header.get("NAXIS", 0) > 0 and h.data is not None and h.data.size > 0)


def _is_table(h):
    return isinstance(h, (fits.BinTableHDU, fits.TableHDU)) and h.data is not None


def _hdu_list_text(hdul):
    parts = []
    for i, h in enumerate(hdul):
        shape = getattr(h, "shape", None) if not _is_table(h) else None
        kind = type(h).__name__
        parts.append(f"{i}:{h.name or '-'}({kind}{', shape ' + str(shape) if shape else ''})")
    return ", ".join(parts)


def _select_hdu(hdul, ctx, want):
    if len(hdul) == 0:
        ctx.fail("contains no HDU; expected at least a primary HDU with data")
    if want is not None:
        if isinstance(want, (int, np.integer)) and not isinstance(want, bool):
            if not -len(hdul) <= want < len(hdul):
                ctx.fail(f"hdu={want} is out of range; the file has {len(hdul)} HDUs: "
                         f"{_hdu_list_text(hdul)}")
            index = int(want) % len(hdul)
        elif isinstance(want, str):
            names = [h.name.upper() for h in hdul]
            if want.upper() not in names:
                ctx.fail(f"hdu={want!r} is not an EXTNAME in the file; the HDUs are "
                         f"{_hdu_list_text(hdul)}; pass an index or one of these names")
            index = names.index(want.upper())
        else:
            ctx.fail(f"hdu={want!r} is not accepted; expected an index (int) or an EXTNAME (str)")
        _choose(ctx, hdul, index)
        ctx.notes.append(f"HDU {ctx.hdu} chosen by hdu={want!r}")
        return index
    aux = set(_ERR_EXTNAMES) | set(_MASK_EXTNAMES)
    tables = [i for i, h in enumerate(hdul) if _is_table(h) and len(h.columns) > 0]
    if _has_image(hdul[0]):
        _choose(ctx, hdul, 0)
        if tables:
            ctx.notes.append(f"primary image chosen over the table in HDU {_hdu_label(hdul, tables[0])}"
                             f"; pass hdu={tables[0]} to read the table")
        else:
            ctx.notes.append("primary image chosen")
        return 0
    for i, h in enumerate(hdul):
        if _has_image(h) and h.name.upper() in _FLUX_EXTNAMES:
            _choose(ctx, hdul, i)
            ctx.notes.append(f"image extension {ctx.hdu} chosen by its EXTNAME")
            return i
    for i, h in enumerate(hdul):
        if (_has_image(h) and h.name.upper() not in aux) or (_is_table(h) and i in tables):
            _choose(ctx, hdul, i)
            ctx.notes.append(f"first spectrum-like HDU {ctx.hdu} chosen")
            return i
    ctx.fail(f"has no HDU with spectrum data (an image or a table); the HDUs are "
             f"{_hdu_list_text(hdul)}; expected a 1D image or a binary table with flux (a "
             f"truncated file can look like this: check its size)")


def _from_hdulist(hdul, ctx, opts):
    index = _select_hdu(hdul, ctx, opts["hdu"])
    h = hdul[index]
    if _is_table(h):
        out = _read_table(hdul, index, ctx, opts)
    elif isinstance(h, (fits.PrimaryHDU, fits.ImageHDU, fits.CompImageHDU)):
        if h.data is None or h.data.size == 0:
            ctx.fail(f"holds no data (NAXIS={h.header.get('NAXIS', 0)}); expected a 1D image; "
                     f"the HDUs are {_hdu_list_text(hdul)}, pass hdu= to pick another")
        out = _read_image(hdul, index, ctx, opts)
    else:
        ctx.fail(f"is a {type(h).__name__}, not an image or a table; pass hdu= with one of "
                 f"{_hdu_list_text(hdul)}")
    header = h.header
    if out["kind"] == "length":
        _apply_medium_keywords(out, [(header, ctx.hdu)] + ([(hdul[0].header, "0 (primary)")]
                                                          if index != 0 else []), ctx)
    facts = _header_facts(header, hdul[0].header)
    return _build(out, ctx, opts, header=header, facts=facts)


def _medium_keyword(header):
    """(medium, 'KEY = value') from the first medium keyword of ``header``, or (None, None)."""
    for key in MEDIUM_KEYWORDS:
        if key not in header:
            continue
        try:
            value = header[key]
        except Exception:  # an unparsable card says nothing
            continue
        if key == "VACUUM":
            if isinstance(value, (bool, np.bool_)):
                return ("vacuum" if value else "air"), f"VACUUM = {'T' if value else 'F'}"
            continue
        text = str(value).strip().lower()
        if text.startswith("air"):
            return "air", f"{key} = {value!r}"
        if text.startswith("vac"):
            return "vacuum", f"{key} = {value!r}"
    return None, None


def _apply_medium_keywords(out, headers, ctx):
    """Take the medium from VACUUM/AIRORVAC-style keywords where the axis itself says nothing."""
    for header, label in headers:
        medium, card = _medium_keyword(header)
        if medium is None:
            continue
        if out["medium"] is None:
            out["medium"] = medium
            ctx.notes.append(f"medium {medium} from {card} in HDU {label}")
        elif out["medium"] != medium:
            ctx.assume(f"{card} in HDU {label} contradicts the axis type, which says "
                       f"{out['medium']}; the axis type is kept (pass medium= to choose)")
        return


def _header_facts(header, primary):
    facts = {}
    for key in HEADER_FACTS:
        for hdr in (header, primary):
            if key in hdr:
                value = hdr[key]
                if isinstance(value, (bool, np.bool_)):
                    value = bool(value)
                elif isinstance(value, (int, np.integer)):
                    value = int(value)
                elif isinstance(value, (float, np.floating)):
                    value = float(value) if math.isfinite(value) else str(value)
                else:
                    value = str(value)
                facts[key] = value
                break
    return facts


# ----------------------------------------------------------------------------------------------
# images


def _float_key(header, key, ctx, default=None):
    if key not in header:
        return default
    try:
        value = header[key]
    except Exception as exc:  # astropy's VerifyError on an unparsable card
        ctx.fail(f"keyword {key} has an unparsable value ({type(exc).__name__}); expected a "
                 f"finite number; fix the header card")
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        ctx.fail(f"keyword {key} = {value!r} is not a number; expected a finite number; fix the "
                 f"header or pass arrays")
    value = float(value)
    if not math.isfinite(value):
        ctx.fail(f"keyword {key} = {value} is not finite; expected a finite number")
    return value


def _read_image(hdul, index, ctx, opts):
    h = hdul[index]
    header = h.header
    try:
        data = np.asarray(h.data)
    except Exception as exc:
        ctx.fail(f"image data could not be read ({type(exc).__name__}: {exc}); the file may be "
                 f"truncated")
    if not np.issubdtype(data.dtype, np.number):
        ctx.fail(f"image data of type {data.dtype} is not numeric")
    naxes = [header.get(f"NAXIS{i}", 0) for i in range(1, header.get("NAXIS", 0) + 1)]
    if int(np.prod(naxes)) != data.size:
        ctx.fail(f"keywords NAXISn = {naxes} promise {int(np.prod(naxes))} values but "
                 f"{data.size} were read; the file is probably truncated")
    shape = data.shape
    row, column = opts["row"], opts["column"]
    if data.ndim == 2 and column is None:
        rows = _row_roles(header, shape[0], ctx)
        if rows is not None and (row is None or row % shape[0] == rows["flux"]):
            return _read_row_image(hdul, index, data, rows, ctx, opts)
    axis = 1
    selector = (lambda a: a)
    if data.ndim == 1:
        if row is not None or column is not None:
            ctx.fail(f"row=/column= were given but the image is 1D (NAXIS=1, shape {shape}); "
                     f"leave them out")
    else:
        big = [i for i, n in enumerate(shape) if n > 1]
        if row is not None and column is not None:
            ctx.fail("pass row= or column=, not both")
        if data.ndim == 2 and (row is not None or column is not None):
            nrow, ncol = shape
            if row is not None:
                if not -nrow <= row < nrow:
                    ctx.fail(f"row={row} is out of range for NAXIS2={nrow} (shape {shape})")
                selector = (lambda a, r=row: a[r, :])
                ctx.notes.append(f"row {row} of the 2D image")
            else:
                if not -ncol <= column < ncol:
                    ctx.fail(f"column={column} is out of range for NAXIS1={ncol} (shape {shape})")
                selector = (lambda a, k=column: a[:, k])
                axis = 2
                ctx.notes.append(f"column {column} of the 2D image")
        elif len(big) == 1:
            # all other axes are 1 long: a 1D spectrum stored with extra axes
            keep = big[0]
            axis = data.ndim - keep  # numpy axis order is reversed FITS order
            selector = (lambda a, k=keep: a.reshape(-1) if a.size == a.shape[k] else a)
            ctx.assume(f"NAXIS={data.ndim} with shape {shape}: read as 1D along FITS axis {axis}")
        elif data.ndim == 2:
            ctx.fail(f"holds a 2D image (NAXIS=2, shape {shape}); expected a 1D spectrum; pass "
                     f"row= (spectral axis along NAXIS1) or column= (along NAXIS2) to take one "
                     f"spectrum of it")
        else:
            ctx.fail(f"holds a {data.ndim}D image (NAXIS={data.ndim}, shape {shape}); expected a "
                     f"1D spectrum (row=/column= work for 2D images only); extract one spectrum "
                     f"first and pass it as arrays")
    flux = np.asarray(selector(data), dtype=float).reshape(-1)
    n = flux.size
    axis_q, kind, medium, extra = _image_axis(header, axis, n, ctx, opts)
    bunit = header.get("BUNIT")
    unc, unc_kind, mask = _image_companions(hdul, index, selector, flux.shape, ctx)
    return dict(axis=axis_q, kind=kind, medium=medium, flux=flux, flux_unit_text=bunit,
                flux_unit_key="BUNIT", unc=unc, unc_kind=unc_kind, mask=mask,
                layout=extra.pop("layout"), extra=extra)


#: Words that name the rows of a row-per-quantity 2D image -> what the row holds.
_ROW_WORDS = {"flux": "flux", "inverse": "ivar", "ivar": "ivar", "invvar": "ivar",
              "inverse_variance": "ivar", "error": "stdev", "err": "stdev", "sigma": "stdev",
              "variance": "variance", "var": "variance", "wavelength": "wave", "wave": "wave",
              "lambda": "wave", "andmask": "mask", "and_mask": "mask", "mask": "mask"}
#: Header keywords that list the rows of such an image, one word per row.
ROW_NAME_KEYWORDS = ("EXTEN0",)


def _row_roles(header, nrow, ctx):
    """{role: row index} of a 2D image whose rows are named in the header, or None."""
    for key in ROW_NAME_KEYWORDS:
        text = header.get(key)
        if not isinstance(text, str):
            continue
        words = text.replace(",", " ").split()
        if len(words) != nrow:
            ctx.notes.append(f"{key} names {len(words)} rows but NAXIS2 = {nrow}; rows not used")
            continue
        roles = {}
        for i, word in enumerate(words):
            role = _ROW_WORDS.get(word.lower())
            if role is not None and role not in roles:
                roles[role] = i
        if "flux" in roles:
            roles["_key"] = key
            roles["_words"] = words
            return roles
    return None


def _read_row_image(hdul, index, data, rows, ctx, opts):
    """A 2D image whose rows are flux, uncertainty, wavelength and mask of one spectrum."""
    header = hdul[index].header
    key, words = rows["_key"], rows["_words"]
    flux = np.asarray(data[rows["flux"]], dtype=float)
    n = flux.size
    ctx.notes.append(f"2D image with one quantity per row ({key} = {' '.join(words)!r}): flux "
                     f"from row {rows['flux']}")
    unc = unc_kind = mask = None
    for kind in ("ivar", "stdev", "variance"):
        if kind in rows:
            unc, unc_kind = np.asarray(data[rows[kind]], dtype=float), kind
            ctx.notes.append(f"uncertainty ({kind}) from row {rows[kind]} ({words[rows[kind]]})")
            break
    if "mask" in rows:
        mask = np.asarray(data[rows["mask"]]) != 0
        ctx.notes.append(f"mask from row {rows['mask']} ({words[rows['mask']]}): nonzero is bad")
    if "wave" in rows:
        values = np.asarray(data[rows["wave"]], dtype=float)
        cunit_text = str(header.get("CUNIT1", "")).strip()
        cunit = _parse_unit(cunit_text) if cunit_text else None
        unit = _length_unit(cunit, values, 1, ctx, opts)
        axis_q, kind, medium, extra = values * unit, "length", None, dict(layout="image-rows")
        ctx.notes.append(f"wavelengths from row {rows['wave']} ({words[rows['wave']]})")
    else:
        axis_q, kind, medium, extra = _image_axis(header, 1, n, ctx, opts)
        extra["layout"] = "image-rows"
    if unc is None or mask is None:
        more_unc, more_kind, more_mask = _image_companions(
            hdul, index, lambda a: a[rows["flux"]] if np.ndim(a) == 2 else a, flux.shape, ctx)
        if unc is None:
            unc, unc_kind = more_unc, more_kind
        if mask is None:
            mask = more_mask
    return dict(axis=axis_q, kind=kind, medium=medium, flux=flux,
                flux_unit_text=header.get("BUNIT"), flux_unit_key="BUNIT", unc=unc,
                unc_kind=unc_kind, mask=mask, layout=extra.pop("layout"), extra=extra)


def _image_axis(header, k, n, ctx, opts):
    """Spectral axis of FITS axis ``k`` with ``n`` pixels: (Quantity, kind, medium, extra)."""
    ctype = str(header.get(f"CTYPE{k}", "")).strip().upper()
    base, _, algo = ctype.partition("-")
    algo = algo.strip("-")
    crval = _float_key(header, f"CRVAL{k}", ctx)
    crpix = _float_key(header, f"CRPIX{k}", ctx)
    cdelt = _float_key(header, f"CDELT{k}", ctx)
    cd = _float_key(header, f"CD{k}_{k}", ctx)
    pc = _float_key(header, f"PC{k}_{k}", ctx, default=1.0)
    dcflag = header.get("DC-FLAG", 0)
    extra = {}
    if base in ("PIXEL", "PIX"):
        ctx.fail(f"keyword CTYPE{k} = {ctype!r}: the axis is in pixels, not a spectral "
                 f"coordinate; expected WAVE, AWAV, FREQ, ENER, WAVN, VRAD or VOPT; pass arrays "
                 f"with a calibrated axis")
    if crval is None and k == 1 and "COEFF0" in header and "COEFF1" in header:
        # log10-linear dispersion of survey files: log10(lambda) = COEFF0 + COEFF1 * (p - 1)
        c0, c1 = _float_key(header, "COEFF0", ctx), _float_key(header, "COEFF1", ctx)
        if c1 == 0:
            ctx.fail("keyword COEFF1 = 0: the wavelength would not change from pixel to pixel; "
                     "expected the log10 step per pixel")
        values = 10.0 ** (c0 + c1 * np.arange(n, dtype=float))
        ctx.notes.append("COEFF0/COEFF1: log10 of the wavelength, linear in the pixel")
        cunit_text = str(header.get("CUNIT1", "")).strip()
        unit = _length_unit(_parse_unit(cunit_text) if cunit_text else None, values, k, ctx,
                            opts, log10=True)
        medium = {"AWAV": "air", "WAVE": "vacuum"}.get(base)
        return values * unit, "length", medium, dict(layout="image-log10")
    if crval is None:
        ctx.fail(f"keyword CRVAL{k} is missing; expected a linear WCS (CRVAL{k}, CDELT{k} or "
                 f"CD{k}_{k}, CRPIX{k}, CTYPE{k}, CUNIT{k}) describing the spectral axis; pass "
                 f"arrays instead if the axis is stored elsewhere")
    if cd is not None:
        delta, dkey = cd, f"CD{k}_{k}"
    elif cdelt is not None:
        delta, dkey = cdelt * pc, f"CDELT{k}"
    else:
        ctx.fail(f"keywords CDELT{k} and CD{k}_{k} are both missing; expected the pixel step")
    if delta == 0:
        ctx.fail(f"keyword {dkey} = 0: the spectral axis would not change from pixel to pixel; "
                 f"expected a nonzero step")
    if crpix is None:
        crpix = 0.0
        ctx.assume(f"CRPIX{k} missing: FITS default 0.0 used (WCS Paper I)")
    pix = np.arange(1, n + 1, dtype=float) - crpix  # FITS pixels count from 1 (Paper I)
    cunit_text = str(header.get(f"CUNIT{k}", "")).strip()
    cunit = _parse_unit(cunit_text) if cunit_text else None
    if cunit_text and cunit is None:
        if opts["spectral_unit"] is None:
            ctx.fail(f"keyword CUNIT{k} = {cunit_text!r} is not a unit astropy understands; "
                     f"expected e.g. 'Angstrom', 'nm', 'Hz', 'keV'; pass spectral_unit=")
        cunit = opts["spectral_unit"]
        ctx.assume(f"CUNIT{k} = {cunit_text!r} unreadable: spectral_unit={cunit} used")

    is_log10 = (dcflag == 1 or str(dcflag).strip() == "1") and base in ("", "LINEAR", "WAVE",
                                                                         "AWAV", "LAMBDA")
    if base in ("", "LINEAR", "LAMBDA", "WAVELENGTH") or (is_log10 and base in ("WAVE", "AWAV")):
        kind = "length"
        medium = "air" if base == "AWAV" else ("vacuum" if base == "WAVE" else None)
        if is_log10:
            values = 10.0 ** (crval + delta * pix)
            layout = "image-log10"
            ctx.notes.append(f"DC-FLAG = 1: CRVAL{k}/{dkey} are log10 of the wavelength")
        else:
            values = crval + delta * pix
            layout = "image-linear"
            if not ctype:
                ctx.assume(f"CTYPE{k} missing: axis read as a linear wavelength")
        unit = _length_unit(cunit, values, k, ctx, opts, log10=is_log10)
        return values * unit, kind, medium, dict(layout=layout)

    if base not in _SPECTRAL_TYPES:
        ctx.fail(f"keyword CTYPE{k} = {ctype!r} is not a spectral coordinate type this reader "
                 f"knows; expected one of {sorted(_SPECTRAL_TYPES)} (FITS WCS Paper III) or "
                 f"LINEAR; pass hdu= for another HDU or pass arrays")
    kind, default_unit = _SPECTRAL_TYPES[base]
    if cunit is None:
        if kind == "length":
            unit = _length_unit(None, crval + delta * pix, k, ctx, opts)
        elif opts["spectral_unit"] is not None:
            unit = opts["spectral_unit"]
            ctx.assume(f"CUNIT{k} missing: spectral_unit={unit} used")
        else:
            unit = default_unit
            ctx.assume(f"CUNIT{k} missing: FITS WCS Paper III default {unit} used for {base}")
    else:
        unit = cunit
    if not unit.is_equivalent(default_unit):
        ctx.fail(f"keyword CUNIT{k} = {cunit_text!r} ({unit}) does not fit CTYPE{k} = {ctype!r}; "
                 f"expected a unit of {kind} such as {default_unit}")
    medium = {"AWAV": "air", "WAVE": "vacuum"}.get(base)
    if algo in ("", "LOG") or (base in ("VELO", "FELO") and algo in ("LSR", "HEL", "OBS", "LSRK",
                                                                      "BAR", "TOP", "GEO")):
        if algo == "LOG":
            # Paper III, logarithmic algorithm: S = S_r exp(w / S_r), w = delta * (p - r)
            values = crval * np.exp(delta * pix / crval)
            layout = "image-log"
        else:
            values = crval + delta * pix
            layout = "image-linear"
        q = values * unit
    else:
        q = _wcs_axis(header, k, n, unit, ctx)
        layout = f"image-{algo.lower()}"
    extra = dict(layout=layout)
    if kind == "velocity":
        q, extra = _velocity_to_frequency(q, base, algo, header, ctx, extra)
        kind = "frequency"
    elif kind == "frequency":
        rest = _rest_frequency(header)
        if rest is not None:
            extra["rest_value"] = rest
    return q, kind, medium, extra


def _length_unit(cunit, values, k, ctx, opts, log10=False):
    if cunit is not None:
        if not cunit.is_equivalent(u.m):
            ctx.fail(f"keyword CUNIT{k} = {cunit} is not a length; expected a wavelength unit "
                     f"such as Angstrom or nm")
        return cunit
    if opts["spectral_unit"] is not None:
        ctx.assume(f"CUNIT{k} missing: spectral_unit={opts['spectral_unit']} used")
        return opts["spectral_unit"]
    top = float(np.nanmax(np.abs(values))) if np.isfinite(values).any() else float("nan")
    if log10 or top > 100:
        ctx.assume(f"CUNIT{k} missing: wavelengths ({top:.6g} at most) read as Angstrom")
        return u.AA
    if 1e-3 > top > 0:
        ctx.assume(f"CUNIT{k} missing: wavelengths ({top:.6g} at most) read as metres "
                   f"(FITS WCS Paper III default)")
        return u.m
    if 100 >= top >= 0.05:
        ctx.assume(f"CUNIT{k} missing: wavelengths ({top:.6g} at most) read as micrometres")
        return u.um
    ctx.fail(f"keyword CUNIT{k} is missing and the wavelengths (up to {top:.6g}) fit no usual "
             f"unit; pass spectral_unit=")


def _wcs_axis(header, k, n, unit, ctx):
    """Non-linear Paper III algorithms through astropy.wcs (world values in the stated unit)."""
    from astropy.wcs import WCS

    sub = fits.Header()
    for key in ("CTYPE", "CRVAL", "CDELT", "CRPIX", "CUNIT"):
        if f"{key}{k}" in header:
            sub[f"{key}1"] = header[f"{key}{k}"]
    if f"CD{k}_{k}" in header:
        sub["CDELT1"] = header[f"CD{k}_{k}"]
    sub["CUNIT1"] = unit.to_string("fits")
    for key in ("RESTFRQ", "RESTFREQ", "RESTWAV", "RESTWAVE", "SPECSYS"):
        if key in header:
            sub[key] = header[key]
    try:
        w = WCS(sub, naxis=1)
        world = w.pixel_to_world_values(np.arange(n, dtype=float))
        wunit = u.Unit(w.wcs.cunit[0])
    except Exception as exc:
        ctx.fail(f"keyword CTYPE{k} = {header.get(f'CTYPE{k}')!r}: astropy.wcs could not evaluate "
                 f"the axis ({type(exc).__name__}: {exc}); check the WCS keywords")
    return (np.asarray(world, dtype=float) * wunit).to(unit, equivalencies=u.spectral())


def _rest_frequency(header):
    for key in ("RESTFRQ", "RESTFREQ"):
        value = header.get(key)
        if isinstance(value, (int, float)) and not isinstance(value, bool) and value > 0:
            return value * u.Hz
    for key in ("RESTWAV", "RESTWAVE"):
        value = header.get(key)
        if isinstance(value, (int, float)) and not isinstance(value, bool) and value > 0:
            return (value * u.m).to(u.Hz, equivalencies=u.spectral())
    return None


def _velocity_to_frequency(q, base, algo, header, ctx, extra):
    rest = _rest_frequency(header)
    if rest is None:
        ctx.fail(f"keyword CTYPE = {base}-{algo} is a velocity axis but RESTFRQ/RESTFREQ (or "
                 f"RESTWAV) is missing; expected the rest frequency to turn velocities into "
                 f"frequencies; add it to the header")
    v = q.to_value(u.m / u.s) / _C_SI
    if base == "VRAD":
        convention = "radio"
    elif base == "VOPT" or base == "FELO":
        convention = "optical"
    elif algo:  # 'VELO-LSR' etc.: the AIPS convention, VELREF >= 256 flags radio velocities
        velref = header.get("VELREF", 0)
        convention = "radio" if isinstance(velref, int) and velref >= 256 else "optical"
    else:  # bare VELO: apparent radial velocity, relativistic (Paper III)
        convention = "relativistic"
    if convention == "radio":
        f = rest.value * (1.0 - v)
    elif convention == "optical":
        f = rest.value / (1.0 + v)
    else:
        with np.errstate(invalid="ignore", divide="ignore"):
            f = rest.value * np.sqrt((1.0 - v) / (1.0 + v))
    if not np.all(np.isfinite(f)) or np.any(f <= 0):
        ctx.fail(f"velocity axis {base} reaches |v| >= c or beyond; expected velocities well "
                 f"below the speed of light; check CUNIT (m/s vs km/s)")
    ctx.notes.append(f"{base} velocity axis converted to frequency with the {convention} "
                     f"convention and rest frequency {rest}")
    extra.update(rest_value=rest, velocity_convention=convention)
    return f * u.Hz, extra


def _image_companions(hdul, index, selector, shape, ctx):
    """Uncertainty and mask from ERR/VAR/IVAR/MASK-like extensions of the same shape."""
    unc = unc_kind = mask = None
    for i, h in enumerate(hdul):
        if i == index or not _has_image(h):
            continue
        name = h.name.upper()
        if name in _ERR_EXTNAMES and unc is None:
            arr = _companion(h, selector, shape, ctx, i, hdul)
            unc, unc_kind = arr.astype(float), _ERR_EXTNAMES[name]
            ctx.notes.append(f"uncertainty ({unc_kind}) from HDU {_hdu_label(hdul, i)}")
        elif name in _MASK_EXTNAMES and mask is None:
            mask = _companion(h, selector, shape, ctx, i, hdul) != 0
            ctx.notes.append(f"mask from HDU {_hdu_label(hdul, i)}")
    return unc, unc_kind, mask


def _companion(h, selector, shape, ctx, i, hdul):
    data = np.asarray(h.data)
    try:
        arr = np.asarray(selector(data)).reshape(-1)
    except (IndexError, ValueError):
        arr = None
    if arr is None or arr.shape != shape:
        ctx.fail(f"extension {_hdu_label(hdul, i)} has shape {data.shape}, which does not match "
                 f"the flux ({shape[0]} pixels); expected the same shape as the flux")
    if not np.issubdtype(arr.dtype, np.number) and arr.dtype != bool:
        ctx.fail(f"extension {_hdu_label(hdul, i)} holds {arr.dtype} data; expected numbers")
    return arr


# ----------------------------------------------------------------------------------------------
# tables


def _column_values(data, name, ctx, row, nrows):
    try:
        col = np.asarray(data[name])
    except Exception as exc:
        ctx.fail(f"column {name!r} could not be read ({type(exc).__name__}: {exc})")
    if col.dtype.kind in "SUO":
        ctx.fail(f"column {name!r} holds text ({col.dtype}); expected numbers")
    if col.dtype.kind == "b":
        col = col.astype(int)
    if col.ndim > 1:  # array-valued cells
        if nrows == 1 and row is None:
            col = col[0]
        elif row is None:
            ctx.fail(f"column {name!r} holds arrays in {nrows} rows; pass row= to pick one")
        else:
            if not -nrows <= row < nrows:
                ctx.fail(f"row={row} is out of range for a table of {nrows} rows")
            col = col[row]
    return np.asarray(col).reshape(-1)


def _read_table(hdul, index, ctx, opts):
    h = hdul[index]
    data = h.data
    cols = list(h.columns)
    names = [c.name for c in cols]
    lower = {c.name.lower(): c for c in cols}
    if not cols or len(data) == 0:
        ctx.fail(f"the table has no rows or no columns (columns {names}); expected at least a "
                 f"wavelength and a flux column")
    nrows = len(data)

    def unit_of(col):
        return (col.unit or "").strip() if isinstance(col.unit, str) else ""

    axis_col = axis_kind = None
    for key, kind in _AXIS_COLUMNS.items():
        if key in lower:
            axis_col, axis_kind = lower[key], kind
            break
    if axis_col is None:
        for col in cols:
            unit = _parse_unit(unit_of(col))
            if unit is not None and _is_spectral(unit):
                axis_col = col
                axis_kind = "by-unit"
                ctx.notes.append(f"spectral column {col.name!r} found by its unit {unit}")
                break
    if axis_col is None:
        ctx.fail(f"no spectral-axis column among {names}; expected a column named one of "
                 f"{sorted(_AXIS_COLUMNS)} (any case) or a column with a spectral TUNIT; pass "
                 f"arrays or hdu= for another HDU")
    flux_col = next((lower[k] for k in _FLUX_COLUMNS if k in lower), None)
    if flux_col is None:
        numeric = [c for c in cols if c is not axis_col and c.name.lower() not in _ERR_COLUMNS
                   and c.name.lower() not in _MASK_COLUMNS]
        ctx.fail(f"no flux column among {names}; expected a column named one of "
                 f"{list(_FLUX_COLUMNS)} (any case)"
                 + (f"; other columns present: {[c.name for c in numeric]}" if numeric else ""))
    err_col = next((lower[k] for k in _ERR_COLUMNS if k in lower), None)
    mask_col = next((lower[k] for k in _MASK_COLUMNS if k in lower), None)

    row = opts["row"]
    if opts["column"] is not None:
        ctx.fail("column= applies to 2D images; for a table pass row= (array-valued cells)")
    axis_v = _column_values(data, axis_col.name, ctx, row, nrows).astype(float)
    flux = _column_values(data, flux_col.name, ctx, row, nrows).astype(float)
    if axis_v.shape != flux.shape:
        ctx.fail(f"columns {axis_col.name!r} ({axis_v.size} values) and {flux_col.name!r} "
                 f"({flux.size} values) differ in length; expected one value per pixel")
    unc = unc_kind = mask = None
    if err_col is not None:
        unc = _column_values(data, err_col.name, ctx, row, nrows).astype(float)
        unc_kind = _ERR_COLUMNS[err_col.name.lower()]
        if unc.shape != flux.shape:
            ctx.fail(f"column {err_col.name!r} has {unc.size} values, flux {flux.size}")
        ctx.notes.append(f"uncertainty ({unc_kind}) from column {err_col.name!r}")
    if mask_col is not None:
        mask = _column_values(data, mask_col.name, ctx, row, nrows) != 0
        if mask.shape != flux.shape:
            ctx.fail(f"column {mask_col.name!r} has {mask.size} values, flux {flux.size}")
        ctx.notes.append(f"mask from column {mask_col.name!r}")

    text = unit_of(axis_col)
    if axis_kind == "log10-length":  # 'log(Angstrom)', 'log10(Angstrom)' name the inner unit
        low = text.lower()
        for head in ("log10(", "log(", "dex("):
            if low.startswith(head) and low.endswith(")"):
                text = text[len(head):-1]
                break
    unit = _parse_unit(text) if text else None
    if text and unit is None and opts["spectral_unit"] is None:
        ctx.fail(f"column {axis_col.name!r} has TUNIT {text!r}, which astropy cannot read; "
                 f"expected a spectral unit such as 'Angstrom'; pass spectral_unit=")
    if unit is None:
        if opts["spectral_unit"] is not None:
            unit = opts["spectral_unit"]
            ctx.assume(f"column {axis_col.name!r} without a readable unit: spectral_unit={unit}")
        else:
            unit = {"length": u.AA, "log10-length": u.AA, "frequency": u.Hz, "energy": u.keV,
                    "wavenumber": 1 / u.cm}[axis_kind]
            ctx.assume(f"column {axis_col.name!r} has no unit: read as {unit}")
    layout = "table"
    if axis_kind == "log10-length":
        # TUNIT may name the wavelength unit the log refers to: 'Angstrom' or 'log(Angstrom)'
        unit = getattr(unit, "physical_unit", unit)
        if unit.is_equivalent(u.dimensionless_unscaled):
            unit = u.AA
            ctx.assume(f"column {axis_col.name!r} is log10 of a wavelength in Angstrom")
        axis_v = 10.0 ** axis_v
        layout = "table-log10"
    if not _is_spectral(unit):
        ctx.fail(f"column {axis_col.name!r} has unit {unit}, not a spectral unit; expected a "
                 f"wavelength, frequency, energy or wavenumber unit")
    q = axis_v * unit
    kind = ("length" if unit.is_equivalent(u.m) else "frequency" if unit.is_equivalent(u.Hz)
            else "energy" if unit.is_equivalent(u.J) else "wavenumber")
    medium = None
    if kind == "length":
        cname = axis_col.name.lower()
        if "air" in cname:
            medium = "air"
        elif "vac" in cname:
            medium = "vacuum"
    extra = {}
    if kind == "frequency":
        rest = _rest_frequency(h.header) or _rest_frequency(hdul[0].header)
        if rest is not None:
            extra["rest_value"] = rest
    funit_text, funit_key = unit_of(flux_col), f"TUNIT of column {flux_col.name!r}"
    if not funit_text:  # survey files state the flux unit once, as BUNIT
        for hdr, label in ((h.header, ctx.hdu), (hdul[0].header, "0 (primary)")):
            text = hdr.get("BUNIT")
            if isinstance(text, str) and text.strip():
                funit_text, funit_key = text.strip(), f"BUNIT of HDU {label}"
                ctx.notes.append(f"flux unit of column {flux_col.name!r} from BUNIT in HDU "
                                 f"{label}")
                break
    return dict(axis=q, kind=kind, medium=medium, flux=flux, flux_unit_text=funit_text,
                flux_unit_key=funit_key, unc=unc, unc_kind=unc_kind,
                mask=mask, layout=layout, extra=extra)


# ----------------------------------------------------------------------------------------------
# assembling the Spectrum


def _build(out, ctx, opts, header=None, facts=None):
    from specutils import Spectrum

    axis = out["axis"]
    flux = np.asarray(out["flux"], dtype=float)
    n = flux.size
    if n < 2:
        ctx.fail(f"the spectrum has {n} pixel(s); expected at least 2")
    values = axis.value
    if not np.all(np.isfinite(values)):
        bad = int(np.count_nonzero(~np.isfinite(values)))
        ctx.fail(f"the spectral axis has {bad} non-finite value(s); expected finite values for "
                 f"every pixel")
    step = np.diff(values)
    reversed_ = False
    if np.all(step < 0):
        order = slice(None, None, -1)
        values, flux = values[order], flux[order]
        for key in ("unc", "mask"):
            if out[key] is not None:
                out[key] = out[key][order]
        axis = values * axis.unit
        reversed_ = True
        ctx.notes.append("descending spectral axis reversed to ascending (flux, uncertainty and "
                         "mask with it)")
    elif not np.all(step > 0):
        first = int(np.argmax(step <= 0))
        ctx.fail(f"the spectral axis is not monotonic (pixel {first + 1} -> {first + 2}: "
                 f"{values[first]:.8g} -> {values[first + 1]:.8g}); expected a strictly "
                 f"increasing or decreasing axis")

    # flux unit
    text = out["flux_unit_text"]
    text = str(text).strip() if text is not None else ""
    funit = _parse_unit(text) if text else None
    if funit is None:
        if opts["flux_unit"] is not None:
            funit = opts["flux_unit"]
            ctx.assume(f"{out['flux_unit_key']} {'missing' if not text else repr(text)}: "
                       f"flux_unit={funit} used")
        else:
            funit = u.dimensionless_unscaled
            ctx.assume(f"{out['flux_unit_key']} "
                       f"{'missing' if not text else repr(text) + ' unreadable'}: flux is "
                       f"dimensionless (pass flux_unit= to set it)")
        target_funit = None
    else:
        target_funit = opts["flux_unit"]

    finite = np.isfinite(flux)
    if not finite.any():
        ctx.fail("every flux value is NaN or infinite; expected at least one finite value")
    mask = ~finite
    if out["mask"] is not None:
        mask |= np.asarray(out["mask"], dtype=bool)
    uncertainty = None
    kind = out["unc_kind"]
    if out["unc"] is not None:
        if opts["uncertainty_type"] is not None:
            kind = opts["uncertainty_type"]
        unc = np.asarray(out["unc"], dtype=float)
        bad = ~np.isfinite(unc) | (unc <= 0)
        mask |= bad
        uncertainty = UNCERTAINTY_TYPES[kind](unc)

    flux_q = flux * funit
    if uncertainty is not None:
        power = {"stdev": 1, "variance": 2, "ivar": -2}[kind]
        uncertainty = UNCERTAINTY_TYPES[kind](unc, unit=funit ** power)
    medium, assumed = _decide_medium(out["kind"], out["medium"], opts["medium"], ctx)
    extra = out["extra"]

    if opts["spectral_unit"] is not None and not any("spectral_unit" in a for a in ctx.assumptions):
        try:
            axis = axis.to(opts["spectral_unit"], equivalencies=u.spectral())
        except u.UnitsError:
            ctx.fail(f"spectral_unit={opts['spectral_unit']} cannot be reached from the axis unit "
                     f"{axis.unit}")
        if axis.value[0] > axis.value[-1]:
            idx = slice(None, None, -1)
            axis, flux_q, mask = axis[idx], flux_q[idx], mask[idx]
            if uncertainty is not None:
                uncertainty = type(uncertainty)(uncertainty.array[idx], unit=uncertainty.unit)
            reversed_ = not reversed_
    if target_funit is not None:
        try:
            newf = flux_q.to(target_funit, equivalencies=u.spectral_density(axis))
        except u.UnitsError:
            ctx.fail(f"flux_unit={target_funit} cannot be reached from the file's flux unit "
                     f"{funit}")
        if uncertainty is not None:
            # the conversion is a per-pixel factor (flux density conversions are linear)
            ratio = (np.ones(flux_q.shape) * funit).to_value(
                target_funit, equivalencies=u.spectral_density(axis))
            if kind == "stdev":
                uncertainty = StdDevUncertainty(uncertainty.array * np.abs(ratio), unit=target_funit)
            elif kind == "variance":
                uncertainty = VarianceUncertainty(uncertainty.array * ratio ** 2,
                                                  unit=target_funit ** 2)
            else:
                with np.errstate(divide="ignore"):
                    uncertainty = InverseVariance(uncertainty.array / ratio ** 2,
                                                  unit=target_funit ** -2)
        flux_q = newf

    zmeta = dict(file=ctx.name, hdu=ctx.hdu_index, hdu_name=ctx.hdu_name, layout=out["layout"], medium=medium,
                 medium_assumed=assumed, uncertainty=kind if uncertainty is not None else None,
                 assumptions=list(ctx.assumptions), notes=list(ctx.notes), reversed=reversed_,
                 header=dict(facts or {}))
    if "rest_value" in extra:
        zmeta["rest_value"] = extra["rest_value"]
    if "velocity_convention" in extra:
        zmeta["velocity_convention"] = extra["velocity_convention"]
    meta = {"zline": zmeta}
    if header is not None:
        meta["header"] = header
    kwargs = {}
    if "rest_value" in extra:
        kwargs["rest_value"] = extra["rest_value"]
        kwargs["velocity_convention"] = extra.get("velocity_convention", "radio")
    try:
        return Spectrum(flux=flux_q, spectral_axis=axis, uncertainty=uncertainty, mask=mask,
                        meta=meta, **kwargs)
    except Exception as exc:
        ctx.fail(f"specutils refused the data ({type(exc).__name__}: {exc})")


def _decide_medium(kind, stated, override, ctx):
    if kind != "length":
        if override is not None:
            ctx.notes.append(f"medium={override!r} ignored: the axis is a {kind}")
        return None, False
    if override is not None:
        if stated is not None and stated != override:
            ctx.notes.append(f"file says {stated}, medium={override!r} overrides it")
        return override, False
    if stated is not None:
        return stated, False
    ctx.assume("the file does not say air or vacuum: vacuum assumed (pass medium='air' if the "
               "wavelengths are in air)")
    return "vacuum", True


def _from_spectrum(spec, opts):
    ctx = _Ctx(str(spec.meta.get("zline", {}).get("file", "<Spectrum>"))
               if isinstance(spec.meta, dict) else "<Spectrum>")
    old = dict(spec.meta.get("zline", {})) if hasattr(spec.meta, "get") else {}
    unit = spec.spectral_axis.unit
    kind = ("length" if unit.is_equivalent(u.m) else "frequency" if unit.is_equivalent(u.Hz)
            else "energy" if unit.is_equivalent(u.J) else "other")
    stated = old.get("medium") if not old.get("medium_assumed", True) else None
    if opts["medium"] is None and old.get("medium") is not None and "medium_assumed" in old:
        medium, assumed = old["medium"], old["medium_assumed"]
    else:
        medium, assumed = _decide_medium(kind, stated, opts["medium"], ctx)
    unc = spec.uncertainty
    ukind = next((k for k, cls in UNCERTAINTY_TYPES.items() if isinstance(unc, cls)), None)
    zmeta = dict(file=old.get("file"), hdu=old.get("hdu"), hdu_name=old.get("hdu_name"), layout=old.get("layout", "spectrum"),
                 medium=medium, medium_assumed=assumed, uncertainty=ukind,
                 assumptions=list(old.get("assumptions", [])) + ctx.assumptions,
                 notes=list(old.get("notes", [])) + ctx.notes,
                 reversed=old.get("reversed", False), header=dict(old.get("header", {})))
    meta = dict(spec.meta)
    meta["zline"] = zmeta
    out = copy.copy(spec)  # the caller's spectrum keeps its own meta
    out.meta = meta
    return out


def spectrum_from_arrays(spectral_axis, flux, uncertainty=None, mask=None, medium=None,
                         uncertainty_type=None):
    """Build a spectrum from Quantities, with the same checks and meta as `read_spectrum`.

    Parameters
    ----------
    spectral_axis : `~astropy.units.Quantity` ['length', 'frequency', 'energy', 'wavenumber']
    flux : `~astropy.units.Quantity`
    uncertainty : `~astropy.units.Quantity`, `~astropy.nddata.NDUncertainty` or array, optional
        A bare array is read as ``uncertainty_type`` (default 'stdev') in flux units.
    mask : array of bool, optional
    medium : {'vacuum', 'air'}, optional
    uncertainty_type : {'stdev', 'variance', 'ivar'}, optional
    """
    ctx = _Ctx("<arrays>")
    if not isinstance(spectral_axis, u.Quantity) or not _is_spectral(spectral_axis.unit):
        ctx.fail(f"spectral_axis must be a Quantity with a spectral unit (length, frequency, "
                 f"energy, wavenumber); got {type(spectral_axis).__name__}"
                 f"{' in ' + str(spectral_axis.unit) if isinstance(spectral_axis, u.Quantity) else ''}")
    if not isinstance(flux, u.Quantity):
        ctx.fail(f"flux must be a Quantity (use u.dimensionless_unscaled for relative flux); got "
                 f"{type(flux).__name__}")
    axis = np.asarray(spectral_axis.value, dtype=float).reshape(-1)
    f = np.asarray(flux.value, dtype=float).reshape(-1)
    if axis.shape != f.shape:
        ctx.fail(f"spectral_axis has {axis.size} values and flux {f.size}; expected equal length")
    kind = uncertainty_type or "stdev"
    unc = None
    if uncertainty is not None:
        for k, cls in UNCERTAINTY_TYPES.items():
            if isinstance(uncertainty, cls):
                kind = uncertainty_type or k
                uncertainty = uncertainty.quantity if uncertainty.unit is not None else \
                    uncertainty.array
                break
        power = {"stdev": 1, "variance": 2, "ivar": -2}[kind]
        if isinstance(uncertainty, u.Quantity):
            try:
                unc = uncertainty.to_value(flux.unit ** power)
            except u.UnitsError:
                ctx.fail(f"uncertainty in {uncertainty.unit} does not fit a {kind} of flux in "
                         f"{flux.unit}; expected {flux.unit ** power}")
        else:
            unc = np.asarray(uncertainty, dtype=float)
        unc = np.asarray(unc, dtype=float).reshape(-1)
        if unc.shape != f.shape:
            ctx.fail(f"uncertainty has {unc.size} values, flux {f.size}")
    m = None if mask is None else np.asarray(mask, dtype=bool).reshape(-1)
    ukind = ("length" if spectral_axis.unit.is_equivalent(u.m) else
             "frequency" if spectral_axis.unit.is_equivalent(u.Hz) else
             "energy" if spectral_axis.unit.is_equivalent(u.J) else "wavenumber")
    out = dict(axis=axis * spectral_axis.unit, kind=ukind, medium=None, flux=f,
               flux_unit_text=flux.unit.to_string(), flux_unit_key="flux", unc=unc,
               unc_kind=kind if unc is not None else None, mask=m, layout="arrays", extra={})
    opts = dict(medium=medium, uncertainty_type=None, spectral_unit=None, flux_unit=None)
    if f.size and flux.unit == u.dimensionless_unscaled:
        out["flux_unit_text"] = "dimensionless"
    return _build(out, ctx, opts)


# ----------------------------------------------------------------------------------------------
# description


def describe_spectrum(spectrum):
    """Summarise a spectrum as a JSON-ready dict (the ``zline info`` keys).

    Returns
    -------
    dict
        ``file, hdu`` (index), ``hdu_name`` (EXTNAME), ``layout, n_pixels, spectral_min, spectral_max, spectral_unit, medium,
        medium_assumed, flux_unit, uncertainty, n_masked, assumptions, notes, header`` and, when
        known, ``rest_value`` (with ``rest_unit``) and ``velocity_convention``.
    """
    from specutils import Spectrum

    if not isinstance(spectrum, Spectrum):
        raise SpectrumFormatError(f"describe_spectrum expects a specutils Spectrum; got "
                                  f"{type(spectrum).__name__}")
    z = spectrum.meta.get("zline", {}) if hasattr(spectrum.meta, "get") else {}
    axis = spectrum.spectral_axis
    unc = spectrum.uncertainty
    ukind = next((k for k, cls in UNCERTAINTY_TYPES.items() if isinstance(unc, cls)), None)
    mask = spectrum.mask
    info = dict(
        file=z.get("file"), hdu=z.get("hdu"), hdu_name=z.get("hdu_name"), layout=z.get("layout", "spectrum"),
        n_pixels=int(axis.size), spectral_min=float(np.min(axis.value)),
        spectral_max=float(np.max(axis.value)), spectral_unit=axis.unit.to_string(),
        medium=z.get("medium"), medium_assumed=bool(z.get("medium_assumed", False)),
        flux_unit=spectrum.flux.unit.to_string(), uncertainty=ukind,
        n_masked=int(np.count_nonzero(mask)) if mask is not None else 0,
        reversed=bool(z.get("reversed", False)),
        assumptions=list(z.get("assumptions", [])), notes=list(z.get("notes", [])),
        header=dict(z.get("header", {})))
    if z.get("rest_value") is not None:
        info["rest_value"] = float(z["rest_value"].value)
        info["rest_unit"] = z["rest_value"].unit.to_string()
    if z.get("velocity_convention"):
        info["velocity_convention"] = z["velocity_convention"]
    return info
