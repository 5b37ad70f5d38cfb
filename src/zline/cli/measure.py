"""``zline measure FILE --z Z``: fit the expected lines at a trial shift and solve z or v."""

import json
import os
import sys
import tempfile

from zline.cli import CommandError
from zline.cli._common import add_spectrum_options, read_spectrum_for

__all__ = ["COMMAND", "HELP", "FORMATS", "add_arguments", "run", "format_text"]

COMMAND = "measure"
HELP = ("Fit the lines expected at a trial redshift/velocity, solve z and v, give a line table "
        "with upper limits for undetected lines.")

FORMATS = {
    "text": "readable summary and one line per fitted line",
    "json": "one JSON object: z, z_err, velocity, velocity_err (km/s), lines",
    "ecsv": "line table with units and provenance (ECSV)",
    "fits": "line table as a FITS binary table (needs -o)",
    "csv": "line table, comma separated (no units)",
    "latex": "line table as LaTeX tabular (values rounded by their errors)",
    "aastex": "line table as AASTeX deluxetable",
}
_BINARY = {"fits"}


def add_arguments(parser):
    from zline.physics.catalog import LINE_SETS
    from zline.physics.kinematics import CONVENTIONS

    parser.add_argument("file", metavar="FILE", help="FITS file with a 1D spectrum")
    parser.add_argument("--z", type=float, required=True, metavar="Z",
                        help="trial redshift (0 for a Galactic nebula or radio source)")
    parser.add_argument("--velocity", type=float, default=0.0, metavar="V",
                        help="trial velocity in km/s on top of z (default 0)")
    parser.add_argument("--convention", default="optical", choices=list(CONVENTIONS),
                        help="velocity convention (default: optical)")
    parser.add_argument("--lines", default=None, choices=sorted(LINE_SETS), metavar="SET",
                        help="line set: " + ", ".join(sorted(LINE_SETS))
                        + " (default: by spectral axis)")
    add_spectrum_options(parser)
    parser.add_argument("--format", default="text", choices=list(FORMATS),
                        help="output format (default: text)")
    parser.add_argument("-o", "--output", default=None, metavar="OUT",
                        help="write to this file (required for fits); existing files are kept")
    parser.add_argument("--overwrite", action="store_true",
                        help="replace an existing OUT instead of refusing (only a file zline "
                        "wrote as the same kind of output)")
    parser.add_argument("--blend", type=float, default=None, metavar="KM/S",
                        help="detected lines predicted closer than this share one shift (default "
                             "500; 0: each its own centre); lines whose fit windows overlap are "
                             "always fitted together")
    parser.add_argument("--window", type=float, default=None, metavar="KM/S",
                        help="search half-window around the trial shift (default: the larger of "
                             "500 km/s and 5 resolution FWHM)")


def _num(x, fmt):
    return "-" if x is None else format(x, fmt)


def format_text(result):
    """Readable summary of a `Measurement.to_dict` result."""
    out = [f"line set    {result['line_set']} ({result['medium']})",
           f"convention  {result['convention']}",
           f"z           {_num(result['z'], '.7f')} +- {_num(result['z_err'], '.2g')}",
           f"velocity    {_num(result['velocity'], '.3f')} +- "
           f"{_num(result['velocity_err'], '.2g')} km/s",
           f"detected    {result['n_detected']} of {len(result['lines'])} lines fitted",
           f"units       position {result['spectral_unit']}, flux {result['flux_unit']}"]
    search = result.get("search") or {}
    if search:
        out.append(f"search      +-{_num(search.get('window'), '.0f')} km/s, set shifted by "
                   f"{_num(search.get('shift'), '.1f')} km/s from the trial"
                   f"{'' if search.get('found') else ' (no line found: trial kept)'}; FWHM floor "
                   f"from the {search.get('resolution', '?')}")
    out.append("")
    width = max([len(r["label"]) for r in result["lines"]] + [5])
    out.append(f"{'label':<{width}}  {'observed':>14} {'err':>9} {'flux':>11} {'flux_err':>9} "
               f"{'snr':>7} {'fwhm_kms':>9} {'resid_kms':>9}  note")
    for r in result["lines"]:
        if r["detected"]:
            flux = _num(r["flux"], ".4g")
            note = ""
        else:
            flux = "<" + _num(r["upper_limit"], ".3g")
            note = r["note"]
        out.append(f"{r['label']:<{width}}  {_num(r['observed'], '.6f'):>14} "
                   f"{_num(r['observed_err'], '.2g'):>9} {flux:>11} "
                   f"{_num(r['flux_err'], '.2g'):>9} {_num(r['snr'], '.1f'):>7} "
                   f"{_num(r['fwhm_kms'], '.1f'):>9} {_num(r['residual_kms'], '.2f'):>9}  {note}")
    return "\n".join(out)


def _write_text(text, path, overwrite=False):
    if path is None:
        print(text)
        return
    from zline.physics._atomic import atomic_path

    exists = f"output file {path!r} exists; remove it, choose another name or pass --overwrite"
    try:
        with atomic_path(path, overwrite=overwrite, exists_message=exists,
                         kind="measure-output") as tmp, open(tmp, "w") as fh:
            fh.write(text + "\n")
    except FileExistsError as exc:
        raise CommandError(str(exc)) from None


def run(args):
    import astropy.units as u

    from zline.physics.measure import measure_spectrum
    from zline.physics.tables import write_table

    if args.format not in FORMATS:
        raise CommandError(f"--format {args.format!r} is not one of {list(FORMATS)}")
    if args.format in _BINARY and not args.output:
        raise CommandError(f"--format {args.format} is binary and needs -o OUT")
    if args.output and os.path.lexists(args.output) and not args.overwrite:
        raise CommandError(f"output file {args.output!r} exists; remove it, choose another name "
                           f"or pass --overwrite")
    if args.output and args.overwrite:  # refuse before measuring, not after
        from zline.physics._atomic import check_replaceable

        try:
            check_replaceable(args.output, "measure-output" if args.format in ("text", "json")
                              else "line-table")
        except FileExistsError as exc:
            raise CommandError(str(exc)) from None
    if args.blend is not None and not args.blend >= 0:
        raise CommandError(f"--blend must be a velocity >= 0 km/s; got {args.blend}")
    if args.window is not None and not args.window > 0:
        raise CommandError(f"--window must be a velocity > 0 km/s; got {args.window}")
    options = {} if args.blend is None else {"blend": args.blend * u.km / u.s}
    if args.window is not None:
        options["window"] = args.window * u.km / u.s
    spectrum = read_spectrum_for(args, COMMAND)  # prints the reader's warnings
    m = measure_spectrum(spectrum, z=args.z, velocity=args.velocity * u.km / u.s,
                         convention=args.convention, lines=args.lines, **options)
    if not m.lines:
        raise CommandError(f"no line of set {m.line_set!r} falls inside the data of "
                           f"{args.file!r} at z={args.z}, v={args.velocity} km/s")
    result = m.to_dict()
    if args.format == "text":
        _write_text(format_text(result), args.output, args.overwrite)
    elif args.format == "json":
        _write_text(json.dumps(result, indent=2, ensure_ascii=False), args.output, args.overwrite)
    else:
        table = m.table()
        if args.output:
            try:
                write_table(table, args.output, format=args.format, overwrite=args.overwrite)
            except FileExistsError as exc:
                raise CommandError(str(exc)) from None
        else:
            with tempfile.TemporaryDirectory() as tmpdir:
                path = write_table(table, os.path.join(tmpdir, "table"), format=args.format)
                with open(path, encoding="utf-8") as fh:
                    sys.stdout.write(fh.read())
    return 0
