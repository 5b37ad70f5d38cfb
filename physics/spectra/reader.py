"""`read_spectrum`: from a path, bytes, an HDU list, arrays or a Spectrum to a checked
`specutils.Spectrum` with every assumption recorded; `read_light`: the same reading into a
`LightSpectrum`, without importing specutils (``zline info`` starts faster)."""

import copy
import io
import os
import sys
import warnings

import numpy as np
import astropy.units as u
from astropy.io import fits

from ._base import (MEDIA, UNCERTAINTY_KINDS, Ctx, SpectrumFormatError, apply_medium_keywords,
                    header_facts, is_spectral, uncertainty_kind, uncertainty_types)
from ._build import build, decide_medium
from ._fitscheck import check_structure, record_warnings
from .light import to_spectrum
from .registry import read_hdu, select_hdu

__all__ = ["read_spectrum", "read_light", "spectrum_from_arrays"]



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

    opts = _options(hdu, medium, row, column, uncertainty_type, spectral_unit, flux_unit)
    if isinstance(source, Spectrum):
        return _from_spectrum(source, opts)
    return _read(source, opts, to_spectrum)


def read_light(source, hdu=None, medium=None, row=None, column=None, uncertainty_type=None,
               spectral_unit=None, flux_unit=None):
    """Read a 1D spectrum as `read_spectrum` does, into a `LightSpectrum` (no specutils import).

    The parameters, checks, errors and ``meta`` are those of `read_spectrum` (a specutils
    ``Spectrum`` is not accepted as ``source``); `describe_spectrum` takes the result.

    Examples
    --------
    >>> import astropy.units as u
    >>> light = read_light(([6562.0, 6563.0, 6564.0] * u.AA, [1.0, 3.0, 1.0] * u.Jy))
    >>> light.meta["zline"]["layout"], light.meta["zline"]["medium"]
    ('arrays', 'vacuum')
    """
    opts = _options(hdu, medium, row, column, uncertainty_type, spectral_unit, flux_unit)
    specutils = sys.modules.get("specutils")
    if specutils is not None and isinstance(source, specutils.Spectrum):
        raise SpectrumFormatError("read_light reads files, bytes, HDU lists and arrays; the "
                                  "source is already a specutils Spectrum (use read_spectrum)")
    return _read(source, opts, None)


def _options(hdu, medium, row, column, uncertainty_type, spectral_unit, flux_unit):
    if medium is not None and medium not in MEDIA:
        raise SpectrumFormatError(f"medium={medium!r} is not accepted; expected one of "
                                  f"{sorted(MEDIA)} or None")
    if uncertainty_type is not None and uncertainty_type not in UNCERTAINTY_KINDS:
        raise SpectrumFormatError(f"uncertainty_type={uncertainty_type!r} is not accepted; "
                                  f"expected one of {sorted(UNCERTAINTY_KINDS)} or None")
    return dict(hdu=hdu, medium=medium, row=row, column=column,
                uncertainty_type=uncertainty_type,
                spectral_unit=_user_unit(spectral_unit, "spectral_unit"),
                flux_unit=_user_unit(flux_unit, "flux_unit"))


