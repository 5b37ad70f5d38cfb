"""The spectral axis of an image HDU from its World Coordinate System keywords.

FITS WCS Paper I for the linear axis, Paper III for spectral types and the ``-LOG`` algorithm;
other Paper III algorithm codes go through :mod:`astropy.wcs`.  A unit the header does not state
is chosen only where the values leave no doubt; where they fit two readings the file is refused
with the keyword to add.
"""

import numpy as np
import astropy.units as u
from astropy.constants import c as _c
from astropy.io import fits

from ._base import float_key, parse_unit

__all__ = ["SPECTRAL_TYPES", "image_axis", "length_unit", "rest_frequency", "iraf_unit"]

_C_SI = _c.to_value(u.m / u.s)

# FITS WCS Paper III spectral types: physical kind and the default (SI) unit.
SPECTRAL_TYPES = {
    "WAVE": ("length", u.m), "AWAV": ("length", u.m), "FREQ": ("frequency", u.Hz),
    "ENER": ("energy", u.J), "WAVN": ("wavenumber", 1 / u.m),
    "VRAD": ("velocity", u.m / u.s), "VOPT": ("velocity", u.m / u.s),
    "VELO": ("velocity", u.m / u.s), "FELO": ("velocity", u.m / u.s),
}



def image_axis(header, k, n, ctx, opts):
    """Spectral axis of FITS axis ``k`` with ``n`` pixels: (Quantity, kind, medium, extra)."""
    ctype = str(header.get(f"CTYPE{k}", "")).strip().upper()
    base, _, algo = ctype.partition("-")
    algo = algo.strip("-")
    crval = float_key(header, f"CRVAL{k}", ctx)
    crpix = float_key(header, f"CRPIX{k}", ctx)
    cdelt = float_key(header, f"CDELT{k}", ctx)
    cd = float_key(header, f"CD{k}_{k}", ctx)
    pc = float_key(header, f"PC{k}_{k}", ctx, default=1.0)
    dcflag = header.get("DC-FLAG", 0)
    extra = {}
    if base in ("PIXEL", "PIX"):
        ctx.fail(f"keyword CTYPE{k} = {ctype!r}: the axis is in pixels, not a spectral "
                 f"coordinate; expected WAVE, AWAV, FREQ, ENER, WAVN, VRAD or VOPT; pass arrays "
                 f"with a calibrated axis")
    if crval is None and k == 1 and "COEFF0" in header and "COEFF1" in header:
        # log10-linear dispersion of survey files: log10(lambda) = COEFF0 + COEFF1 * (p - 1)
        c0, c1 = float_key(header, "COEFF0", ctx), float_key(header, "COEFF1", ctx)
        if c1 == 0:
            ctx.fail("keyword COEFF1 = 0: the wavelength would not change from pixel to pixel; "
                     "expected the log10 step per pixel")
        values = 10.0 ** (c0 + c1 * np.arange(n, dtype=float))
        ctx.notes.append("COEFF0/COEFF1: log10 of the wavelength, linear in the pixel")
        cunit_text = str(header.get("CUNIT1", "")).strip()
        cunit = parse_unit(cunit_text) if cunit_text else iraf_unit(header, k, ctx)
        unit = length_unit(cunit, values, k, ctx, opts, log10=True, header=header)
        medium = {"AWAV": "air", "WAVE": "vacuum"}.get(base)
        return values * unit, "length", medium, dict(layout="image-log10", source="COEFF0/COEFF1")
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
        ctx.assume("axis-reference-default",
                   f"CRPIX{k} missing: FITS default 0.0 used (WCS Paper I)")
    pix = np.arange(1, n + 1, dtype=float) - crpix  # FITS pixels count from 1 (Paper I)
    cunit_text = str(header.get(f"CUNIT{k}", "")).strip()
    cunit = parse_unit(cunit_text) if cunit_text else None
    if cunit_text and cunit is None:
        if opts["spectral_unit"] is None:
            ctx.fail(f"keyword CUNIT{k} = {cunit_text!r} is not a unit astropy understands; "
                     f"expected e.g. 'Angstrom', 'nm', 'Hz', 'keV'; pass spectral_unit=")
        cunit = opts["spectral_unit"]
        ctx.assume("axis-unit-from-option",
                   f"CUNIT{k} = {cunit_text!r} unreadable: spectral_unit={cunit} used")
    if cunit is None:
        cunit = iraf_unit(header, k, ctx)

    stated_log = str(header.get("WFITTYPE", "")).strip().upper() == "LOG-LINEAR"
    is_log10 = ((dcflag == 1 or str(dcflag).strip() == "1" or (stated_log and "DC-FLAG" not in
                                                                 header))
                and base in ("", "LINEAR", "WAVE", "AWAV", "LAMBDA"))
    if base in ("", "LINEAR", "LAMBDA", "WAVELENGTH") or (is_log10 and base in ("WAVE", "AWAV")):
        kind = "length"
        medium = "air" if base == "AWAV" else ("vacuum" if base == "WAVE" else None)
        if is_log10:
            values = 10.0 ** (crval + delta * pix)
            layout = "image-log10"
            ctx.notes.append(f"{'DC-FLAG = 1' if 'DC-FLAG' in header else 'WFITTYPE'}: "
                             f"CRVAL{k}/{dkey} are log10 of the wavelength")
        else:
            values = crval + delta * pix
            layout = "image-linear"
            if not ctype:
                ctx.assume("axis-type-assumed",
                           f"CTYPE{k} missing: axis read as a linear wavelength")
        unit = length_unit(cunit, values, k, ctx, opts, log10=is_log10, header=header)
        return values * unit, kind, medium, dict(layout=layout, source=f"CRVAL{k}/{dkey}")

    if algo == "TAB":
        ctx.fail(f"keyword CTYPE{k} = {ctype!r}: a lookup-table axis (FITS WCS Paper III, -TAB) "
                 f"is not read; expected a linear, -LOG or -F2W-like axis, or a table HDU with a "
                 f"wavelength column; pass hdu= or arrays")
    if base not in SPECTRAL_TYPES:
        ctx.fail(f"keyword CTYPE{k} = {ctype!r} is not a spectral coordinate type this reader "
                 f"knows; expected one of {sorted(SPECTRAL_TYPES)} (FITS WCS Paper III) or "
                 f"LINEAR; pass hdu= for another HDU or pass arrays")
    kind, default_unit = SPECTRAL_TYPES[base]
    if cunit is None:
        if kind == "length":
            unit = length_unit(None, crval + delta * pix, k, ctx, opts, header=header)
        elif opts["spectral_unit"] is not None:
            unit = opts["spectral_unit"]
            ctx.assume("axis-unit-from-option", f"CUNIT{k} missing: spectral_unit={unit} used")
        elif kind == "velocity" and abs(delta) < _MIN_MS_CHANNEL:
            ctx.fail(f"keyword CUNIT{k} is missing on the {base} axis and its step {dkey} = "
                     f"{delta:g} fits km/s as well as the FITS default m/s; add CUNIT{k} = "
                     f"'km/s' or 'm/s' to the header (or pass spectral_unit=)")
        else:
            unit = default_unit
            ctx.assume("axis-unit-assumed",
                       f"CUNIT{k} missing: FITS WCS Paper III default {unit} used for {base}")
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
    extra = dict(layout=layout, source=f"CRVAL{k}/{dkey}/CUNIT{k}")
    if kind == "velocity":
        q, extra = _velocity_to_frequency(q, base, algo, header, ctx, extra)
        kind = "frequency"
    elif kind == "frequency":
        rest = rest_frequency(header)
        if rest is not None:
            extra["rest_value"] = rest
    return q, kind, medium, extra


