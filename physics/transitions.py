"""Electric-dipole lines of one-electron species: positions, oscillator strengths, A values, labels.

Every line comes from the level energies of `zline.physics.levels` and the exact radial dipole
integrals of `zline.physics.radial`; nothing is tabulated.

Fine-structure components ``n l j -> n' l' j'`` (``|l - l'| = 1``, ``|j - j'| <= 1``) have the line
strength ``S = (2j+1)(2j'+1) {l j 1/2; j' l' 1}**2 max(l, l') |R|**2 e**2 a**2`` with
``a = a0 (m_e / mu) / Z_eff``, and

    A_ul = 16 pi**3 sigma**3 S / (3 h eps0 g_u),    g_l f_lu = eps0 m_e c / (2 pi e**2) lambda**2 g_u A_ul

(``g_l f_lu = 1.499194e-16 lambda[A]**2 g_u A_ul``).  A multiplet ``n -> n'`` sums every component:
``g = 2 n**2``, ``A = sum g_u A / (2 n_u**2)``, ``f = sum g_l f / (2 n_l**2)``, and its position is
the ``g_u A``-weighted centroid of the component wavenumbers.  For the centroid of a multiplet the
components of one ``l -> l'`` pair are taken at the ``(2j+1)``-weighted mean of their levels (exact
for the line-strength weights; the ``sigma**3`` weight within a pair is then a second-order effect,
below 1e-9 relative for every line here).

Wavelengths above 2000 A (vacuum) are converted to air on request with `zline.physics.media`;
shorter ones stay in vacuum (common practice); the table meta records this.
"""

import functools
import math
import warnings
from fractions import Fraction

import astropy.constants as const
import astropy.units as u
import numpy as np
from astropy.table import QTable

from zline.physics import radial as _radial

__all__ = [
    "SERIES",
    "line_table",
    "series_limit",
    "series_name",
    "line_label",
    "radial_integral",
    "BOHR_RADIUS",
]

#: Series name -> lower principal quantum number.
SERIES = {"Lyman": 1, "Balmer": 2, "Paschen": 3, "Brackett": 4, "Pfund": 5, "Humphreys": 6}
_SERIES_PREFIX = {1: "Ly", 2: "H", 3: "Pa", 4: "Br", 5: "Pf", 6: "Hu"}
_GREEK = "αβγδεζηθικλμνξοπρστυφχψω"
_OPTICAL_LABEL_SPECIES = ("H I", "D I", "T I")

#: The Bohr radius as a unit, for `radial_integral`.
BOHR_RADIUS = u.def_unit("a_0", const.a0, doc="Bohr radius")

_MEDIA = ("vacuum", "air")
_A_COEF = 16.0 * math.pi**3 / (3.0 * const.h.si.value * const.eps0.si.value)  # SI
_F_COEF = const.eps0.si.value * const.m_e.si.value * const.c.si.value / (
    2.0 * math.pi * const.e.si.value**2)
_EA0_SQ = (const.e.si.value * const.a0.si.value) ** 2
_UV_CUT_AA = 2000.0


def _lazy():
    from zline.physics import constants, levels, species  # noqa: PLC0415 (written in parallel)

    return constants, levels, species


def _species(name):
    _, _, species = _lazy()
    if isinstance(name, str):
        return species.get_species(name)
    if hasattr(name, "Z") and hasattr(name, "mass_ratio"):
        return name
    raise TypeError(f"Argument 'species' must be a species name such as 'H I'; got {name!r}")


def _symbol(sp):
    return getattr(sp, "element", None) or sp.name.split()[0].lstrip("0123456789")


# ---------------------------------------------------------------------------------- angular


def _fact(n):
    return math.factorial(int(n))


def _delta(a, b, c):
    return Fraction(_fact(a + b - c) * _fact(a - b + c) * _fact(-a + b + c), _fact(a + b + c + 1))


