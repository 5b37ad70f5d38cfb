"""``zline scan FILE``: blind redshift search of a spectrum by correlation with a line comb."""

import json

from zline.cli import CommandError
from zline.cli._common import add_spectrum_options, read_spectrum_for

__all__ = ["COMMAND", "HELP", "FORMATS", "DEFAULT_SETS", "add_arguments", "run", "format_text",
           "default_line_set"]

COMMAND = "scan"
HELP = "Search a 1D spectrum for its redshift: ranked candidates with matched lines."

FORMATS = {"text": "one aligned line per candidate", "json": "one JSON object with 'candidates'"}

#: Physical type of the spectral axis -> default line set.
DEFAULT_SETS = {"length": "galaxy-emission", "frequency": "radio", "energy": "xray",
                "wavenumber": "galaxy-emission"}


def add_arguments(parser):
    from zline.physics.catalog import LINE_SETS

    parser.add_argument("file", metavar="FILE", help="FITS file (.fits or .fits.gz)")
    add_spectrum_options(parser)
    parser.add_argument("--z-min", type=float, default=0.0, help="lowest redshift (default 0)")
    parser.add_argument("--z-max", type=float, default=3.0, help="highest redshift (default 3)")
    parser.add_argument("--lines", default=None, choices=sorted(LINE_SETS), metavar="SET",
                        help="line set of the comb (default: galaxy-emission for wavelengths, "
                        "radio for frequencies, xray for energies); one of "
                        + ", ".join(sorted(LINE_SETS)))
    parser.add_argument("--top", type=int, default=5, help="number of candidates (default 5)")
    parser.add_argument("--format", default="text", choices=sorted(FORMATS),
                        help="output format (default: text)")


def default_line_set(spectrum):
    """The line set that suits the spectral axis of ``spectrum``."""
    import astropy.units as u

    unit = u.Quantity(spectrum.spectral_axis).unit
    for ptype, name in DEFAULT_SETS.items():
        if unit.physical_type == ptype:
            return name
    raise CommandError(f"spectral axis in '{unit}' ({unit.physical_type}): no default line set; "
                       f"pass --lines")


def format_text(result):
    rows = [f"{'rank':>4}  {'z':>10}  {'z_err':>9}  {'score':>7}  {'n':>3}  lines"]
    for i, c in enumerate(result.candidates, 1):
        rows.append(f"{i:>4}  {c.z:>10.6f}  {c.z_err:>9.2g}  {c.score:>7.1f}  {c.n_matched:>3}  "
                    + ", ".join(c.lines))
    return "\n".join(rows)


def run(args):
    from zline.physics.scan import scan_redshift

    if args.format not in FORMATS:
        raise CommandError(f"--format {args.format!r} is not one of {sorted(FORMATS)}")
    if args.top < 1:
        raise CommandError(f"--top must be a positive integer; got {args.top}")
    if not args.z_max > args.z_min or args.z_min <= -1:
        raise CommandError(f"need -1 < --z-min < --z-max; got {args.z_min}, {args.z_max}")
    spectrum = read_spectrum_for(args, COMMAND)  # prints the reader's warnings
    lines = args.lines or default_line_set(spectrum)
    result = scan_redshift(spectrum, lines=lines, z_min=args.z_min, z_max=args.z_max,
                           top=args.top)
    if args.format == "json":
        out = {"file": str(args.file), "lines": lines, "medium": result.medium,
               "z_min": args.z_min, "z_max": args.z_max,
               "candidates": [c.as_dict() for c in result.candidates]}
        print(json.dumps(out, indent=2))
    else:
        print(f"# {args.file}: line set {lines} ({result.medium}), "
              f"{args.z_min} <= z <= {args.z_max}")
        print(format_text(result))
    return 0