def _read(source, opts, finish):
    """The spectrum in ``source``: a `LightSpectrum`, or ``finish(light, ctx)`` of it."""
    def done(light, ctx):
        return light if finish is None else finish(light, ctx)

    medium, uncertainty_type = opts["medium"], opts["uncertainty_type"]
    if isinstance(source, fits.HDUList):
        ctx = Ctx(source.filename() or "<HDUList>")
        return _guard(ctx, lambda: done(_from_hdulist(source, ctx, opts), ctx))
    if isinstance(source, (tuple, list)):
        if not 2 <= len(source) <= 3:
            raise SpectrumFormatError(f"a tuple source must be (spectral_axis, flux[, uncertainty]);"
                                      f" got {len(source)} items")
        return done(*_light_from_arrays(*source, medium=medium,
                                        uncertainty_type=uncertainty_type))
    if isinstance(source, dict):
        keys = {"spectral_axis", "flux", "uncertainty", "mask"}
        if not {"spectral_axis", "flux"} <= set(source) <= keys:
            raise SpectrumFormatError(f"a dict source needs the keys 'spectral_axis' and 'flux' "
                                      f"(optional 'uncertainty', 'mask'); got {sorted(source)}")
        return done(*_light_from_arrays(**source, medium=medium,
                                        uncertainty_type=uncertainty_type))

    if isinstance(source, (bytes, bytearray, memoryview)):
        ctx = Ctx("<uploaded bytes>")
        data = bytes(source)
        if not data:
            ctx.fail("the upload is empty (0 bytes); expected the contents of a FITS file")
        return _guard(ctx, lambda: done(_open_and_read(io.BytesIO(data), ctx, opts), ctx))
    if isinstance(source, (str, os.PathLike)):
        path = os.fspath(source)
        ctx = Ctx(path)
        if not os.path.exists(path):
            ctx.fail("no such file; check the path")
        if os.path.isdir(path):
            ctx.fail("this is a directory; expected a FITS file")
        if os.path.getsize(path) == 0:
            ctx.fail("the file is empty (0 bytes); expected a FITS file")
        return _guard(ctx, lambda: done(_open_and_read(path, ctx, opts), ctx))
    if hasattr(source, "read"):
        ctx = Ctx(getattr(source, "name", "<file object>"))
        return _guard(ctx, lambda: done(_open_and_read(source, ctx, opts), ctx))
    raise SpectrumFormatError(
        f"source of type {type(source).__name__} is not accepted; expected a path, bytes, an "
        f"HDUList, a specutils Spectrum, a (spectral_axis, flux[, uncertainty]) tuple or a dict")


def _user_unit(value, name):
    if value is None:
        return None
    try:
        return u.Unit(value)
    except (ValueError, TypeError):
        raise SpectrumFormatError(f"{name}={value!r} is not a unit astropy understands; expected "
                                  f"e.g. 'Angstrom', 'nm', 'GHz', 'keV'") from None


def _guard(ctx, fn):
    """Run a reader; every exception that is not already ours becomes a SpectrumFormatError
    in plain words (never a Python exception name or its text)."""
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            spec = fn()
    except SpectrumFormatError:
        raise
    except MemoryError:
        ctx.fail("not enough memory to read the data; the header states a size the file cannot "
                 "hold (check NAXISn, TFORMn and the file size)")
    except Exception:  # astropy/numpy raise many kinds on damaged files
        ctx.fail("could not be read as FITS: a header or the data is damaged where the header "
                 "keywords were checked as valid; expected a complete FITS file with a 1D "
                 "spectrum; check the file is not truncated or corrupt (astropy's `fitsinfo "
                 "FILE` lists what it can read)")
    record_warnings(spec, caught)
    return spec


def _open_and_read(target, ctx, opts):
    structure, target = check_structure(target, ctx)
    try:
        hdul = fits.open(target, memmap=False, lazy_load_hdus=False)
    except Exception:  # astropy's own reasons are not shown: said in plain words
        if structure.truncated is not None:
            ctx.fail(f"{structure.truncated_text}; expected a complete FITS file (check the "
                     f"download or copy, or the NAXISn keywords)")
        ctx.fail("is not a readable FITS file; expected a FITS file (.fits or .fits.gz) starting "
                 "with SIMPLE = T; check that it is complete")
    with hdul:
        ctx.structure = structure
        return _from_hdulist(hdul, ctx, opts)



def _from_hdulist(hdul, ctx, opts):
    hdul = _complete_hdus(hdul, ctx, opts["hdu"])
    index = select_hdu(hdul, ctx, opts["hdu"])
    h = hdul[index]
    _check_complete(hdul, index, ctx)
    out = read_hdu(hdul, index, ctx, opts)
    header = h.header
    if out["kind"] == "length":
        apply_medium_keywords(out, [(header, ctx.hdu)] + ([(hdul[0].header, "0 (primary)")]
                                                          if index != 0 else []), ctx)
    facts = header_facts(header, hdul[0].header)
    return build(out, ctx, opts, header=header, facts=facts)



