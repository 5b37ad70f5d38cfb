"""The registry of file layouts and the choice among them.

Each layout family lives in its own module ``layout_<family>.py`` of this package and defines

- ``NAME`` (str): the family, e.g. ``"image-rows"``;
- ``PRIORITY`` (int): layouts with a higher priority are asked first;
- ``claims(hdul, index, opts) -> bool``: whether it reads HDU ``index``;
- ``read(hdul, index, ctx, opts) -> dict``: the pieces of the spectrum, with the keys
  ``axis`` (Quantity), ``kind`` ('length', 'frequency', 'energy', 'wavenumber'), ``medium``
  (None where the layout does not say), ``flux`` (array), ``flux_unit_text`` and
  ``flux_unit_key`` (the unit as written and where), ``unc``, ``unc_kind``, ``mask``, ``layout``
  (the name recorded in meta) and ``extra`` (``rest_value``, ``velocity_convention``, ``source``).

The modules are found with :mod:`pkgutil`, so a new layout is one new file.
"""

import importlib
import pkgutil

import numpy as np

from ._base import (ERR_EXTNAMES, FLUX_EXTNAMES, MASK_EXTNAMES, choose, has_image, hdu_label,
                    hdu_list_text, is_table)

__all__ = ["layouts", "select_hdu", "read_hdu"]

_LAYOUTS = None


def layouts():
    """The layout modules, highest priority first."""
    global _LAYOUTS
    if _LAYOUTS is None:
        from . import __path__ as here

        found = [importlib.import_module(f"{__package__}.{info.name}")
                 for info in pkgutil.iter_modules(here) if info.name.startswith("layout_")]
        _LAYOUTS = sorted(found, key=lambda mod: (-mod.PRIORITY, mod.NAME))
    return _LAYOUTS


def read_hdu(hdul, index, ctx, opts):
    """The pieces of the spectrum in HDU ``index`` from the first layout that claims it."""
    for layout in layouts():
        if layout.claims(hdul, index, opts):
            return layout.read(hdul, index, ctx, opts)
    h = hdul[index]
    if h.data is None or getattr(h.data, "size", 0) == 0:
        ctx.fail(f"holds no data (NAXIS={h.header.get('NAXIS', 0)}); expected a 1D image or a "
                 f"table; the HDUs are {hdu_list_text(hdul)}, pass hdu= to pick another")
    ctx.fail(f"is a {type(h).__name__}, which no layout reads ("
             f"{', '.join(mod.NAME for mod in layouts())}); pass hdu= with one of "
             f"{hdu_list_text(hdul)}")


def select_hdu(hdul, ctx, want):
    if len(hdul) == 0:
        ctx.fail("contains no HDU; expected at least a primary HDU with data")
    if want is not None:
        if isinstance(want, (int, np.integer)) and not isinstance(want, bool):
            if not -len(hdul) <= want < len(hdul):
                ctx.fail(f"hdu={want} is out of range; the file has {len(hdul)} HDUs: "
                         f"{hdu_list_text(hdul)}")
            index = int(want) % len(hdul)
        elif isinstance(want, str):
            names = [h.name.upper() for h in hdul]
            if want.upper() not in names:
                ctx.fail(f"hdu={want!r} is not an EXTNAME in the file; the HDUs are "
                         f"{hdu_list_text(hdul)}; pass an index or one of these names")
            index = names.index(want.upper())
        else:
            ctx.fail(f"hdu={want!r} is not accepted; expected an index (int) or an EXTNAME (str)")
        choose(ctx, hdul, index)
        ctx.notes.append(f"HDU {ctx.hdu} chosen by hdu={want!r}")
        return index
    aux = set(ERR_EXTNAMES) | set(MASK_EXTNAMES)
    tables = [i for i, h in enumerate(hdul) if is_table(h) and len(h.columns) > 0]
    if has_image(hdul[0]):
        choose(ctx, hdul, 0)
        if tables:
            ctx.notes.append(f"primary image chosen over the table in HDU {hdu_label(hdul, tables[0])}"
                             f"; pass hdu={tables[0]} to read the table")
        else:
            ctx.notes.append("primary image chosen")
        return 0
    for i, h in enumerate(hdul):
        if has_image(h) and h.name.upper() in FLUX_EXTNAMES:
            choose(ctx, hdul, i)
            ctx.notes.append(f"image extension {ctx.hdu} chosen by its EXTNAME")
            return i
    for i, h in enumerate(hdul):
        if (has_image(h) and h.name.upper() not in aux) or (is_table(h) and i in tables):
            choose(ctx, hdul, i)
            ctx.notes.append(f"first spectrum-like HDU {ctx.hdu} chosen")
            return i
    ctx.fail(f"has no HDU with spectrum data (an image or a table); the HDUs are "
             f"{hdu_list_text(hdul)}; expected a 1D image or a binary table with flux (a "
             f"truncated file can look like this: check its size)")

