"""One-electron species: hydrogen-like ions and Rydberg carriers.

A species is named in spectroscopic notation: element symbol (optionally
preceded by a mass number) and a Roman numeral for the charge state plus one,
e.g. ``"H I"``, ``"D I"``, ``"3He II"``, ``"C VI"``, ``"Fe XXVI"``. A
hydrogen-like ion has numeral = Z (one electron left). A neutral atom other
than hydrogen (``"He I"``, ``"C I"``) is a *Rydberg carrier*: its highly
excited electron orbits a singly charged core, so the formulas use charge 1
and the core mass (atom minus one electron).

Masses are AME2020 atomic masses (Wang et al. 2021, Chinese Phys. C 45,
030003) from the bundled table ``data/nuclear_masses.ecsv``; the nuclear mass
is the atomic mass minus Z electron masses plus the total electron binding
energy (fit of Lunney, Pearson & Thibault 2003, Rev. Mod. Phys. 75, 1021,
eq. A4: B_e = 14.4381 Z^2.39 + 1.55468e-6 Z^5.35 eV).
"""
import functools
import re
from dataclasses import dataclass
from importlib import resources

import astropy.units as u
from astropy.table import QTable

from zline.physics import constants as _k

__all__ = ["Species", "get_species", "available_species", "roman_to_int", "int_to_roman"]

_ROMAN_VALUES = (
    (1000, "M"), (900, "CM"), (500, "D"), (400, "CD"), (100, "C"), (90, "XC"),
    (50, "L"), (40, "XL"), (10, "X"), (9, "IX"), (5, "V"), (4, "IV"), (1, "I"),
)

_ALIASES = {"D": ("H", 2), "T": ("H", 3)}

_ACCEPTED = (
    "accepted forms: '<Element> <Roman numeral>' with numeral = Z for a hydrogen-like ion "
    "(e.g. 'H I', 'He II', 'C VI', 'Fe XXVI'), an optional mass number prefix ('3He II', '2H I'), "
    "'D I' / 'T I' for deuterium / tritium, or a neutral atom 'He I', 'C I' (Rydberg carrier); "
    "elements H to Zn (Z <= 30)"
)


def int_to_roman(value: int) -> str:
    """Return the Roman numeral of a positive integer."""
    if int(value) != value or value < 1:
        raise ValueError(f"int_to_roman: expected a positive integer, got {value!r}")
    value = int(value)
    out = []
    for number, letters in _ROMAN_VALUES:
        while value >= number:
            out.append(letters)
            value -= number
    return "".join(out)


def roman_to_int(numeral: str) -> int:
    """Parse a canonical Roman numeral (``"XXVI"`` -> 26); ValueError if malformed."""
    text = numeral.strip().upper()
    if not text or set(text) - set("IVXLCDM"):
        raise ValueError(f"roman_to_int: {numeral!r} is not a Roman numeral (letters I V X L C D M)")
    total, i = 0, 0
    for number, letters in _ROMAN_VALUES:
        while text.startswith(letters, i):
            total += number
            i += len(letters)
    if i != len(text) or int_to_roman(total) != text:
        raise ValueError(f"roman_to_int: {numeral!r} is not a well-formed Roman numeral")
    return total


@functools.lru_cache(maxsize=1)
def _table():
    with resources.as_file(resources.files("zline.physics.data") / "nuclear_masses.ecsv") as path:
        return QTable.read(path, format="ascii.ecsv")


@functools.lru_cache(maxsize=1)
def _isotopes():
    """Map symbol -> {A: (Z, atomic mass u, radius fm, default)}."""
    out = {}
    for row in _table():
        out.setdefault(str(row["symbol"]), {})[int(row["A"])] = (
            int(row["Z"]),
            float(row["atomic_mass"].to_value(u.u)),
            float(row["rms_charge_radius"].to_value(u.fm)),
            bool(row["default"]),
        )
    return out


def _electron_binding_ev(Z: int) -> float:
    """Total electron binding energy of the neutral atom, eV (Lunney et al. 2003, eq. A4)."""
    return 14.4381 * Z**2.39 + 1.55468e-6 * Z**5.35


@dataclass(frozen=True)
class Species:
    """A one-electron system used in the level formulas.

    Attributes
    ----------
    name : str
        Canonical spectroscopic name, e.g. ``"C VI"``, ``"3He II"``, ``"D I"``.
    Z : int
        Atomic number of the nucleus.
    A : int
        Mass number of the isotope.
    charge : int
        Effective core charge in the formulas: Z for hydrogen-like ions, 1 for
        Rydberg carriers.
    nuclear_mass : `~astropy.units.Quantity` ['mass']
        Mass of what the electron orbits: the bare nucleus for a hydrogen-like
        ion, the singly charged ion core for a Rydberg carrier (kg).
    mass_ratio : float
        Reduced mass over electron mass, mu / m_e = M / (M + m_e).
    rydberg : bool
        True for a Rydberg carrier (neutral atom other than hydrogen).
    nuclear_radius : `~astropy.units.Quantity` ['length']
        Nuclear rms charge radius (fm).
    """

    name: str
    Z: int
    A: int
    charge: int
    nuclear_mass: u.Quantity
    mass_ratio: float
    rydberg: bool
    nuclear_radius: u.Quantity

    @property
    def element(self) -> str:
        """Element symbol."""
        return _SYMBOLS[self.Z - 1]


