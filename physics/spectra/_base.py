"""Shared pieces of the spectrum reader: the error, the reading context that records every
assumption, unit parsing, HDU helpers and header keywords."""

import math
import re
import warnings

import numpy as np
import astropy.units as u
from astropy.io import fits

__all__ = ["SpectrumFormatError", "Ctx", "MEDIA", "UNCERTAINTY_TYPES", "UNCERTAINTY_KINDS",
           "uncertainty_types", "uncertainty_kind", "HEADER_FACTS",
           "MEDIUM_KEYWORDS", "FLAG_CODES",
           "FLUX_EXTNAMES", "ERR_EXTNAMES", "MASK_EXTNAMES", "parse_unit", "is_spectral",
           "choose", "hdu_label", "has_image", "is_table", "hdu_list_text", "float_key",
           "medium_keyword", "apply_medium_keywords", "header_facts"]


#: Accepted values of ``medium=``.
MEDIA = {"vacuum": "wavelengths measured in vacuum", "air": "wavelengths measured in standard air"}

#: Accepted values of ``uncertainty_type=`` and the power of the flux unit each one carries.
UNCERTAINTY_KINDS = {"stdev": 1, "variance": 2, "ivar": -2}


def uncertainty_types():
    """{kind: astropy.nddata class} (imported here, not at start-up: astropy.nddata is slow)."""
    from astropy.nddata import InverseVariance, StdDevUncertainty, VarianceUncertainty

    return {"stdev": StdDevUncertainty, "variance": VarianceUncertainty, "ivar": InverseVariance}


def uncertainty_kind(uncertainty):
    """The key of `UNCERTAINTY_TYPES` for an astropy uncertainty object, or None."""
    if uncertainty is None:
        return None
    return next((k for k, cls in uncertainty_types().items() if isinstance(uncertainty, cls)),
                None)


def __getattr__(name):
    # ``UNCERTAINTY_TYPES`` (accepted ``uncertainty_type=`` values -> astropy class) stays
    # public but imports astropy.nddata only when asked for.
    if name == "UNCERTAINTY_TYPES":
        return uncertainty_types()
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")

#: Header keywords copied into ``meta["zline"]["header"]`` when present.
HEADER_FACTS = ("OBJECT", "DATE-OBS", "MJD-OBS", "OBSGEO-X", "OBSGEO-Y", "OBSGEO-Z", "SITELAT",
                "SITELONG", "SITEELEV", "RA", "DEC", "EXPTIME", "SPECSYS", "BUNIT", "TELESCOP",
                "INSTRUME", "RESTFRQ", "RESTFREQ", "RESTWAV")

#: Header keywords that state the medium of the wavelengths, and how their values read.
MEDIUM_KEYWORDS = {"VACUUM": "T means vacuum, F means air",
                   "AIRORVAC": "'air' or 'vac'",
                   "VAC_AIR": "'air' or 'vac'"}

#: EXTNAMEs of image extensions holding the flux, its uncertainty (and kind) and a mask.
FLUX_EXTNAMES = ("FLUX", "SCI", "DATA", "SPECTRUM", "SPEC")
ERR_EXTNAMES = {
    "ERR": "stdev", "ERROR": "stdev", "SIGMA": "stdev", "STD": "stdev", "STDDEV": "stdev",
    "UNCERT": "stdev", "UNCERTAINTY": "stdev", "NOISE": "stdev", "VAR": "variance",
    "VARIANCE": "variance", "IVAR": "ivar", "INVVAR": "ivar", "INVERSE_VARIANCE": "ivar",
}
MASK_EXTNAMES = ("MASK", "DQ", "QUALITY", "BADPIX", "FLAGS")


class SpectrumFormatError(ValueError):
    """A source could not be read as a 1D spectrum.

    The message names the file, the HDU and keyword or column, what was expected, what was found
    and what to try.
    """


#: Codes of the assumptions recorded in ``meta["zline"]["flags"]`` (stable, machine-readable).
FLAG_CODES = {
    "medium-assumed": "the file does not say air or vacuum; vacuum was assumed",
    "medium-conflict": "a medium keyword contradicts the axis type",
    "axis-type-assumed": "no axis type (CTYPE); a linear wavelength was assumed",
    "axis-unit-assumed": "the axis unit is not stated; a unit was chosen from the values",
    "axis-unit-from-option": "the axis unit is not stated or unreadable; spectral_unit= was used",
    "axis-reference-default": "CRPIXn is missing; the FITS default was used",
    "axis-log10-assumed": "a log10 axis column without a unit; log10 of Angstrom was assumed",
    "flux-unit-missing": "no flux unit in the file; the flux is dimensionless",
    "flux-unit-unreadable": "the flux unit in the file cannot be read; the flux is dimensionless",
    "flux-unit-from-option": "the file's flux unit is missing or unreadable; flux_unit= was used",
    "image-extra-axes": "an N-dimensional image with one long axis was read as 1D",
    "file-truncated": "the file is shorter than its headers say; data may be missing",
    "file-repaired": "astropy repaired or ignored damaged header cards while reading",
    "extension-missing": "the header promises more extensions than the file holds",
    "mask-whole-spectrum": "the mask marks nearly every pixel bad (a whole-spectrum flag); "
                           "it was not applied",
}


