"""``zline scan FILE``: blind redshift (or velocity) search of a spectrum, every kind by default."""

import json
import sys

from zline.cli import CommandError
from zline.cli._common import add_spectrum_options, json_safe, read_spectrum_for

__all__ = ["COMMAND", "HELP", "FORMATS", "DEFAULT_SETS", "add_arguments", "add_search_options",
           "search_options", "run", "format_text", "default_line_set"]

COMMAND = "scan"
HELP = ("Search a 1D spectrum for its redshift (or velocity): ranked candidates of every kind "
        "(emission/absorption galaxy, quasar, star) with matched lines and a confidence.")

FORMATS = {"text": "one aligned line per candidate", "json": "one JSON object with 'candidates'"}

#: Physical type of the spectral axis -> line set used when the axis allows only one.
DEFAULT_SETS = {"length": None, "frequency": "radio", "energy": "xray", "wavenumber": None}


def add_search_options(parser, z_max=7.0):
    """The search options shared by ``zline scan`` and ``zline batch``."""
    from zline.physics.catalog import LINE_SETS
    from zline.physics.scan import KINDS

    parser.add_argument("--z-min", type=float, default=0.0, help="lowest redshift (default 0)")
    parser.add_argument("--z-max", type=float, default=z_max,
                        help=f"highest redshift (default {z_max:g})")
    parser.add_argument("--v-min", type=float, default=None, metavar="KM/S",
                        help="search velocities from KM/S (with --v-max) instead of redshifts: "
                        "stars, nebulae, radio lines; the default on frequency axes "
                        "(-1000..1000)")
    parser.add_argument("--v-max", type=float, default=None, metavar="KM/S",
                        help="highest velocity of a velocity search, km/s")
    parser.add_argument("--lines", default=None, choices=sorted(LINE_SETS), metavar="SET",
                        help="search with this line set only (default: every kind of spectrum "
                        "on wavelength axes, radio on frequency, xray on energy); one of "
                        + ", ".join(sorted(LINE_SETS)))
    parser.add_argument("--class", dest="klass", default=None, choices=KINDS, metavar="KIND",
                        help="search only this kind of spectrum: " + ", ".join(KINDS))
    parser.add_argument("--template", default=None, metavar="FILE",
                        help="rest-frame template spectrum (FITS) to correlate instead of line "
                        "combs; its air/vacuum medium is converted to the data's")
    parser.add_argument("--no-sky-mask", dest="sky_mask", action="store_false",
                        help="keep the night-sky lines and telluric O2 bands in the search "
                        "(masked by default)")


def add_arguments(parser):
    parser.add_argument("file", metavar="FILE", help="FITS file (.fits or .fits.gz)")
    add_spectrum_options(parser)
    add_search_options(parser)
    parser.add_argument("--top", type=int, default=5, help="number of candidates (default 5)")
    parser.add_argument("--format", default="text", choices=sorted(FORMATS),
                        help="output format (default: text)")


def default_line_set(spectrum):
    """The line set the spectral axis of ``spectrum`` forces (None: every kind is searched)."""
    import astropy.units as u

    unit = u.Quantity(spectrum.spectral_axis).unit
    for ptype, name in DEFAULT_SETS.items():
        if unit.physical_type == ptype:
            return name
    raise CommandError(f"spectral axis in '{unit}' ({unit.physical_type}): no default line set; "
                       f"pass --lines")


def search_options(args):
    """Checked keyword arguments of `zline.physics.scan.scan_redshift` from parsed options."""
    import astropy.units as u

    if not args.z_max > args.z_min or args.z_min <= -1:
        raise CommandError(f"need -1 < --z-min < --z-max; got {args.z_min}, {args.z_max}")
    kw = dict(z_min=args.z_min, z_max=args.z_max, lines=args.lines, klass=args.klass,
              mask_sky=args.sky_mask)
    if (args.v_min is None) != (args.v_max is None):
        raise CommandError("--v-min and --v-max go together; give both")
    if args.v_min is not None:
        if not args.v_max > args.v_min:
            raise CommandError(f"need --v-min < --v-max; got {args.v_min}, {args.v_max}")
        kw.update(v_min=args.v_min * u.km / u.s, v_max=args.v_max * u.km / u.s)
    if args.lines is not None and args.klass is not None:
        raise CommandError("--lines and --class both restrict the search; give one")
    return kw


def read_template(path):
    """The template spectrum of ``--template`` (None when not given)."""
    from zline.physics.spectra import read_spectrum

    return None if path is None else read_spectrum(path)


def format_text(result):
    vel = any(c.velocity is not None for c in result.candidates)
    head = f"{'v [km/s]':>10}  {'err':>7}" if vel else f"{'z':>10}  {'z_err':>9}"
    rows = [f"{'rank':>4}  {head}  {'score':>7}  {'class':<17}  {'n':>3}  lines"]
    for i, c in enumerate(result.candidates, 1):
        if vel and c.velocity is not None:
            where = f"{c.velocity.to_value('km/s'):>10.1f}  {c.velocity_err.to_value('km/s'):>7.1f}"
        elif vel:
            where = f"{'z=' + format(c.z, '.5f'):>10}  {'':>7}"
        else:
            where = f"{c.z:>10.6f}  {c.z_err:>9.2g}"
        rows.append(f"{i:>4}  {where}  {c.score:>7.1f}  {c.klass:<17}  {c.n_matched:>3}  "
                    + ", ".join(c.lines))
    return "\n".join(rows)


def run(args):
    from zline.physics.scan import scan_redshift

    if args.format not in FORMATS:
        raise CommandError(f"--format {args.format!r} is not one of {sorted(FORMATS)}")
    if args.top < 1:
        raise CommandError(f"--top must be a positive integer; got {args.top}")
    kw = search_options(args)
    spectrum = read_spectrum_for(args, COMMAND)  # prints the reader's warnings
    template = read_template(args.template)
    if kw["lines"] is None and template is None:
        kw["lines"] = default_line_set(spectrum)
    result = scan_redshift(spectrum, top=args.top, template=template, **kw)
    searched = kw["lines"] or ("template" if template is not None else "all kinds")
    if args.format == "json":
        out = {"file": str(args.file), "lines": result.line_set, "searched": searched,
               "kinds": list(result.kinds), "medium": result.medium,
               "z_min": args.z_min, "z_max": args.z_max,
               "v_min_kms": args.v_min, "v_max_kms": args.v_max,
               "confidence": result.confidence, "no_redshift": result.no_redshift,
               "masked": result.masked, "notes": result.notes,
               "candidates": [c.as_dict() for c in result.candidates]}
        print(json.dumps(json_safe(out), indent=2, allow_nan=False))
    else:
        span = (f"{args.v_min:g} <= v <= {args.v_max:g} km/s" if args.v_min is not None
                else f"{args.z_min:g} <= z <= {args.z_max:g}")
        verdict = "NO REDSHIFT" if result.no_redshift else "redshift found"
        print(f"# {args.file}: {searched} ({result.medium}), {span}; {verdict}, confidence "
              f"{result.confidence:.2f} that rank 1 is right")
        print(format_text(result))
        if result.masked:  # one line: the regions the search left out (--no-sky-mask keeps them)
            spans = ", ".join(f"{m['lo']:.6g}-{m['hi']:.6g} ({m['reason']})" for m in result.masked)
            print(f"zline scan: masked {len(result.masked)} sky/telluric region(s) "
                  f"[{result.masked[0]['unit']}]: {spans}", file=sys.stderr)
        for note in result.notes:
            print(f"zline scan: note: {note}", file=sys.stderr)
    return 0
