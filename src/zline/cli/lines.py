"""``zline lines``: print a table of computed lines of a one-electron species."""

import io
import json
import re
import sys
import warnings

import astropy.units as u
import numpy as np

from zline.cli import CommandError

__all__ = ["COMMAND", "HELP", "add_arguments", "run"]

COMMAND = "lines"
HELP = "Computed lines of a one-electron species (positions, f, A), optionally shifted."

_FORMATS = ("text", "csv", "ecsv", "json")
_MODELS = ("bohr", "reduced-mass", "dirac", "qed")
_MEDIA = ("vacuum", "air")
_AIR = ("morton2000", "edlen1966", "ciddor1996", "greisen2006")
_CONVENTIONS = ("optical", "radio", "relativistic")


def add_arguments(parser):
    """Add the options of ``zline lines`` to ``parser``."""
    parser.add_argument("species", metavar="SPECIES", help='species, e.g. "H I", "He II", "C VI"')
    parser.add_argument("--lower", metavar="N|N1-N2", help="lower n or range (default 1-6)")
    parser.add_argument("--upper", metavar="N|N1-N2",
                        help="upper n or range (default n_lower+1 .. n_lower+10)")
    parser.add_argument("--series", metavar="NAME",
                        help="Lyman, Balmer, Paschen, Brackett, Pfund or Humphreys")
    parser.add_argument("--delta-n", metavar="K|K1-K2", help="keep n_upper - n_lower = K")
    parser.add_argument("--model", default="qed", help=f"level model: {', '.join(_MODELS)}")
    parser.add_argument("--components", action="store_true",
                        help="fine-structure components instead of multiplets")
    parser.add_argument("--medium", default="vacuum", help="vacuum or air (air above 2000 A)")
    parser.add_argument("--air-formula", default="morton2000", help=f"{', '.join(_AIR)}")
    parser.add_argument("--unit", default="Angstrom", help="any spectral unit (default Angstrom)")
    parser.add_argument("--z", type=str, default=None, help="redshift")
    parser.add_argument("--velocity", type=str, default=None, metavar="KM/S",
                        help="line-of-sight velocity in km/s")
    parser.add_argument("--convention", default="optical", help=f"{', '.join(_CONVENTIONS)}")
    parser.add_argument("--format", default="text", help=f"{', '.join(_FORMATS)}")


def _choice(value, allowed, option):
    if value not in allowed:
        raise CommandError(f"argument {option}: {value!r} is not one of {', '.join(allowed)}")
    return value


def _range(text, option):
    if text is None:
        return None
    m = re.fullmatch(r"\s*(\d+)\s*(?:-\s*(\d+)\s*)?", text)
    if not m:
        raise CommandError(f"argument {option}: expected N or N1-N2 (positive integers), "
                           f"got {text!r}")
    a = int(m.group(1))
    b = int(m.group(2)) if m.group(2) else a
    if a < 1 or b < a:
        raise CommandError(f"argument {option}: expected 1 <= N1 <= N2, got {text!r}")
    return a if a == b else (a, b)


def _float(text, option):
    if text is None:
        return None
    try:
        return float(text)
    except ValueError:
        raise CommandError(f"argument {option}: expected a number, got {text!r}") from None


def _table_text(table, fmt):
    out = table.copy()
    if fmt == "json":
        rows = []
        units = {}
        for name in out.colnames:
            col = out[name]
            if isinstance(col, u.Quantity):
                units[name] = col.unit.to_string()
        for row in out:
            rec = {}
            for name in out.colnames:
                val = row[name]
                if isinstance(val, u.Quantity):
                    val = val.value
                if isinstance(val, np.generic):
                    val = val.item()
                rec[name] = val
            rows.append(rec)
        meta = {k: v for k, v in out.meta.items()}
        return json.dumps({"meta": meta, "units": units, "lines": rows}, ensure_ascii=False,
                          indent=1) + "\n"
    buf = io.StringIO()
    if fmt == "text":
        out["rest"].info.format = ".6f" if "rest" in out.colnames else None
        if "observed" in out.colnames:
            out["observed"].info.format = ".6f"
        out["f_osc"].info.format = ".5e"
        out["A_ul"].info.format = ".5e"
        lines = out.pformat(max_lines=-1, max_width=-1)
        head = ", ".join(f"{k}={v}" for k, v in out.meta.items() if v is not None)
        return f"# {head}\n" + "\n".join(lines) + "\n"
    if fmt == "csv":
        for name in out.colnames:
            col = out[name]
            if isinstance(col, u.Quantity):
                out.rename_column(name, f"{name} [{col.unit.to_string()}]")
        out.meta.clear()
        out.write(buf, format="ascii.csv")
        return buf.getvalue()
    out.write(buf, format="ascii.ecsv")
    return buf.getvalue()


def run(args):
    """Run ``zline lines``; returns the exit code."""
    from zline.physics import transitions  # noqa: PLC0415

    _choice(args.model, _MODELS, "--model")
    _choice(args.medium, _MEDIA, "--medium")
    _choice(args.air_formula, _AIR, "--air-formula")
    _choice(args.convention, _CONVENTIONS, "--convention")
    _choice(args.format, _FORMATS, "--format")
    if args.series is not None:
        allowed = {k.lower(): k for k in transitions.SERIES}
        if args.series.lower() not in allowed:
            raise CommandError(f"argument --series: {args.series!r} is not one of "
                               f"{', '.join(transitions.SERIES)}")
    try:
        unit = u.Unit(args.unit)
    except ValueError:
        raise CommandError(f"argument --unit: {args.unit!r} is not a unit astropy knows "
                           "(e.g. Angstrom, nm, um, GHz, MHz, eV, keV, 1/cm)") from None
    if not unit.is_equivalent(u.m, equivalencies=u.spectral()):
        raise CommandError(f"argument --unit: {args.unit!r} is not a spectral unit "
                           "(length, frequency, energy or wavenumber)")
    if args.medium == "air" and not unit.is_equivalent(u.m):
        raise CommandError(f"argument --medium: air needs a wavelength --unit, got {args.unit!r}")
    z = _float(args.z, "--z")
    if z is not None and not z > -1:
        raise CommandError(f"argument --z: expected z > -1, got {args.z!r}")
    v = _float(args.velocity, "--velocity")
    velocity = None if v is None else v * u.km / u.s
    try:
        from zline.physics import species as _sp  # noqa: PLC0415

        _sp.get_species(args.species)
    except ValueError as exc:
        raise CommandError(f"argument SPECIES: {exc}") from None
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            table = transitions.line_table(
                args.species, lower=_range(args.lower, "--lower"),
                upper=_range(args.upper, "--upper"), series=args.series,
                delta_n=_range(args.delta_n, "--delta-n"), model=args.model,
                components=args.components, medium=args.medium, air_formula=args.air_formula,
                unit=unit, z=z, velocity=velocity, convention=args.convention)
    except (ValueError, TypeError) as exc:
        raise CommandError(str(exc).splitlines()[0]) from None
    for w in {str(w.message).splitlines()[0] for w in caught}:
        print(f"zline lines: warning: {w}", file=sys.stderr)
    sys.stdout.write(_table_text(table, args.format))
    return 0
