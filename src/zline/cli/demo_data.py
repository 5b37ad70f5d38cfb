"""``zline demo-data DIR``: write the four invented demo spectra (FITS) into a directory."""

from pathlib import Path

from zline.cli import CommandError

__all__ = ["COMMAND", "HELP", "add_arguments", "run"]

COMMAND = "demo-data"
HELP = "write the invented demo spectra (galaxy, nebula, radio, X-ray FITS files) into DIR"


def add_arguments(parser):
    """Arguments of ``zline demo-data``."""
    parser.add_argument("directory", metavar="DIR", help="directory for the files (created)")
    parser.add_argument("--overwrite", action="store_true",
                        help="replace files that exist if they are zline demo spectra (default: "
                        "keep them untouched; other files are never replaced)")
    parser.add_argument("--quiet", action="store_true", help="print nothing on success")


def run(args):
    """Write the files; existing ones are kept unless ``--overwrite``; returns 0."""
    from zline.physics.demo import DEMO_FILES, write_demo_spectra  # noqa: PLC0415

    directory = Path(args.directory)
    if directory.exists() and not directory.is_dir():
        raise CommandError(f"DIR {str(directory)!r} exists and is not a directory")
    existed = {name: (directory / fname).exists() for name, fname in DEMO_FILES.items()}
    try:
        paths = write_demo_spectra(directory, overwrite=args.overwrite,
                                   skip_existing=not args.overwrite)
    except PermissionError as exc:
        raise CommandError(f"cannot write into {str(directory)!r}: {exc.strerror}") from None
    except FileExistsError as exc:  # --overwrite onto a file zline did not write
        raise CommandError(str(exc)) from None
    if not args.quiet:
        for name, path in paths.items():
            if existed[name] and not args.overwrite:
                print(f"kept     {path} (exists; --overwrite replaces it)")
            else:
                print(f"wrote    {path}")
    return 0