@functools.lru_cache(maxsize=None)
def _six_j_squared(a2, b2, c2, d2, e2, f2):
    """Exact square of the 6j symbol {a b c; d e f}, arguments given as twice their value."""
    a, b, c, d, e, f = (Fraction(x, 2) for x in (a2, b2, c2, d2, e2, f2))
    for x, y, z in ((a, b, c), (a, e, f), (d, b, f), (d, e, c)):
        if not (abs(x - y) <= z <= x + y) or (x + y + z).denominator != 1:
            return Fraction(0)
    tmin = int(max(a + b + c, a + e + f, d + b + f, d + e + c))
    tmax = int(min(a + b + d + e, a + c + d + f, b + c + e + f))
    total = 0
    for t in range(tmin, tmax + 1):
        total += (-1) ** t * Fraction(
            _fact(t + 1),
            _fact(t - a - b - c) * _fact(t - a - e - f) * _fact(t - d - b - f)
            * _fact(t - d - e - c) * _fact(a + b + d + e - t) * _fact(a + c + d + f - t)
            * _fact(b + c + e + f - t))
    return _delta(a, b, c) * _delta(a, e, f) * _delta(d, b, f) * _delta(d, e, c) * total**2


def _angular(l_u, j_u, l_l, j_l):
    """(2j+1)(2j'+1){l j 1/2; j' l' 1}^2 max(l, l') as a float."""
    six = _six_j_squared(2 * l_u, int(round(2 * j_u)), 1, int(round(2 * j_l)), 2 * l_l, 2)
    return float((2 * j_u + 1) * (2 * j_l + 1) * six) * max(l_u, l_l)


# ---------------------------------------------------------------------------------- helpers


def radial_integral(n, l, n2, l2, species=None):
    """Radial dipole integral ``|<n l| r |n2 l2>|`` of a one-electron species.

    Parameters
    ----------
    n, l, n2, l2 : int or array of int
        Quantum numbers of the two states (``|l - l2| = 1``).
    species : str, optional
        If given, scale by ``(m_e / mu) / Z_eff`` of that species; otherwise Z = 1, infinite mass.

    Returns
    -------
    `~astropy.units.Quantity`
        In units of the Bohr radius (`BOHR_RADIUS`, convertible to any length).
    """
    value = _radial.radial_dipole(n, l, n2, l2)
    if species is not None:
        sp = _species(species)
        value = value / (sp.mass_ratio * sp.charge)
    return u.Quantity(value, BOHR_RADIUS)


def series_name(n_lower):
    """Name of the series ending on ``n_lower`` ("Lyman" ... "Humphreys", then "n=7" ...)."""
    for name, n in SERIES.items():
        if n == n_lower:
            return name
    return f"n={int(n_lower)}"


def _greek(dn):
    return _GREEK[dn - 1] if 1 <= dn <= len(_GREEK) else f"({dn})"


def line_label(species, n_upper, n_lower, rest_vacuum_aa=None, j_upper=None):
    """Conventional label of a line.

    H I/D I/T I: "Lyα", "Hβ", "Paγ" ... for ``n_lower <= 6``; every species with ``n_lower >= 7``:
    radio style "H109α", "He109α", "C109α"; hydrogen-like ions: "Lyα" for the Lyman series (the
    components to 2p3/2 and 2p1/2, of every species, as "Lyα1" and "Lyα2"), other series as "<species> <wavelength>"
    with the wavelength in Å rounded to an integer (air above 2000 Å by Morton 2000, vacuum below,
    the habit of the trade; 4 significant digits below 1000 Å), e.g. "He II 4686".
    """
    sp = _species(species)
    dn = int(n_upper) - int(n_lower)
    if n_lower >= 7:
        return f"{_symbol(sp)}{int(n_lower)}{_greek(dn)}"
    if sp.name in _OPTICAL_LABEL_SPECIES or n_lower == 1:
        base = f"{_SERIES_PREFIX[int(n_lower)]}{_greek(dn)}"
        if j_upper is not None and n_lower == 1 and dn == 1:
            base += "1" if abs(j_upper - 1.5) < 1e-9 else "2"
        return base
    lam = float(rest_vacuum_aa)
    if lam > _UV_CUT_AA:
        from zline.physics import media  # noqa: PLC0415

        # a name only (rounded air wavelength, the trade's habit): no range notice for infrared lines
        lam = float(media._vac_to_air_angstrom(lam, "morton2000"))
    text = f"{lam:.0f}" if lam >= 1000 else f"{lam:.4g}"
    return f"{sp.name} {text}"


