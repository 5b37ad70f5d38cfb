"""Assemble a `LightSpectrum` from what a layout read: ascending axis, plausibility, flux unit,
uncertainty, mask, medium and the ``meta["zline"]`` record (`light.to_spectrum` makes the
`specutils.Spectrum` of it)."""

import numpy as np
import astropy.units as u

from ._base import UNCERTAINTY_KINDS, parse_unit
from .light import LightSpectrum
from ._plausible import check_axis

__all__ = ["build", "decide_medium"]


def build(out, ctx, opts, header=None, facts=None):
    """Assemble the `LightSpectrum` from the pieces a layout read (see `registry`)."""
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

    check_axis(axis, ctx, out["extra"].pop("source", "the spectral axis values"))

    # flux unit
    text = out["flux_unit_text"]
    text = str(text).strip() if text is not None else ""
    funit = parse_unit(text) if text else None
    if funit is None:
        if opts["flux_unit"] is not None:
            funit = opts["flux_unit"]
            ctx.assume("flux-unit-from-option",
                       f"{out['flux_unit_key']} {'missing' if not text else repr(text)}: "
                       f"flux_unit={funit} used")
        else:
            funit = u.dimensionless_unscaled
            ctx.assume("flux-unit-unreadable" if text else "flux-unit-missing",
                       f"{out['flux_unit_key']} "
                       f"{'missing' if not text else repr(text) + ' unreadable'}: flux is "
                       f"dimensionless (pass flux_unit= to set it)")
        target_funit = None
    else:
        target_funit = opts["flux_unit"]

    finite = np.isfinite(flux)
    if not finite.any():
        ctx.fail("every flux value is NaN or infinite; expected at least one finite value")
    mask = ~finite
    unc = None
    kind = out["unc_kind"]
    if out["unc"] is not None:
        if opts["uncertainty_type"] is not None:
            kind = opts["uncertainty_type"]
        unc = np.asarray(out["unc"], dtype=float)
        bad = ~np.isfinite(unc) | (unc <= 0)
        mask |= bad
    if out["mask"] is not None:
        mask |= _pixel_mask(np.asarray(out["mask"], dtype=bool), ~mask, ctx)

    flux_q = flux * funit
    unc_unit = funit ** UNCERTAINTY_KINDS[kind] if unc is not None else None
    medium, assumed = decide_medium(out["kind"], out["medium"], opts["medium"], ctx)
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
            if unc is not None:
                unc = unc[idx]
            reversed_ = not reversed_
    if target_funit is not None:
        try:
            newf = flux_q.to(target_funit, equivalencies=u.spectral_density(axis))
        except u.UnitsError:
            ctx.fail(f"flux_unit={target_funit} cannot be reached from the file's flux unit "
                     f"{funit}")
        if unc is not None:
            # the conversion is a per-pixel factor (flux density conversions are linear)
            ratio = (np.ones(flux_q.shape) * funit).to_value(
                target_funit, equivalencies=u.spectral_density(axis))
            if kind == "stdev":
                unc = unc * np.abs(ratio)
            elif kind == "variance":
                unc = unc * ratio ** 2
            else:
                with np.errstate(divide="ignore"):
                    unc = unc / ratio ** 2
            unc_unit = target_funit ** UNCERTAINTY_KINDS[kind]
        flux_q = newf

    zmeta = dict(file=ctx.name, hdu=ctx.hdu_index, hdu_name=ctx.hdu_name, layout=out["layout"],
                 medium=medium,
                 medium_assumed=assumed, uncertainty=kind if unc is not None else None,
                 assumptions=list(ctx.assumptions), flags=[dict(f) for f in ctx.flags],
                 notes=list(ctx.notes), reversed=reversed_,
                 header=dict(facts or {}))
    if "rest_value" in extra:
        zmeta["rest_value"] = extra["rest_value"]
    if "velocity_convention" in extra:
        zmeta["velocity_convention"] = extra["velocity_convention"]
    meta = {"zline": zmeta}
    if header is not None:
        meta["header"] = header
    return LightSpectrum(axis, flux_q, uncertainty=unc, uncertainty_kind=kind,
                         uncertainty_unit=unc_unit, mask=mask, meta=meta,
                         rest_value=extra.get("rest_value"),
                         velocity_convention=extra.get("velocity_convention"))


#: A mask that leaves less than this share of the otherwise usable pixels is a flag on the whole
#: spectrum (a survey's fibre-level bits set on every pixel), not a list of bad pixels.
WHOLE_SPECTRUM_MASK = 0.9


def _pixel_mask(given, usable, ctx):
    """The file's mask as bad pixels, or none of it when it marks nearly every usable pixel."""
    n_usable = int(np.count_nonzero(usable))
    n_marked = int(np.count_nonzero(given & usable))
    if n_usable >= 20 and n_marked > WHOLE_SPECTRUM_MASK * n_usable:
        ctx.assume("mask-whole-spectrum",
                   f"the mask marks {n_marked} of the {n_usable} pixels with finite flux and "
                   f"uncertainty bad, which flags the whole spectrum rather than bad pixels; it was "
                   f"not applied (pixels without finite flux or positive uncertainty stay masked); "
                   f"check the file's quality bits before trusting this spectrum")
        return np.zeros_like(given)
    return given


def decide_medium(kind, stated, override, ctx):
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
    ctx.assume("medium-assumed", "the file does not say air or vacuum: vacuum assumed (pass "
               "medium='air' if the wavelengths are in air)")
    return "vacuum", True

