"""``zline batch INPUTS... -o CATALOG``: blind redshifts of many spectra into one ECSV catalogue."""

import os
import sys

from zline.cli import CommandError

__all__ = ["COMMAND", "HELP", "add_arguments", "run"]

COMMAND = "batch"
HELP = ("Measure the redshift of every spectrum in files, directories or globs into one ECSV "
        "catalogue (resumable; bad files become rows).")

_LOCK_NOTE = ("A second run on the same CATALOG stops at once with a message naming the run that "
              "holds it.")


def add_arguments(parser):
    from zline.cli.scan import add_search_options

    parser.add_argument("inputs", nargs="+", metavar="INPUTS",
                        help="spectrum files, directories or glob patterns")
    parser.add_argument("-o", "--output", required=True, metavar="CATALOG",
                        help="ECSV catalogue to write; records of finished spectra are kept in "
                        "CATALOG.parts/ and reused by a rerun. " + _LOCK_NOTE)
    parser.add_argument("--retry-failed", action="store_true",
                        help="measure again files that failed before even if unchanged "
                        "(default: an unchanged bad file keeps its failed row)")
    parser.add_argument("--overwrite", action="store_true",
                        help="let the new catalogue drop rows of an existing zline catalogue "
                        "that this run's inputs do not include (files zline did not write are "
                        "never replaced)")
    parser.add_argument("--no-progress", action="store_true",
                        help="no progress bar on stderr")
    add_search_options(parser)
    parser.add_argument("--workers", type=int, default=None, metavar="N",
                        help="local worker processes (default: number of CPUs; 1 = in-process)")
    parser.add_argument("--scheduler", default=None, metavar="ADDRESS",
                        help="run on a Dask cluster at this scheduler address instead "
                        "(needs the 'scale' extra)")


def run(args):
    from zline.cli.scan import search_options
    from zline.physics.batch import SPECTRUM_SUFFIXES, expand_inputs, measure_survey, progress_bar

    if args.workers is not None and args.workers < 1:
        raise CommandError(f"--workers must be a positive integer; got {args.workers}")
    kw = search_options(args)
    scan_options = dict(klass=kw["klass"], mask_sky=kw["mask_sky"], template=args.template,
                        v_min_kms=args.v_min, v_max_kms=args.v_max)
    if args.template is not None and not os.path.isfile(args.template):
        raise CommandError(f"--template {args.template!r}: no such file")
    if args.output.lower().endswith(SPECTRUM_SUFFIXES):
        raise CommandError(f"-o {args.output!r} is named like a spectrum; CATALOG is an ECSV "
                           f"table: give a name such as 'survey.ecsv'")
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
    progress = None if args.no_progress else progress_bar(sys.stderr)
    try:
        table = measure_survey(args.inputs, args.output, z_min=args.z_min, z_max=args.z_max,
                               lines=args.lines, workers=args.workers, client=client,
                               progress=progress, retry_failed=args.retry_failed,
                               overwrite=args.overwrite, **scan_options)
    except FileExistsError as exc:  # not a zline catalogue, or rows would be dropped
        raise CommandError(str(exc)) from None
    except KeyboardInterrupt:
        print(f"\nzline batch: interrupted; finished spectra are kept in {args.output}.parts/ "
              f"and a rerun continues from there", file=sys.stderr)
        return 130
    finally:
        if client is not None:
            client.close()
    n_bad = sum(bool(e) for e in table["error"])
    run = table.meta["zline_batch"]["run"]
    n_assumed = sum("assumed" in str(f).split(",") for f in table["flags"])
    line = (f"{args.output}: {len(table)} spectra, {len(table) - n_bad} measured, {n_bad} failed "
            f"({run['new']} new, {run['reused']} reused from an earlier run")
    if run["failed_reused"]:
        line += (f"; {run['failed_reused']} unchanged failed file(s) not retried: "
                 f"--retry-failed measures them again")
    line += ")"
    if n_assumed:
        line += f"; {n_assumed} with assumptions about the file (flag 'assumed')"
    print(line)
    return 0