class Ctx:
    """Where we are in a source, for error messages and the record of assumptions."""

    def __init__(self, name):
        self.name = name
        self.hdu = None
        self.hdu_index = None
        self.hdu_name = None
        self.flags = []
        self.notes = []
        self.structure = None  # what _fitscheck found in the raw headers, when it ran

    @property
    def assumptions(self):
        """The messages of the flags, in order (the historical list of strings)."""
        return [flag["message"] for flag in self.flags]

    def where(self):
        return f"{self.name!s}" + (f", HDU {self.hdu}" if self.hdu is not None else "")

    def fail(self, what):
        raise SpectrumFormatError(f"{self.where()}: {what}")

    def assume(self, code, text):
        """Record a guess: ``code`` is one of `FLAG_CODES`, ``text`` says what and how to fix it."""
        if code not in FLAG_CODES:  # a programming error, never a user's
            raise KeyError(f"unknown flag code {code!r}; add it to FLAG_CODES")
        if not any(f["code"] == code and f["message"] == text for f in self.flags):
            self.flags.append({"code": code, "message": text})


# ----------------------------------------------------------------------------------------------
# units



#: Spellings of the Angstrom in survey headers that astropy does not parse ('1E-17 erg/cm^2/s/Ang').
_ANGSTROM_SPELLINGS = re.compile(r"(?<![A-Za-z])(Ang|Angs|Angstroms|angstroms|ang)(?![A-Za-z])")


def parse_unit(text):
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
            return fix_angstrom(unit)
    return None


def fix_angstrom(unit):
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


def is_spectral(unit):
    try:
        return unit.is_equivalent(u.m, equivalencies=u.spectral())
    except (AttributeError, TypeError):
        return False



# ----------------------------------------------------------------------------------------------
# HDUs and header keywords


def choose(ctx, hdul, index):
    ctx.hdu = hdu_label(hdul, index)
    ctx.hdu_index = int(index)
    ctx.hdu_name = hdul[index].name or None


def hdu_label(hdul, index):
    name = hdul[index].name
    return f"{index} ({name})" if name else f"{index}"


def has_image(h):
    return (isinstance(h, (fits.PrimaryHDU, fits.ImageHDU, fits.CompImageHDU))
            and h.header.get("NAXIS", 0) > 0 and h.data is not None and h.data.size > 0)


def is_table(h):
    return isinstance(h, (fits.BinTableHDU, fits.TableHDU)) and h.data is not None


def hdu_list_text(hdul):
    parts = []
    for i, h in enumerate(hdul):
        shape = getattr(h, "shape", None) if not is_table(h) else None
        kind = type(h).__name__
        parts.append(f"{i}:{h.name or '-'}({kind}{', shape ' + str(shape) if shape else ''})")
    return ", ".join(parts)



def float_key(header, key, ctx, default=None):
    if key not in header:
        return default
    try:
        value = header[key]
    except Exception:  # astropy's VerifyError on an unparsable card
        ctx.fail(f"keyword {key} has an unparsable value; expected a "
                 f"finite number; fix the header card")
    if isinstance(value, bool) or not isinstance(value, (int, float, np.integer, np.floating)):
        ctx.fail(f"keyword {key} = {value!r} is not a number; expected a finite number; fix the "
                 f"header or pass arrays")
    value = float(value)
    if not math.isfinite(value):
        ctx.fail(f"keyword {key} = {value} is not finite; expected a finite number")
    return value



def medium_keyword(header):
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


def apply_medium_keywords(out, headers, ctx):
    """Take the medium from VACUUM/AIRORVAC-style keywords where the axis itself says nothing."""
    for header, label in headers:
        medium, card = medium_keyword(header)
        if medium is None:
            continue
        if out["medium"] is None:
            out["medium"] = medium
            ctx.notes.append(f"medium {medium} from {card} in HDU {label}")
        elif out["medium"] != medium:
            ctx.assume("medium-conflict", f"{card} in HDU {label} contradicts the axis type, "
                       f"which says {out['medium']}; the axis type is kept (pass medium= to "
                       f"choose)")
        return


def header_facts(header, primary):
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

