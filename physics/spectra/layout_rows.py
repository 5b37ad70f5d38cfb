"""Layout: a 2D image with one quantity per row (flux, inverse variance or error, wavelength,
masks ...), the rows named by a header keyword that lists one word per row (``EXTEN0``)."""

import numpy as np

from ._axis import image_axis, iraf_unit, length_unit
from ._base import has_image, parse_unit
from ._images import image_companions, image_data, is_image

__all__ = ["NAME", "PRIORITY", "ROW_NAME_KEYWORDS", "claims", "read"]

NAME = "image-rows"
PRIORITY = 10


def claims(hdul, index, opts):
    h = hdul[index]
    if not (is_image(h) and has_image(h)) or opts["column"] is not None:
        return False
    if h.header.get("NAXIS") != 2:
        return False
    nrow = h.header.get("NAXIS2")
    if not isinstance(nrow, int) or nrow < 2:
        return False
    rows = _row_roles(h.header, nrow)
    return rows is not None and (opts["row"] is None or opts["row"] % nrow == rows["flux"])


def read(hdul, index, ctx, opts):
    data = image_data(hdul, index, ctx)
    rows = _row_roles(hdul[index].header, data.shape[0])
    return _read_row_image(hdul, index, data, rows, ctx, opts)


#: Words that name the rows of a row-per-quantity 2D image -> what the row holds.
_ROW_WORDS = {"flux": "flux", "inverse": "ivar", "ivar": "ivar", "invvar": "ivar",
              "inverse_variance": "ivar", "error": "stdev", "err": "stdev", "sigma": "stdev",
              "variance": "variance", "var": "variance", "wavelength": "wave", "wave": "wave",
              "lambda": "wave", "andmask": "mask", "and_mask": "mask", "mask": "mask"}
#: Header keywords that list the rows of such an image, one word per row.
ROW_NAME_KEYWORDS = ("EXTEN0",)


def _row_roles(header, nrow):
    """{role: row index} of a 2D image whose rows are named in the header, or None."""
    for key in ROW_NAME_KEYWORDS:
        text = header.get(key)
        if not isinstance(text, str):
            continue
        words = text.replace(",", " ").split()
        if len(words) != nrow:
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
        cunit = parse_unit(cunit_text) if cunit_text else iraf_unit(header, 1, ctx)
        unit = length_unit(cunit, values, 1, ctx, opts, header=header)
        axis_q, kind, medium = values * unit, "length", None
        extra = dict(layout="image-rows", source=f"row {rows['wave']} ({words[rows['wave']]})")
        ctx.notes.append(f"wavelengths from row {rows['wave']} ({words[rows['wave']]})")
    else:
        axis_q, kind, medium, extra = image_axis(header, 1, n, ctx, opts)
        extra["layout"] = "image-rows"
    if unc is None or mask is None:
        more_unc, more_kind, more_mask = image_companions(
            hdul, index, lambda a: a[rows["flux"]] if np.ndim(a) == 2 else a, flux.shape, ctx)
        if unc is None:
            unc, unc_kind = more_unc, more_kind
        if mask is None:
            mask = more_mask
    return dict(axis=axis_q, kind=kind, medium=medium, flux=flux,
                flux_unit_text=header.get("BUNIT"), flux_unit_key="BUNIT", unc=unc,
                unc_kind=unc_kind, mask=mask, layout=extra.pop("layout"), extra=extra)