def _check_choice(value, allowed, argument):
    if value not in allowed:
        raise ValueError(f"Argument '{argument}' must be one of {', '.join(map(repr, allowed))}; "
                         f"got {value!r}")
    return value


def _int_range(value, argument, minimum=1):
    """None, int or (first, last) -> (first, last) or None."""
    if value is None:
        return None
    if isinstance(value, (int, np.integer)) and not isinstance(value, bool):
        lo = hi = int(value)
    elif isinstance(value, (tuple, list)) and len(value) == 2 and all(
            isinstance(v, (int, np.integer)) and not isinstance(v, bool) for v in value):
        lo, hi = int(value[0]), int(value[1])
    else:
        raise TypeError(f"Argument '{argument}' must be an integer or a (first, last) pair of "
                        f"integers; got {value!r}")
    if lo < minimum or hi < lo:
        raise ValueError(f"Argument '{argument}' must satisfy {minimum} <= first <= last; "
                         f"got {value!r}")
    return lo, hi


def series_limit(species, n_lower, model="qed", unit=u.AA):
    """Series limit: the ionization wavenumber of the lower level, as a spectral position.

    Parameters
    ----------
    species : str
    n_lower : int
        Lower principal quantum number (the ``(2j+1)``-weighted centroid of its levels is used).
    model : str
        One of `zline.physics.levels.MODELS`.
    unit : `~astropy.units.Unit`
        Any spectral unit (vacuum).

    Returns
    -------
    `~astropy.units.Quantity`
    """
    _, levels, _ = _lazy()
    sp = _species(species)
    n = int(n_lower)
    _check_choice(model, tuple(levels.MODELS), "model")
    ls, js, gs = [], [], []
    for l in range(n):
        for j in (l - 0.5, l + 0.5):
            if j > 0:
                ls.append(l), js.append(j), gs.append(2 * j + 1)
    t = levels.term_value_invcm(sp, np.full(len(ls), n), np.array(ls), np.array(js), model)
    sigma = float(np.sum(np.asarray(gs) * t) / np.sum(gs))
    return (sigma * u.cm**-1).to(u.Unit(unit), equivalencies=u.spectral())


# ---------------------------------------------------------------------------------- tables


_LEVEL_TABLES = {}  # (species repr, model) -> read-only mean term table, largest nmax so far
_LEVEL_TABLES_MAX = 16  # species/model combinations kept (about 4 MB each at n = 1000)


def _mean_term_table(sp, model, nmax):
    """(2j+1)-weighted mean term value T(n, l) [cm^-1] for all l of n = 1..nmax, flat.

    ``T(n, l)`` sits at index ``n (n - 1) / 2 + l``, so the table for a smaller ``nmax`` is a
    prefix of a larger one: each species and model is computed once, at the largest ``nmax``
    asked for so far, and later calls slice it (same values, read-only).
    """
    _, levels, _ = _lazy()
    key = (repr(sp), model)
    size = nmax * (nmax + 1) // 2
    table = _LEVEL_TABLES.get(key)
    if table is not None and table.size >= size:
        _LEVEL_TABLES[key] = _LEVEL_TABLES.pop(key)  # most recently used last
        return table[:size]
    n = np.repeat(np.arange(1, nmax + 1), np.arange(1, nmax + 1))
    start = n * (n - 1) // 2
    l = np.arange(n.size) - start
    jlo = np.where(l > 0, l - 0.5, 0.5)
    jhi = l + 0.5
    with warnings.catch_warnings():
        # the table spans n = 1..nmax; the caller warns for the levels it actually uses
        warnings.simplefilter("ignore", levels.HydrogenicApproximationWarning)
        t_hi = np.asarray(levels.term_value_invcm(sp, n, l, jhi, model), dtype=float)
        t_lo = np.asarray(levels.term_value_invcm(sp, n, l, jlo, model), dtype=float)
    w_lo = np.where(l > 0, 2.0 * l, 0.0)
    table = (w_lo * t_lo + (2.0 * l + 2.0) * t_hi) / (w_lo + 2.0 * l + 2.0)
    table.flags.writeable = False
    _LEVEL_TABLES.pop(key, None)
    while len(_LEVEL_TABLES) >= _LEVEL_TABLES_MAX:
        _LEVEL_TABLES.pop(next(iter(_LEVEL_TABLES)))  # oldest first
    _LEVEL_TABLES[key] = table
    return table


