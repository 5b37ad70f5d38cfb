"""Helpers shared by the image layouts: the checked data array and the companion extensions
(uncertainty, mask) of the same shape."""

import numpy as np

from ._base import ERR_EXTNAMES, MASK_EXTNAMES, has_image, hdu_label

__all__ = ["image_data", "image_companions", "is_image"]


def is_image(h):
    """Whether HDU ``h`` is an image HDU (primary, extension or tile-compressed)."""
    from astropy.io import fits

    return isinstance(h, (fits.PrimaryHDU, fits.ImageHDU, fits.CompImageHDU))


def image_data(hdul, index, ctx):
    """The data array of image HDU ``index``, checked against its NAXISn keywords."""
    h = hdul[index]
    header = h.header
    try:
        data = np.asarray(h.data)
    except Exception:  # damaged data: said in plain words below
        ctx.fail(f"image data could not be read (BITPIX = {header.get('BITPIX')}, NAXISn, "
                 f"BSCALE/BZERO); the file may be "
                 f"truncated")
    if not np.issubdtype(data.dtype, np.number):
        ctx.fail(f"image data of type {data.dtype} is not numeric")
    naxes = [header.get(f"NAXIS{i}", 0) for i in range(1, header.get("NAXIS", 0) + 1)]
    if int(np.prod(naxes)) != data.size:
        ctx.fail(f"keywords NAXISn = {naxes} promise {int(np.prod(naxes))} values but "
                 f"{data.size} were read; the file is probably truncated")
    return data


def image_companions(hdul, index, selector, shape, ctx):
    """Uncertainty and mask from ERR/VAR/IVAR/MASK-like extensions of the same shape."""
    unc = unc_kind = mask = None
    st = ctx.structure
    for i, h in enumerate(hdul):
        if st is not None and st.truncated is not None and i >= st.truncated:
            break  # incomplete: recorded as file-truncated
        if i == index or not has_image(h):
            continue
        name = h.name.upper()
        if name in ERR_EXTNAMES and unc is None:
            arr = _companion(h, selector, shape, ctx, i, hdul)
            unc, unc_kind = arr.astype(float), ERR_EXTNAMES[name]
            ctx.notes.append(f"uncertainty ({unc_kind}) from HDU {hdu_label(hdul, i)}")
        elif name in MASK_EXTNAMES and mask is None:
            mask = _companion(h, selector, shape, ctx, i, hdul) != 0
            ctx.notes.append(f"mask from HDU {hdu_label(hdul, i)}")
    return unc, unc_kind, mask


def _companion(h, selector, shape, ctx, i, hdul):
    data = np.asarray(h.data)
    try:
        arr = np.asarray(selector(data)).reshape(-1)
    except (IndexError, ValueError):
        arr = None
    if arr is None or arr.shape != shape:
        ctx.fail(f"extension {hdu_label(hdul, i)} has shape {data.shape}, which does not match "
                 f"the flux ({shape[0]} pixels); expected the same shape as the flux")
    if not np.issubdtype(arr.dtype, np.number) and arr.dtype != bool:
        ctx.fail(f"extension {hdu_label(hdul, i)} holds {arr.dtype} data; expected numbers")
    return arr

