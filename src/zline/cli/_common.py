"""Options and helpers shared by the sub-commands that read a spectrum file.

`read_spectrum_for` reads the FILE of a command with its ``--hdu`` and ``--row`` and prints every
assumption the reader made as one warning line on stderr (`print_flags`); `json_safe` turns NaN
and infinities into ``null`` for JSON output.
"""

import math
import sys

__all__ = ["add_hdu_option", "add_row_option", "add_spectrum_options", "hdu_value",
           "read_spectrum_for", "print_flags", "format_flag", "json_safe"]


def hdu_value(value):
    """An HDU given on the command line: an integer index or an EXTNAME."""
    try:
        return int(value)
    except ValueError:
        return value


def add_hdu_option(parser):
    """Add ``--hdu N|NAME`` (default: the reader picks the first spectrum-like HDU and says which)."""
    parser.add_argument("--hdu", type=hdu_value, default=None, metavar="N|NAME",
                        help="HDU index or EXTNAME (default: the first spectrum-like HDU)")


def add_row_option(parser):
    """Add ``--row N``: the row of a 2D image (spectral axis along NAXIS1) to read."""
    parser.add_argument("--row", type=int, default=None, metavar="N",
                        help="row of a 2D image to read as the spectrum (0 = first; spectral "
                        "axis along NAXIS1); for a table with array cells, the table row")


def add_spectrum_options(parser):
    """``--hdu`` and ``--row``: where in FILE the spectrum is."""
    add_hdu_option(parser)
    add_row_option(parser)


def format_flag(command, flag, file=None):
    """One warning line for a reader flag ``{"code", "message"}``."""
    where = f"{file}: " if file else ""
    return f"zline {command}: warning: {where}{flag['message']} [{flag['code']}]"


def print_flags(command, spectrum, stream=None):
    """Print each assumption recorded in ``spectrum.meta["zline"]["flags"]`` on its own line."""
    stream = sys.stderr if stream is None else stream
    meta = spectrum.meta.get("zline", {}) if hasattr(spectrum.meta, "get") else {}
    for flag in meta.get("flags", []):
        print(format_flag(command, flag), file=stream)


def read_spectrum_for(args, command=None):
    """Read ``args.file`` with ``args.hdu`` and ``args.row``; print the reader's warnings."""
    from zline.physics.spectra import read_spectrum

    spectrum = read_spectrum(args.file, hdu=getattr(args, "hdu", None),
                             row=getattr(args, "row", None))
    print_flags(command or getattr(args, "command", None) or "zline", spectrum)
    return spectrum


def json_safe(value):
    """``value`` with every NaN or infinite float replaced by None (JSON ``null``)."""
    if isinstance(value, dict):
        return {k: json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_safe(v) for v in value]
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if hasattr(value, "dtype") and getattr(value, "ndim", None) == 0:  # numpy scalars
        item = value.item()
        return json_safe(item) if isinstance(item, float) else item
    return value