def _complete_hdus(hdul, ctx, want):
    """The HDUs before the first incomplete one (no data of an incomplete HDU is touched)."""
    st = ctx.structure
    if st is None or st.truncated is None or st.truncated >= len(hdul):
        return hdul
    names = [h.name.upper() for h in hdul]
    index = None
    if isinstance(want, (int, np.integer)) and not isinstance(want, bool) and want < len(hdul):
        index = int(want) % len(hdul)
    elif isinstance(want, str) and want.upper() in names:
        index = names.index(want.upper())
    if st.truncated == 0 or (index is not None and index >= st.truncated):
        ctx.hdu = st.label(index if index is not None else 0)
        ctx.fail(f"{st.truncated_text}; the spectrum's own HDU is incomplete; expected a "
                 f"complete file (check the download or copy)")
    return fits.HDUList(list(hdul)[:st.truncated])


def _check_complete(hdul, index, ctx):
    """Refuse an incomplete spectrum HDU; record what a file that ends early loses elsewhere."""
    st = ctx.structure
    if st is None:
        return
    if st.truncated is not None:
        if index >= st.truncated:
            ctx.fail(f"{st.truncated_text}; the spectrum's own HDU is incomplete; expected a "
                     f"complete file (check the download or copy)")
        lost = [f"{i} ({name})" if name else f"{i}" for i, _, name, _ in st.hdus
                if i >= st.truncated]
        ctx.assume("file-truncated", f"{st.truncated_text}: HDU {', '.join(lost)} and anything "
                   f"after it are lost, so an uncertainty or mask stored there is missing; "
                   f"expected a complete file (check the download or copy)")
    elif st.cut_after is not None:
        ctx.assume("file-truncated", f"the file ends inside the padding after HDU "
                   f"{st.cut_after[1]} (its length is not a multiple of 2880 bytes): it was "
                   f"probably cut there, so any extension after it (an uncertainty or mask) is "
                   f"lost; expected a complete file (check the download or copy)")
    elif st.nextend is not None and st.nextend > len(st.hdus) - 1:
        ctx.assume("extension-missing", f"NEXTEND = {st.nextend} in the primary header but the "
                   f"file holds {len(st.hdus) - 1} extension(s); an uncertainty or mask stored "
                   f"in a missing extension is lost")


def _from_spectrum(spec, opts):
    ctx = Ctx(str(spec.meta.get("zline", {}).get("file", "<Spectrum>"))
               if isinstance(spec.meta, dict) else "<Spectrum>")
    old = dict(spec.meta.get("zline", {})) if hasattr(spec.meta, "get") else {}
    unit = spec.spectral_axis.unit
    kind = ("length" if unit.is_equivalent(u.m) else "frequency" if unit.is_equivalent(u.Hz)
            else "energy" if unit.is_equivalent(u.J) else "other")
    stated = old.get("medium") if not old.get("medium_assumed", True) else None
    if opts["medium"] is None and old.get("medium") is not None and "medium_assumed" in old:
        medium, assumed = old["medium"], old["medium_assumed"]
    else:
        medium, assumed = decide_medium(kind, stated, opts["medium"], ctx)
    ukind = uncertainty_kind(spec.uncertainty)
    zmeta = dict(file=old.get("file"), hdu=old.get("hdu"), hdu_name=old.get("hdu_name"), layout=old.get("layout", "spectrum"),
                 medium=medium, medium_assumed=assumed, uncertainty=ukind,
                 assumptions=list(old.get("assumptions", [])) + ctx.assumptions,
                 flags=[dict(f) for f in old.get("flags", [])] + ctx.flags,
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
    return to_spectrum(*_light_from_arrays(spectral_axis, flux, uncertainty, mask, medium,
                                           uncertainty_type))


def _light_from_arrays(spectral_axis, flux, uncertainty=None, mask=None, medium=None,
                       uncertainty_type=None):
    """(`LightSpectrum`, context) of `spectrum_from_arrays`."""
    ctx = Ctx("<arrays>")
    if not isinstance(spectral_axis, u.Quantity) or not is_spectral(spectral_axis.unit):
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
        for k, cls in uncertainty_types().items():
            if isinstance(uncertainty, cls):
                kind = uncertainty_type or k
                uncertainty = uncertainty.quantity if uncertainty.unit is not None else \
                    uncertainty.array
                break
        power = UNCERTAINTY_KINDS[kind]
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
    return build(out, ctx, opts), ctx

