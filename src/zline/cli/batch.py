"""``zline batch INPUTS... -o CATALOG``: blind redshifts of many spectra into one ECSV catalogue."""

import os
import sys

from zline.cli import CommandError

__all__ = ["COMMAND", "HELP", "add_arguments", "run"]

COMMAND = "batch"
HELP = ("Measure the redshift of every spectrum in files, directories or globs into one ECSV "
        "catalogue (resumable; bad files become rows).")


def add_arguments(parser):
    from zline.cli.scan import add_search_options

    parser.add_argument("inputs", nargs="+", metavar="INPUTS",
                        help="spectrum files, directories or glob patterns")
    parser.add_argument("-o", "--output", required=True, metavar="CATALOG",
                        help="ECSV catalogue to write; records of finished spectra are kept in "
                        "CATALOG.parts/ and reused by a rerun")
    add_search_options(parser)
    parser.add_argument("--workers", type=int, default=None, metavar="N",
                        help="local worker processes (default: number of CPUs; 1 = in-process)")
    parser.add_argument("--scheduler", default=None, metavar="ADDRESS",
                        help="run on a Dask cluster at this scheduler address instead "
                        "(needs the 'scale' extra)")


def run(args):
    from zline.cli.scan import search_options
    from zline.physics.batch import expand_inputs, measure_survey, text_progress

    if args.workers is not None and args.workers < 1:
        raise CommandError(f"--workers must be a positive integer; got {args.workers}")
    kw = search_options(args)
    scan_options = dict(klass=kw["klass"], mask_sky=kw["mask_sky"], template=args.template,
                        v_min_kms=args.v_min, v_max_kms=args.v_max)
    if args.template is not None and not os.path.isfile(args.template):
        raise CommandError(f"--template {args.template!r}: no such file")
    try:
        expand_inputs(args.inputs)
    except ValueError as exc:
        raise CommandError(str(exc)) from None
    client = None
    if args.scheduler is not None:
        try:
            from distributed import Client
        except ImportError:
            raise CommandError("--scheduler needs dask.distributed; install zline[scale]") from None
        try:
            client = Client(args.scheduler, timeout="10s")
        except (OSError, TimeoutError, ValueError) as exc:
            raise CommandError(f"cannot reach the Dask scheduler {args.scheduler!r}: "
                               f"{exc}") from None
    progress = text_progress(sys.stderr) if sys.stderr.isatty() else None
    try:
        table = measure_survey(args.inputs, args.output, z_min=args.z_min, z_max=args.z_max,
                               lines=args.lines, workers=args.workers, client=client,
                               progress=progress, **scan_options)
    except KeyboardInterrupt:
        print(f"\nzline batch: interrupted; finished spectra are kept in {args.output}.parts/ "
              f"and a rerun continues from there", file=sys.stderr)
        return 130
    finally:
        if client is not None:
            client.close()
    n_bad = sum(bool(e) for e in table["error"])
    print(f"{args.output}: {len(table)} spectra, {len(table) - n_bad} measured, {n_bad} failed")
    return 0
