"""Named line sets for redshift work: computed one-electron lines plus a small tabulated list.

Hydrogen-like lines (H I, He II, the radio recombination lines of H, He and C, the X-ray Lyman
lines of C VI ... Ni XXVIII) are computed by `zline.physics.transitions.line_table` from the level
energies; only the other lines a galaxy or nebula redshift needs ([O II], [O III], [N II],
[S II], He I, Ca II, Na I ...) are read from ``data/lines_tabulated.ecsv``, in which every row
names its source.

Every rest position is held in vacuum; ``medium="air"`` converts wavelengths above 2000 A with
`zline.physics.media.vacuum_to_air` (vacuum is kept below 2000 A, common practice).  The
``strength`` column is a rough typical relative strength (emission lines: Hbeta = 1 in a
star-forming galaxy or nebula; absorption lines: a relative depth), for drawing markers with a
sensible emphasis; it is not a physical prediction for any one object.
"""

import functools
import warnings
from importlib import resources

import astropy.units as u
import numpy as np
from astropy.table import QTable

__all__ = ["LINE_SETS", "line_set", "line_set_for_axis", "tabulated_lines"]

#: Set name -> what it holds and its natural unit (used when ``unit=None``).
LINE_SETS = {
    "galaxy-emission": "Lyα, Balmer and Paschen lines (computed) with the forbidden and He I "
    "lines of star-forming galaxies (tabulated); Angstrom",
    "galaxy-absorption": "stellar and interstellar absorption: Balmer lines (computed), Ca II, "
    "Na I, Mg I, Mg II, Fe II ... (tabulated); Angstrom",
    "nebular": "long Balmer series to n = 30, Paschen, He II (computed), He I and forbidden "
    "lines (tabulated); Angstrom",
    "radio": "H, He and C radio recombination lines, alpha and beta, n = 40 ... 200 "
    "(computed); GHz",
    "xray": "Lyα1, Lyα2 and Lyβ of the hydrogen-like ions C VI ... Ni XXVIII (computed); keV",
    "hydrogen": "H I Lyman, Balmer, Paschen, Brackett and Pfund series (computed); Angstrom",
    "quasar": "broad and narrow lines of type 1 AGN from Lyα to Hα: Lyα, Balmer (computed), "
    "N V, Si IV+O IV], C IV, He II, C III], Mg II, [Ne V], [O II], [O III] (tabulated); Angstrom",
    "stellar": "absorption lines of stars: Balmer series (computed), Ca II H, K and triplet, "
    "Ca I, Fe I, Mg I b, Mg II, Na I D (tabulated); Angstrom",
}

_NATURAL_UNIT = {"radio": u.GHz, "xray": u.keV}
_MEDIA = ("vacuum", "air")
_UV_CUT_AA = 2000.0
_DATA_FILE = "lines_tabulated.ecsv"
_KINDS_FILE = "lines_kinds.ecsv"  # lines of the quasar and stellar sets

#: X-ray set: hydrogen-like ions (spectroscopic names).
XRAY_IONS = ("C VI", "N VII", "O VIII", "Ne X", "Na XI", "Mg XII", "Al XIII", "Si XIV", "P XV",
             "S XVI", "Ar XVIII", "Ca XX", "Ti XXII", "Cr XXIV", "Fe XXVI", "Ni XXVIII")