_SYMBOLS = (
    "H", "He", "Li", "Be", "B", "C", "N", "O", "F", "Ne", "Na", "Mg", "Al", "Si", "P",
    "S", "Cl", "Ar", "K", "Ca", "Sc", "Ti", "V", "Cr", "Mn", "Fe", "Co", "Ni", "Cu", "Zn",
)

_NAME_RE = re.compile(r"^\s*\^?(?P<A>\d+)?\s*(?P<sym>[A-Za-z]{1,2})\s+(?P<num>[IVXLCDMivxlcdm]+)\s*$")


@functools.lru_cache(maxsize=256)
def get_species(name: str) -> Species:
    """Return the `Species` named in spectroscopic notation.

    Parameters
    ----------
    name : str
        E.g. ``"H I"``, ``"D I"``, ``"T I"``, ``"He II"``, ``"3He II"``,
        ``"C VI"``, ``"Fe XXVI"``, ``"Ni XXVIII"`` (hydrogen-like, numeral = Z,
        any element up to Zn), or ``"He I"``, ``"C I"`` (Rydberg carriers).

    Returns
    -------
    Species

    Raises
    ------
    ValueError
        If the name is malformed, the element or isotope is unknown, or the
        charge state is neither hydrogen-like nor neutral.
    """
    if isinstance(name, Species):
        return name
    if not isinstance(name, str):
        raise TypeError(f"get_species: 'name' must be a str such as 'C VI', got {type(name).__name__}")
    match = _NAME_RE.match(name)
    if match is None:
        raise ValueError(f"get_species: cannot parse species name {name!r}; {_ACCEPTED}")
    sym = match["sym"][0].upper() + match["sym"][1:].lower()
    mass_number = int(match["A"]) if match["A"] else None
    alias = None
    if sym in _ALIASES:
        if mass_number is not None:
            raise ValueError(f"get_species: {name!r} gives a mass number with {sym!r}; use e.g. '2H I'; {_ACCEPTED}")
        alias = sym
        sym, mass_number = _ALIASES[sym]
    if sym not in _SYMBOLS:
        raise ValueError(f"get_species: unknown element {match['sym']!r} in {name!r}; {_ACCEPTED}")
    Z = _SYMBOLS.index(sym) + 1
    try:
        stage = roman_to_int(match["num"])
    except ValueError as exc:
        raise ValueError(f"get_species: bad charge-state numeral in {name!r} ({exc}); {_ACCEPTED}") from None
    isotopes = _isotopes()[sym]
    if mass_number is None:
        mass_number = next(a for a, rec in isotopes.items() if rec[3])
    if mass_number not in isotopes:
        known = ", ".join(f"{a}{sym}" for a in sorted(isotopes))
        raise ValueError(f"get_species: isotope {mass_number}{sym} in {name!r} is not tabulated; known: {known}")
    _, atomic_mass_u, radius_fm, is_default = isotopes[mass_number]
    atom_kg = atomic_mass_u * _k.m_u
    if stage == Z:
        rydberg = False
        charge = Z
        core_kg = atom_kg - Z * _k.m_e + _electron_binding_ev(Z) * _k.eV / _k.c**2
    elif stage == 1 and Z > 1:
        # Rydberg electron around the singly charged ion core: atom minus one electron
        # (the outer electron's binding energy, a few eV, is below 1e-9 u and dropped).
        rydberg = True
        charge = 1
        core_kg = atom_kg - _k.m_e
    else:
        raise ValueError(
            f"get_species: {name!r} is {sym} with {Z - stage + 1} electrons, not a one-electron system: "
            f"the hydrogen-like ion of {sym} is '{sym} {int_to_roman(Z)}' (numeral = Z = {Z}); "
            f"'{sym} I' is accepted as a Rydberg carrier; {_ACCEPTED}"
        )
    numeral = int_to_roman(stage)
    if alias is not None or (sym == "H" and mass_number in (2, 3)):
        canonical = f"{alias or ('D' if mass_number == 2 else 'T')} {numeral}"
    elif is_default:
        canonical = f"{sym} {numeral}"
    else:
        canonical = f"{mass_number}{sym} {numeral}"
    return Species(
        name=canonical,
        Z=Z,
        A=mass_number,
        charge=charge,
        nuclear_mass=core_kg * u.kg,
        mass_ratio=core_kg / (core_kg + _k.m_e),
        rydberg=rydberg,
        nuclear_radius=radius_fm * u.fm,
    )


def available_species() -> tuple:
    """Names of all hydrogen-like ions (default isotopes, plus D, T, 3He) and Rydberg carriers."""
    names = [f"{s} {int_to_roman(z)}" for z, s in enumerate(_SYMBOLS, start=1)]
    names[1:1] = ["D I", "T I"]
    names.insert(4, "3He II")
    names += [f"{s} I" for s in _SYMBOLS[1:]]
    return tuple(names)
