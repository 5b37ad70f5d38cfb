"""Layout: a spectrum in an image HDU (1D, or one row/column of a 2D image, or an N-D image with
one long axis), its axis from the WCS keywords, uncertainty and mask from named extensions."""

import numpy as np

from ._axis import image_axis
from ._base import has_image
from ._images import image_companions, image_data, is_image

__all__ = ["NAME", "PRIORITY", "claims", "read"]

NAME = "image"
PRIORITY = 0


def claims(hdul, index, opts):
    return is_image(hdul[index]) and has_image(hdul[index])


def read(hdul, index, ctx, opts):
    h = hdul[index]
    header = h.header
    data = image_data(hdul, index, ctx)
    shape = data.shape
    row, column = opts["row"], opts["column"]
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
            ctx.assume("image-extra-axes", f"NAXIS={data.ndim} with shape {shape}: read as 1D "
                       f"along FITS axis {axis}")
        elif data.ndim == 2:
            ctx.fail(f"holds a 2D image (NAXIS=2, shape {shape}); expected a 1D spectrum; pass "
                     f"row= (--row N on the command line; spectral axis along NAXIS1) or "
                     f"column= (along NAXIS2) to take one spectrum of it")
        else:
            ctx.fail(f"holds a {data.ndim}D image (NAXIS={data.ndim}, shape {shape}); expected a "
                     f"1D spectrum (row=/column= work for 2D images only); extract one spectrum "
                     f"first and pass it as arrays")
    flux = np.asarray(selector(data), dtype=float).reshape(-1)
    n = flux.size
    axis_q, kind, medium, extra = image_axis(header, axis, n, ctx, opts)
    bunit = header.get("BUNIT")
    unc, unc_kind, mask = image_companions(hdul, index, selector, flux.shape, ctx)
    return dict(axis=axis_q, kind=kind, medium=medium, flux=flux, flux_unit_text=bunit,
                flux_unit_key="BUNIT", unc=unc, unc_kind=unc_kind, mask=mask,
                layout=extra.pop("layout"), extra=extra)

