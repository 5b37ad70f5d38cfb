"""Layout: a binary or ASCII table with a spectral-axis column and a flux column (one value
per row, or array-valued cells with ``row=`` choosing the row), uncertainty and mask columns
found by their names; the flux unit from TUNITn, else BUNIT of the HDU, else of the primary."""

import numpy as np
import astropy.units as u

from ._axis import _AA_ABOVE, rest_frequency
from ._base import is_spectral, is_table, parse_unit

__all__ = ["NAME", "PRIORITY", "claims", "read"]

NAME = "table"
PRIORITY = 0

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


def claims(hdul, index, opts):
    return is_table(hdul[index])


def _column_values(data, name, ctx, row, nrows):
    try:
        col = np.asarray(data[name])
    except Exception:  # damaged data: said in plain words below
        ctx.fail(f"column {name!r} could not be read; check its TFORMn, TSCALn and TZEROn "
                 f"keywords (the table may be truncated)")
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


def read(hdul, index, ctx, opts):
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
            unit = parse_unit(unit_of(col))
            if unit is not None and is_spectral(unit):
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
    unit = parse_unit(text) if text else None
    if text and unit is None and opts["spectral_unit"] is None:
        ctx.fail(f"column {axis_col.name!r} has TUNIT {text!r}, which astropy cannot read; "
                 f"expected a spectral unit such as 'Angstrom'; pass spectral_unit=")
    if unit is None:
        if opts["spectral_unit"] is not None:
            unit = opts["spectral_unit"]
            ctx.assume("axis-unit-from-option",
                       f"column {axis_col.name!r} without a readable unit: spectral_unit={unit}")
        else:
            unit = {"length": u.AA, "log10-length": u.AA, "frequency": u.Hz, "energy": u.keV,
                    "wavenumber": 1 / u.cm}[axis_kind]
            finite = np.abs(axis_v[np.isfinite(axis_v)])
            top = float(finite.max()) if finite.size else float("nan")
            if axis_kind == "length" and not top > _AA_ABOVE:
                ctx.fail(f"column {axis_col.name!r} has no unit (TUNIT) and its values (up to "
                         f"{top:.6g}) do not fix one (nm, Angstrom, micrometres); add TUNIT to "
                         f"the column or pass spectral_unit=")
            ctx.assume("axis-unit-assumed", f"column {axis_col.name!r} has no unit: read as {unit}")
    layout = "table"
    if axis_kind == "log10-length":
        # TUNIT may name the wavelength unit the log refers to: 'Angstrom' or 'log(Angstrom)'
        unit = getattr(unit, "physical_unit", unit)
        if unit.is_equivalent(u.dimensionless_unscaled):
            unit = u.AA
            ctx.assume("axis-log10-assumed",
                       f"column {axis_col.name!r} is log10 of a wavelength in Angstrom")
        axis_v = 10.0 ** axis_v
        layout = "table-log10"
    if not is_spectral(unit):
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
    extra = {"source": f"column {axis_col.name!r}"}
    if kind == "frequency":
        rest = rest_frequency(h.header) or rest_frequency(hdul[0].header)
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