def _multiplets(sp, model, n_up, n_lo):
    """sigma centroid [cm^-1], A [s^-1], f for multiplets n_up -> n_lo (arrays)."""
    _, levels, _ = _lazy()
    levels._warn_rydberg(sp, n_lo)  # the lowest level any of these lines uses
    nmax = int(max(n_up.max(), n_lo.max()))
    table = _mean_term_table(sp, model, nmax)
    # sum S sigma, S sigma^3, S sigma^4 over the components, one fused pass over all pairs
    acc1, acc3, acc4 = _radial.multiplet_moments(n_up, n_lo, table)
    scale = 2.0 * _EA0_SQ / (sp.mass_ratio * sp.charge) ** 2  # spin factor 2, a0 -> a
    sigma = acc4 / acc3
    g_u = 2.0 * n_up.astype(float) ** 2
    g_l = 2.0 * n_lo.astype(float) ** 2
    a_ul = _A_COEF * 1e6 * acc3 * scale / g_u  # sigma in cm^-1 -> m^-1: (100)^3
    f_lu = _F_COEF * _A_COEF * 1e2 * acc1 * scale / g_l  # lambda^2 sigma^3 = sigma, cm^-1 -> m^-1
    return sigma, a_ul, f_lu


def _components(sp, model, pairs):
    """Rows (n_u, l_u, j_u, n_l, l_l, j_l, sigma, A, f) for every fine-structure component."""
    _, levels, _ = _lazy()
    rows = []
    for nu, nl in pairs:
        plus, minus = _radial.radial_ladder(nu, nl)
        for ll in range(nl):
            for lu, rad in ((ll + 1, plus[ll]), (ll - 1, minus[ll])):
                if lu < 0 or lu >= nu:
                    continue
                for ju in (lu + 0.5, lu - 0.5):
                    if ju < 0:
                        continue
                    for jl in (ll - 0.5, ll + 0.5):
                        if jl < 0 or abs(ju - jl) > 1:
                            continue
                        ang = _angular(lu, ju, ll, jl)
                        if ang == 0:
                            continue
                        rows.append((nu, lu, ju, nl, ll, jl, ang * rad * rad))
    if not rows:
        return None
    arr = np.array(rows, dtype=float)
    nu, lu, ju, nl, ll, jl, s_au = arr.T
    t_u = np.asarray(levels.term_value_invcm(sp, nu.astype(int), lu.astype(int), ju, model))
    t_l = np.asarray(levels.term_value_invcm(sp, nl.astype(int), ll.astype(int), jl, model))
    sigma = t_l - t_u
    s_si = s_au * _EA0_SQ / (sp.mass_ratio * sp.charge) ** 2
    g_u = 2 * ju + 1
    g_l = 2 * jl + 1
    a_ul = _A_COEF * (sigma * 100.0) ** 3 * s_si / g_u
    f_lu = _F_COEF * (1.0 / (sigma * 100.0)) ** 2 * g_u * a_ul / g_l
    return nu.astype(int), lu.astype(int), ju, nl.astype(int), ll.astype(int), jl, sigma, a_ul, f_lu


