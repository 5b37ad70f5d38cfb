"""Options shared by the sub-commands that read a spectrum file."""

__all__ = ["add_hdu_option", "hdu_value"]


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