# Typical H I strengths relative to Hbeta: Balmer alpha..delta from case B at 1e4 K,
# n_e = 100 cm^-3 (Osterbrock & Ferland 2006, Table 4.4, as quoted); Paschen, Brackett, Lyman
# alpha from case B (Hummer & Storey 1987, from memory).  Higher members follow n_upper**-3 from
# the last listed member (common practice approximation, good to ~10% for H8 ... H10).
_H_STRENGTH = {
    (3, 2): 2.863, (4, 2): 1.0, (5, 2): 0.468, (6, 2): 0.259,
    (4, 3): 0.34, (5, 3): 0.162, (6, 3): 0.090, (7, 3): 0.055,
    (5, 4): 0.078, (6, 4): 0.045, (7, 4): 0.0275,
    (6, 5): 0.025,
    (2, 1): 33.0,
}
# Broad H I lines of type 1 AGN relative to broad Hbeta (common practice, rough; Lyα is kept at
# the ratio of a typical composite although the Lyα forest eats part of it).
_H_QUASAR = {(2, 1): 6.0, (3, 2): 3.5, (4, 2): 1.0, (5, 2): 0.4, (6, 2): 0.2}
# He II strengths relative to Hbeta in a highly ionised nebula (common practice, rough).
_HEII_STRENGTH = {(4, 3): 0.05, (3, 2): 0.3, (7, 4): 0.004, (9, 4): 0.002, (5, 3): 0.015}
# Radio recombination lines: relative to H alpha of the same n (common practice, rough).
_RRL_STRENGTH = {"H I": 1.0, "He I": 0.08, "C I": 0.03}
_RRL_BETA = 0.28
# X-ray Lyman lines: Lyα2/Lyα1 = 0.5 from the statistical weights (common practice); Lyβ rough.
_XRAY_STRENGTH = {"Lyα1": 1.0, "Lyα2": 0.5, "Lyβ": 0.15}


def _h_strength(n_upper, n_lower):
    key = (int(n_upper), int(n_lower))
    if key in _H_STRENGTH:
        return _H_STRENGTH[key]
    known = [nu for (nu, nl) in _H_STRENGTH if nl == n_lower]
    if not known:
        return 0.01
    last = max(known)
    return _H_STRENGTH[(last, int(n_lower))] * (last / n_upper) ** 3


@functools.lru_cache(maxsize=2)
def _tabulated_vacuum(name=_DATA_FILE):
    with resources.as_file(resources.files("zline.physics.data") / name) as path:
        table = QTable.read(path, format="ascii.ecsv")
    return table


def tabulated_lines():
    """The tabulated (non-hydrogenic) lines as stored: vacuum rest wavelengths with sources.

    Returns
    -------
    `~astropy.table.QTable`
        Columns ``label, species, rest`` [Angstrom, vacuum], ``kind, strength, sets, source``.
    """
    return _tabulated_vacuum().copy()


def _computed(species, model, **selection):
    from zline.physics.transitions import line_table  # noqa: PLC0415 (keeps import light)

    return line_table(species, model=model, medium="vacuum", unit=u.AA, **selection)


def _h_label(label, n_upper, n_lower):
    # trade habit: H8, H9 ... beyond Hε, Pa9 ... beyond Paε
    if n_lower == 2 and n_upper >= 8:
        return f"H{n_upper}"
    if n_lower == 3 and n_upper >= 9:
        return f"Pa{n_upper}"
    return label


def _rows_hydrogen(model, series, kind="emission", strength=None):
    """series: list of (n_lower, (first, last) n_upper)."""
    rows = []
    for n_lower, upper in series:
        t = _computed("H I", model, lower=n_lower, upper=upper)
        for row in t:
            nu, nl = int(row["n_upper"]), int(row["n_lower"])
            rows.append((_h_label(row["label"], nu, nl), "H I", row["rest"].to_value(u.AA),
                         _h_strength(nu, nl) if strength is None else strength, kind,
                         "computed", f"zline.physics.transitions, model {model}"))
    return rows


def _rows_he2(model):
    rows = []
    for (nu, nl), strength in _HEII_STRENGTH.items():
        t = _computed("He II", model, lower=nl, upper=nu)
        row = t[0]
        rows.append((row["label"], "He II", row["rest"].to_value(u.AA), strength, "emission",
                     "computed", f"zline.physics.transitions, model {model}"))
    return rows


def _rows_radio(model):
    from zline.physics.levels import HydrogenicApproximationWarning  # noqa: PLC0415

    rows = []
    for species, rel in _RRL_STRENGTH.items():
        with warnings.catch_warnings():
            # the level cache of line_table also evaluates n < 40, which this set never uses;
            # the Rydberg-carrier warning concerns only those low levels
            warnings.simplefilter("ignore", HydrogenicApproximationWarning)
            t = _computed(species, model, lower=(40, 200), delta_n=(1, 2))
        for row in t:
            dn = int(row["n_upper"]) - int(row["n_lower"])
            rows.append((row["label"], species, row["rest"].to_value(u.AA),
                         rel * (1.0 if dn == 1 else _RRL_BETA), "emission", "computed",
                         f"zline.physics.transitions, model {model}"))
    return rows