def _pairs(lower, upper, series, delta_n):
    lo = _int_range(lower, "lower")
    if series is not None:
        key = {k.lower(): v for k, v in SERIES.items()}.get(str(series).lower())
        if key is None:
            raise ValueError(f"Argument 'series' must be one of {', '.join(map(repr, SERIES))}; "
                             f"got {series!r}")
        if lo is not None and not (lo[0] <= key <= lo[1]):
            raise ValueError(f"Arguments 'series' ({series!r}, n_lower={key}) and 'lower' "
                             f"({lower!r}) disagree")
        lo = (key, key)
    if lo is None:
        lo = (1, 6)
    up = _int_range(upper, "upper", minimum=2)
    dn = _int_range(delta_n, "delta_n")
    if up is None and dn is None:
        dn = (1, 10)
    nl_all = np.arange(lo[0], lo[1] + 1)
    out = []
    for nl in nl_all:
        if up is not None:
            cand = np.arange(max(up[0], nl + 1), up[1] + 1)
        else:
            cand = np.arange(nl + dn[0], nl + dn[1] + 1)
        if dn is not None:
            cand = cand[(cand - nl >= dn[0]) & (cand - nl <= dn[1])]
        out.extend((int(n), int(nl)) for n in cand)
    if not out:
        raise ValueError(f"No transitions match lower={lower!r}, upper={upper!r}, "
                         f"series={series!r}, delta_n={delta_n!r}")
    return out


def _to_unit(sigma_invcm, unit, medium, air_formula):
    """Vacuum wavenumbers -> Quantity in ``unit``; air for wavelengths above 2000 A if asked."""
    unit = u.Unit(unit)
    if not unit.is_equivalent(u.m, equivalencies=u.spectral()):
        raise u.UnitTypeError(f"Argument 'unit' must be a spectral unit (length, frequency, "
                              f"energy or wavenumber); got '{unit}' ({unit.physical_type})")
    if medium == "air" and not unit.is_equivalent(u.m):
        raise ValueError(f"Argument 'medium'='air' needs a wavelength unit; got unit '{unit}' "
                         f"({unit.physical_type}): frequencies and energies are medium-free")
    vac_aa = 1e8 / np.asarray(sigma_invcm, dtype=float)
    if medium == "air":
        from zline.physics import media  # noqa: PLC0415

        out = vac_aa.copy()
        sel = vac_aa > _UV_CUT_AA
        if np.any(sel):
            out[sel] = media.vacuum_to_air(vac_aa[sel] * u.AA, air_formula).to_value(u.AA)
        return (out * u.AA).to(unit)
    if unit.is_equivalent(u.m):
        return (vac_aa * u.AA).to(unit)
    return (np.asarray(sigma_invcm, dtype=float) * u.cm**-1).to(unit, equivalencies=u.spectral())


