"""The ``zline`` command line.

Each sub-command lives in its own module of this package (``lines.py``, ``info.py`` ...) and
defines ``COMMAND`` (its name), ``HELP`` (one line), ``add_arguments(parser)`` and ``run(args)``
returning an exit code.  The dispatcher finds them by listing this package's folder, so adding a
command touches no shared file.

Start-up stays fast: the names and help lines are read from each module's source (``COMMAND``
and ``HELP`` must be plain string literals there); only the command being run is imported, and
it imports its heavy dependencies (scipy, specutils, the line tables) inside ``add_arguments``
and ``run``.  ``zline --help`` imports none of them.
"""

import argparse
import importlib
import os
import sys

__all__ = ["main", "build_parser", "commands", "CommandError"]


class CommandError(Exception):
    """A user error on the command line: printed as one line on stderr, exit status 2."""


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line, no usage dump, never a traceback
        self.exit(2, f"{self.prog}: error: {message}\n")


def _literals(path):
    """``COMMAND`` and ``HELP`` of a command module, read from its source without importing it."""
    import ast  # noqa: PLC0415

    try:
        with open(path, encoding="utf-8") as fh:
            tree = ast.parse(fh.read(), filename=path)
    except (OSError, SyntaxError, ValueError):
        return None
    found = {}
    for node in tree.body:
        if isinstance(node, ast.Assign) and len(node.targets) == 1 \
                and isinstance(node.targets[0], ast.Name) \
                and node.targets[0].id in ("COMMAND", "HELP"):
            try:
                found[node.targets[0].id] = ast.literal_eval(node.value)
            except ValueError:
                return None
    return found if set(found) == {"COMMAND", "HELP"} else None


def commands():
    """``{name: (help, module name)}`` of every sub-command, found without importing them."""
    out = {}
    for fname in sorted(os.listdir(__path__[0])):
        name, ext = os.path.splitext(fname)
        if ext != ".py" or name.startswith("_") or not name.isidentifier():
            continue
        found = _literals(os.path.join(__path__[0], fname))
        if found is None:  # not plain literals: import to find out
            mod = importlib.import_module(f"{__name__}.{name}")
            if not hasattr(mod, "COMMAND"):
                continue
            found = {"COMMAND": mod.COMMAND, "HELP": mod.HELP}
        out[found["COMMAND"]] = (found["HELP"], f"{__name__}.{name}")
    return dict(sorted(out.items()))


def _version():
    from importlib.metadata import PackageNotFoundError, version  # noqa: PLC0415

    try:
        return version("zline")
    except PackageNotFoundError:  # pragma: no cover - running from an uninstalled tree
        return "0+unknown"


class _Version(argparse.Action):
    """``--version``, looking the version up only when asked."""

    def __init__(self, option_strings, dest=argparse.SUPPRESS, default=argparse.SUPPRESS,
                 help="show the version and exit"):
        super().__init__(option_strings=option_strings, dest=dest, default=default, nargs=0,
                         help=help)

    def __call__(self, parser, namespace, values, option_string=None):
        print(f"zline {_version()}")
        parser.exit()


def build_parser(only=None):
    """The argument parser.

    Parameters
    ----------
    only : str, optional
        Import and add the arguments of this sub-command only (the others are listed with their
        help line); default: all of them.
    """
    parser = _Parser(prog="zline", description="Hydrogen-like lines, spectra and redshifts.")
    parser.add_argument("--version", action=_Version)
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    for name, (text, module) in commands().items():
        p = sub.add_parser(name, help=text, description=text)
        if only is None or only == name:
            mod = importlib.import_module(module)
            mod.add_arguments(p)
            p.set_defaults(_run=mod.run)
    return parser


def main(argv=None):
    argv = sys.argv[1:] if argv is None else [str(a) for a in argv]
    # top-level options take no value, so the first word that is not an option is the command
    chosen = next((a for a in argv if not a.startswith("-")), None)
    parser = build_parser(only=chosen if chosen is not None else "")
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
