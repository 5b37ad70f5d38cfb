"""The ``zline`` command line.

Each sub-command lives in its own module of this package (``lines.py``, ``info.py`` ...) and
defines ``COMMAND`` (its name), ``HELP`` (one line), ``add_arguments(parser)`` and ``run(args)``
returning an exit code.  The dispatcher finds them with :mod:`pkgutil`, so adding a command
touches no shared file.
"""

import argparse
import importlib
import pkgutil
import sys

__all__ = ["main", "CommandError"]


class CommandError(Exception):
    """A user error on the command line: printed as one line on stderr, exit status 2."""


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line, no usage dump, never a traceback
        self.exit(2, f"{self.prog}: error: {message}\n")


def _commands():
    mods = []
    for info in pkgutil.iter_modules(__path__):
        if info.name.startswith("_"):
            continue
        mod = importlib.import_module(f"{__name__}.{info.name}")
        if hasattr(mod, "COMMAND"):
            mods.append(mod)
    return sorted(mods, key=lambda m: m.COMMAND)


def build_parser():
    from zline import __version__

    parser = _Parser(prog="zline", description="Hydrogen-like lines, spectra and redshifts.")
    parser.add_argument("--version", action="version", version=f"zline {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for mod in _commands():
        p = sub.add_parser(mod.COMMAND, help=mod.HELP, description=mod.HELP)
        mod.add_arguments(p)
        p.set_defaults(_run=mod.run)
    return parser


def main(argv=None):
    parser = build_parser()
    args = parser.parse_args(argv)
    if getattr(args, "_run", None) is None:
        parser.print_help()
        return 2
    try:
        return int(args._run(args) or 0)
    except BrokenPipeError:  # output piped into e.g. `head`: not an error
        return 0
    except CommandError as exc:
        print(f"zline {args.command}: error: {exc}", file=sys.stderr)
        return 2
    except (ValueError, OSError, KeyError) as exc:
        print(f"zline {args.command}: error: {exc}", file=sys.stderr)
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