def line_table(species, lower=None, upper=None, series=None, delta_n=None, model="qed",
               components=False, medium="vacuum", air_formula="morton2000", unit=u.AA,
               z=None, velocity=None, convention="optical"):
    """Table of electric-dipole lines of a one-electron species.

    Parameters
    ----------
    species : str
        Species name, e.g. ``"H I"``, ``"He II"``, ``"C VI"``, ``"He I"`` (see
        `zline.physics.species.get_species`).
    lower, upper : int or (int, int), optional
        Lower / upper principal quantum number or inclusive range.  Default lower: 1-6 (or the
        ``series``); default upper: ``n_lower + 1 .. n_lower + 10`` (or per ``delta_n``).
    series : str, optional
        "Lyman", "Balmer", "Paschen", "Brackett", "Pfund" or "Humphreys" (sets ``lower``).
    delta_n : int or (int, int), optional
        Keep only ``n_upper - n_lower`` in this value/range.
    model : str
        Level model, one of `zline.physics.levels.MODELS`.
    components : bool
        Fine-structure components ``n l j -> n' l' j'`` instead of multiplets.
    medium : {"vacuum", "air"}
        Air applies only to wavelength units and to lines above 2000 A (vacuum below).
    air_formula : str
        One of `zline.physics.media.AIR_FORMULAS`.
    unit : `~astropy.units.Unit`
        Any spectral unit for ``rest`` (and ``observed``).
    z : float, optional
        Redshift; with ``velocity`` adds an ``observed`` column.
    velocity : `~astropy.units.Quantity` ['speed'], optional
    convention : str
        Velocity convention, one of `zline.physics.kinematics.CONVENTIONS`.

    Returns
    -------
    `~astropy.table.QTable`
        Columns ``label, species, n_upper, n_lower, rest, f_osc, A_ul`` (+ ``l_upper, j_upper,
        l_lower, j_lower`` with components, + ``observed`` with z or velocity).  ``f_osc`` is the
        absorption oscillator strength ``f_lu``, ``A_ul`` in s^-1.  Meta: ``model, medium,
        air_formula, air_applies_above, constants, z, velocity, convention, zline_version``.
    """
    constants, levels, _ = _lazy()
    from zline.physics import kinematics, media  # noqa: PLC0415

    sp = _species(species)
    _check_choice(model, tuple(levels.MODELS), "model")
    _check_choice(medium, _MEDIA, "medium")
    _check_choice(air_formula, tuple(media.AIR_FORMULAS), "air_formula")
    _check_choice(convention, tuple(kinematics.CONVENTIONS), "convention")
    if velocity is not None and not isinstance(velocity, u.Quantity):
        raise TypeError(f"Argument 'velocity' must be a Quantity with a speed unit "
                        f"(e.g. 300 * u.km / u.s); got {velocity!r}")
    pairs = _pairs(lower, upper, series, delta_n)
    n_up = np.array([p[0] for p in pairs])
    n_lo = np.array([p[1] for p in pairs])
    cols = {}
    if components:
        res = _components(sp, model, pairs)
        nu, lu, ju, nl, ll, jl, sigma, a_ul, f_lu = res
        order = np.lexsort((-ju, -lu, jl, ll, nu, nl))
        nu, lu, ju, nl, ll, jl, sigma, a_ul, f_lu = (x[order] for x in res)
        cols.update(l_upper=lu, j_upper=ju, l_lower=ll, j_lower=jl)
    else:
        sigma, a_ul, f_lu = _multiplets(sp, model, n_up, n_lo)
        order = np.lexsort((n_up, n_lo))
        nu, nl, sigma, a_ul, f_lu = n_up[order], n_lo[order], sigma[order], a_ul[order], f_lu[order]
        ju = [None] * nu.size
    vac_aa = 1e8 / sigma
    labels = [line_label(sp, a, b, lam, j) if b < 7 else f"{_symbol(sp)}{b}{_greek(a - b)}"
              for a, b, lam, j in zip(nu, nl, vac_aa, ju)]
    rest = _to_unit(sigma, unit, medium, air_formula)
    table = QTable()
    table["label"] = labels
    table["species"] = [sp.name] * len(labels)
    table["n_upper"] = np.asarray(nu, dtype=int)
    table["n_lower"] = np.asarray(nl, dtype=int)
    for key in ("l_upper", "j_upper", "l_lower", "j_lower"):
        if key in cols:
            table[key] = cols[key]
    table["rest"] = rest
    table["f_osc"] = f_lu
    table["A_ul"] = a_ul * u.s**-1
    if z is not None or velocity is not None:
        zz = 0.0 if z is None else z
        vv = 0.0 * u.km / u.s if velocity is None else velocity
        factor = kinematics.shift_factor(zz, vv, convention)
        table["observed"] = _to_unit(sigma / factor, unit, medium, air_formula)
    try:
        from zline import __version__ as version  # noqa: PLC0415
    except ImportError:  # pragma: no cover
        version = "unknown"
    table.meta.update(
        model=model, medium=medium, air_formula=air_formula if medium == "air" else None,
        air_applies_above="2000 Angstrom (vacuum wavelength); vacuum below" if medium == "air"
        else None,
        constants=constants.CODATA_RELEASE, z=z,
        velocity=None if velocity is None else f"{velocity.to_value(u.km / u.s)!r} km / s",
        convention=convention, zline_version=version,
        kind="components" if components else "multiplets",
    )
    return table