#: A velocity step below this (in m/s) could as well be km/s: CUNIT is then required.
_MIN_MS_CHANNEL = 100.0
#: Wavelength values without a unit: above this they are read as Angstrom, below (down to
#: ``_NM_OR_AA_LOW``) they fit nm as well as Angstrom and the unit is required.
_AA_ABOVE = 2500.0
_NM_OR_AA_LOW = 100.0
#: log10 of wavelengths in Angstrom (250 A to 300 um) with a small step look like micrometres.
_LOG10_RANGE = (2.4, 5.5)
_LOG10_MAX_STEP = 0.01


def iraf_unit(header, k, ctx):
    """The axis unit from an IRAF ``WATk_001 = '... units=angstroms'`` card, or None."""
    text = header.get(f"WAT{k}_001")
    if not isinstance(text, str) or "units=" not in text:
        return None
    word = text.split("units=", 1)[1].split()[0] if text.split("units=", 1)[1].split() else ""
    unit = parse_unit(word)
    if unit is not None:
        ctx.notes.append(f"axis unit {unit} from WAT{k}_001 = {text!r}")
    return unit


def length_unit(cunit, values, k, ctx, opts, log10=False, header=None):
    """The unit of wavelength ``values`` on FITS axis ``k`` (CUNITk parsed as ``cunit``).

    Without CUNITk the unit is chosen only where the values fit one unit; where they fit two
    (nm or Angstrom; log10 of Angstrom or micrometres) the file is refused with the keyword to add.
    """
    if cunit is not None:
        if not cunit.is_equivalent(u.m):
            ctx.fail(f"keyword CUNIT{k} = {cunit} is not a length; expected a wavelength unit "
                     f"such as Angstrom or nm")
        return cunit
    if opts["spectral_unit"] is not None:
        ctx.assume("axis-unit-from-option",
                   f"CUNIT{k} missing: spectral_unit={opts['spectral_unit']} used")
        return opts["spectral_unit"]
    finite = np.abs(values[np.isfinite(values)])
    if finite.size == 0:
        ctx.fail(f"the wavelengths of axis {k} are not finite; expected finite values")
    top, low = float(finite.max()), float(finite.min())
    step = float(np.median(np.abs(np.diff(values)))) if values.size > 1 else 0.0
    if log10:
        ctx.assume("axis-unit-assumed", f"CUNIT{k} missing: log10 wavelengths "
                   f"({np.log10(top):.6g} at most) read as log10 of Angstrom")
        return u.AA
    if top > _AA_ABOVE:
        ctx.assume("axis-unit-assumed",
                   f"CUNIT{k} missing: wavelengths ({top:.6g} at most) read as Angstrom")
        return u.AA
    if top > _NM_OR_AA_LOW:
        ctx.fail(f"keyword CUNIT{k} is missing and the wavelengths ({low:.6g} to {top:.6g}) fit "
                 f"nm as well as Angstrom; add CUNIT{k} to the header or pass spectral_unit=")
    if (_LOG10_RANGE[0] <= low and top <= _LOG10_RANGE[1] and 0 < step < _LOG10_MAX_STEP
            and not (header is not None and "DC-FLAG" in header)):
        ctx.fail(f"keywords CUNIT{k} and DC-FLAG are missing and the values ({low:.6g} to "
                 f"{top:.6g}, step {step:.3g}) look like log10 of wavelengths in Angstrom as much "
                 f"as micrometres; add DC-FLAG = 1 (log10) or CUNIT{k} = 'um', or pass "
                 f"spectral_unit=")
    if 1e-3 > top > 0:
        ctx.assume("axis-unit-assumed", f"CUNIT{k} missing: wavelengths ({top:.6g} at most) "
                   f"read as metres (FITS WCS Paper III default)")
        return u.m
    if _NM_OR_AA_LOW >= top >= 0.05:
        ctx.assume("axis-unit-assumed",
                   f"CUNIT{k} missing: wavelengths ({top:.6g} at most) read as micrometres")
        return u.um
    ctx.fail(f"keyword CUNIT{k} is missing and the wavelengths (up to {top:.6g}) fit no usual "
             f"unit; add CUNIT{k} or pass spectral_unit=")


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
    except Exception:  # damaged data: said in plain words below
        ctx.fail(f"keyword CTYPE{k} = {header.get(f'CTYPE{k}')!r}: astropy.wcs could not evaluate "
                 f"the axis; check the WCS keywords of that algorithm (e.g. the lookup table "
                 f"a -TAB axis needs); pass arrays if the axis is stored elsewhere")
    return (np.asarray(world, dtype=float) * wunit).to(unit, equivalencies=u.spectral())


def rest_frequency(header):
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
    rest = rest_frequency(header)
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

