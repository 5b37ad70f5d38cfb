"""``zline info FILE``: what the reader finds in a spectrum file (layout, axis, units, medium)."""

import json

from zline.cli import CommandError
from zline.cli._common import add_spectrum_options, json_safe, print_flags

__all__ = ["COMMAND", "HELP", "add_arguments", "run", "format_text"]

COMMAND = "info"
HELP = "Describe the 1D spectrum in a FITS file: layout, spectral range, units, medium, assumptions."

FORMATS = {"text": "aligned key: value lines", "json": "one JSON object (describe_spectrum keys)"}


def add_arguments(parser):
    parser.add_argument("file", metavar="FILE", help="FITS file (.fits or .fits.gz)")
    add_spectrum_options(parser)
    parser.add_argument("--format", default="text", choices=sorted(FORMATS),
                        help="output format (default: text)")


def format_text(info):
    """Render a :func:`~zline.physics.spectra.describe_spectrum` dict as readable lines."""
    lines = []
    order = ["file", "hdu", "hdu_name", "layout", "n_pixels", "spectral_min", "spectral_max", "spectral_unit",
             "medium", "medium_assumed", "flux_unit", "uncertainty", "n_masked", "reversed",
             "rest_value", "rest_unit", "velocity_convention"]
    width = max(len(k) for k in order)
    for key in order:
        if key in info:
            value = info[key]
            if key == "flux_unit" and value == "":
                value = "(dimensionless)"
            lines.append(f"{key:<{width}}  {value}")
    if info.get("flags"):
        lines.append("assumptions:")
        lines.extend(f"  - {flag['message']} [{flag['code']}]" for flag in info["flags"])
    elif info.get("assumptions"):
        lines.append("assumptions:")
        lines.extend(f"  - {item}" for item in info["assumptions"])
    if info.get("notes"):
        lines.append("notes:")
        lines.extend(f"  - {item}" for item in info["notes"])
    if info.get("header"):
        lines.append("header:")
        lines.extend(f"  {k} = {v}" for k, v in info["header"].items())
    return "\n".join(lines)


def run(args):
    # read_light: the same reading as read_spectrum without building a specutils Spectrum,
    # so neither specutils nor astropy.nddata/wcs is imported (the command starts fast)
    from zline.physics.spectra import describe_spectrum, read_light

    if args.format not in FORMATS:  # argparse checks this too; kept for direct callers
        raise CommandError(f"--format {args.format!r} is not one of {sorted(FORMATS)}")
    spectrum = read_light(args.file, hdu=getattr(args, "hdu", None),
                          row=getattr(args, "row", None))  # SpectrumFormatError is a ValueError
    print_flags(COMMAND, spectrum)
    info = describe_spectrum(spectrum)
    if args.format == "json":
        print(json.dumps(json_safe(info), indent=2, sort_keys=True, allow_nan=False))
    else:
        print(format_text(info))
    return 0