def _rows_xray(model):
    rows = []
    for ion in XRAY_IONS:
        comp = _computed(ion, model, lower=1, upper=2, components=True)
        beta = _computed(ion, model, lower=1, upper=3)
        for row in list(comp) + list(beta):
            label = str(row["label"])
            if label not in _XRAY_STRENGTH:
                continue
            rows.append((f"{ion} {label}", ion, row["rest"].to_value(u.AA),
                         _XRAY_STRENGTH[label], "emission", "computed",
                         f"zline.physics.transitions, model {model}"))
    return rows


def _rows_tabulated(name, data_file=_DATA_FILE):
    table = _tabulated_vacuum(data_file)
    rows = []
    for row in table:
        if name in str(row["sets"]).split():
            rows.append((str(row["label"]), str(row["species"]), row["rest"].to_value(u.AA),
                         float(row["strength"]), str(row["kind"]), "tabulated",
                         str(row["source"])))
    return rows


@functools.lru_cache(maxsize=32)
def _vacuum_rows(name, model):
    if name == "galaxy-emission":
        rows = _rows_hydrogen(model, [(1, (2, 2)), (2, (3, 10)), (3, (4, 10))])
        rows += _rows_tabulated(name)
    elif name == "galaxy-absorption":
        rows = _rows_hydrogen(model, [(2, (3, 12))], kind="absorption", strength=0.6)
        rows += _rows_tabulated(name)
    elif name == "nebular":
        rows = _rows_hydrogen(model, [(2, (3, 30)), (3, (4, 12))])
        rows += _rows_he2(model) + _rows_tabulated(name)
    elif name == "radio":
        rows = _rows_radio(model)
    elif name == "xray":
        rows = _rows_xray(model)
    elif name == "quasar":
        rows = []
        for (nu, nl), strength in _H_QUASAR.items():
            rows += _rows_hydrogen(model, [(nl, (nu, nu))], strength=strength)
        rows += _rows_tabulated(name, _KINDS_FILE)
    elif name == "stellar":
        rows = _rows_hydrogen(model, [(2, (3, 12))], kind="absorption", strength=0.8)
        rows += _rows_tabulated(name, _KINDS_FILE)
    elif name == "hydrogen":
        rows = _rows_hydrogen(model, [(1, (2, 12)), (2, (3, 30)), (3, (4, 20)), (4, (5, 15)),
                                      (5, (6, 12))])
    else:  # pragma: no cover (checked by the caller)
        raise AssertionError(name)
    rows.sort(key=lambda r: r[2])
    return tuple(rows)


def line_set(name, medium="vacuum", unit=None, air_formula="morton2000", model="qed"):
    """A named set of lines with rest positions, ready to draw or to identify.

    Parameters
    ----------
    name : str
        One of `LINE_SETS`.
    medium : {"vacuum", "air"}
        Medium of the ``rest`` column.  Air converts wavelengths above 2000 A only (vacuum
        below, common practice) and needs a wavelength unit.
    unit : `~astropy.units.UnitBase` or str, optional
        Any spectral unit (length, frequency, energy, wavenumber).  Default: the set's natural
        unit (Angstrom; GHz for "radio"; keV for "xray").
    air_formula : str
        One of `zline.physics.media.AIR_FORMULAS` (used with ``medium="air"``).
    model : str
        Level model for the computed lines, one of `zline.physics.levels.MODELS`.

    Returns
    -------
    `~astropy.table.QTable`
        Columns ``label, species, rest, strength, kind`` ("emission"/"absorption"), ``origin``
        ("computed"/"tabulated"), ``source``; sorted by increasing vacuum wavelength.  Meta:
        ``set, medium, air_formula, model``.

    Raises
    ------
    ValueError
        Unknown set name or medium, or air with a non-wavelength unit.
    astropy.units.UnitTypeError
        ``unit`` is not a spectral unit.
    """
    if name not in LINE_SETS:
        raise ValueError(
            f"Argument 'name' must be one of {', '.join(map(repr, LINE_SETS))}; got {name!r}."
        )
    if medium not in _MEDIA:
        raise ValueError(f"Argument 'medium' must be one of {_MEDIA!r}; got {medium!r}.")
    unit = u.Unit(_NATURAL_UNIT.get(name, u.AA) if unit is None else unit)
    if not unit.is_equivalent(u.AA, equivalencies=u.spectral()):
        raise u.UnitTypeError(
            f"Argument 'unit' must be a spectral unit (length, frequency, energy or wavenumber); "
            f"got '{unit}' ({unit.physical_type})."
        )
    is_length = unit.is_equivalent(u.AA)
    if medium == "air" and not is_length:
        raise ValueError(
            f"Argument 'medium'='air' needs a wavelength unit; got '{unit}' "
            f"({unit.physical_type}): frequencies and energies do not depend on the medium."
        )
    from zline.physics import media  # noqa: PLC0415

    if air_formula not in media.AIR_FORMULAS:
        raise ValueError(
            f"Argument 'air_formula' must be one of {', '.join(map(repr, media.AIR_FORMULAS))}; "
            f"got {air_formula!r}."
        )
    rows = _vacuum_rows(name, model)
    label, species, vac, strength, kind, origin, source = (list(c) for c in zip(*rows))
    vac = np.asarray(vac, dtype=float)
    if medium == "air":
        pos = vac.copy()
        sel = vac > _UV_CUT_AA
        if sel.any():
            pos[sel] = media.vacuum_to_air(vac[sel] * u.AA, air_formula).to_value(u.AA)
        rest = (pos * u.AA).to(unit)
    elif is_length:
        rest = (vac * u.AA).to(unit)
    else:
        rest = (vac * u.AA).to(unit, equivalencies=u.spectral())
    table = QTable()
    table["label"] = label
    table["species"] = species
    table["rest"] = rest
    table["strength"] = np.asarray(strength, dtype=float)
    table["kind"] = kind
    table["origin"] = origin
    table["source"] = source
    table.meta.update(
        set=name, medium=medium, air_formula=air_formula if medium == "air" else None,
        model=model,
        air_applies_above="2000 Angstrom (vacuum wavelength); vacuum below"
        if medium == "air" else None,
    )
    return table


def line_set_for_axis(spectral_axis, default="galaxy-emission"):
    """The line set that fits a spectral axis, and why.

    A frequency axis holds radio recombination lines, an energy axis X-ray lines; a wavelength or
    wavenumber axis keeps ``default``.

    Parameters
    ----------
    spectral_axis : `~astropy.units.Quantity` or `~astropy.units.UnitBase` or str
        The spectrum's spectral axis (or just its unit).
    default : str
        The set for wavelength and wavenumber axes.

    Returns
    -------
    name : str
        One of `LINE_SETS`.
    reason : str or None
        A sentence saying why the set differs from ``default`` (None when it does not).

    Examples
    --------
    >>> import astropy.units as u
    >>> line_set_for_axis(u.GHz)
    ('radio', 'the spectral axis is in frequency (GHz): radio recombination lines')
    >>> line_set_for_axis([1.0, 2.0] * u.keV)
    ('xray', 'the spectral axis is in energy (keV): X-ray lines of hydrogen-like ions')
    >>> line_set_for_axis(u.AA)
    ('galaxy-emission', None)
    """
    unit = getattr(spectral_axis, "unit", None)
    unit = u.Unit(spectral_axis if unit is None else unit)
    if unit.is_equivalent(u.Hz):
        return "radio", f"the spectral axis is in frequency ({unit}): radio recombination lines"
    if unit.is_equivalent(u.eV):
        return "xray", f"the spectral axis is in energy ({unit}): X-ray lines of hydrogen-like ions"
    if default not in LINE_SETS:
        raise ValueError(
            f"Argument 'default' must be one of {', '.join(map(repr, LINE_SETS))}; got {default!r}."
        )
    return default, None
