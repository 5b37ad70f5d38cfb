"""Tests of zline.physics.species: names, masses, errors."""
import astropy.constants as const
import astropy.units as u
import pytest
from astropy.tests.helper import assert_quantity_allclose

from zline.physics.species import Species, available_species, get_species, int_to_roman, roman_to_int

HYDROGEN_LIKE = [
    ("H I", 1, 1), ("D I", 1, 2), ("T I", 1, 3), ("He II", 2, 4), ("3He II", 2, 3), ("Li III", 3, 7),
    ("Be IV", 4, 9), ("C VI", 6, 12), ("N VII", 7, 14), ("O VIII", 8, 16), ("Ne X", 10, 20),
    ("Mg XII", 12, 24), ("Si XIV", 14, 28), ("S XVI", 16, 32), ("Ar XVIII", 18, 40), ("Ca XX", 20, 40),
    ("Fe XXVI", 26, 56), ("Ni XXVIII", 28, 58), ("Zn XXX", 30, 64),
]


@pytest.mark.parametrize(("name", "Z", "A"), HYDROGEN_LIKE)
def test_hydrogen_like_names(name, Z, A):
    sp = get_species(name)
    assert isinstance(sp, Species)
    assert (sp.Z, sp.A, sp.charge, sp.rydberg) == (Z, A, Z, False)
    assert sp.name == name
    assert sp.nuclear_mass.unit == u.kg
    assert sp.nuclear_radius.unit == u.fm
    # nuclear mass lies within 1 % of A u (mass excess of light nuclei, binding < 9 MeV per nucleon)
    assert abs(sp.nuclear_mass.to_value(u.u) / A - 1) < 1e-2
    assert 0.999 < sp.mass_ratio < 1.0


def test_every_element_up_to_zinc_has_its_hydrogen_like_ion():
    for z in range(1, 31):
        symbol = available_species()[[n.split()[1] for n in available_species()].index(int_to_roman(z))]
        assert get_species(symbol).Z == z


def test_proton_mass_matches_codata():
    # AME2020 H-1 atomic mass minus one electron (plus 13.6 eV) must equal CODATA m_p (astropy) to 1e-9
    assert_quantity_allclose(get_species("H I").nuclear_mass, const.m_p, rtol=2e-9)


def test_reduced_mass_ratio_of_hydrogen():
    # mu/m_e = m_p / (m_p + m_e) with m_p, m_e from astropy (CODATA)
    expected = (const.m_p / (const.m_p + const.m_e)).decompose().value
    assert get_species("H I").mass_ratio == pytest.approx(expected, rel=1e-11)


def test_deuteron_mass_against_scipy_codata():
    # CODATA deuteron mass as shipped by scipy.constants (reference library)
    from scipy.constants import physical_constants

    m_d = physical_constants["deuteron mass"][0]
    assert get_species("D I").nuclear_mass.to_value(u.kg) == pytest.approx(m_d, rel=1e-8)
    m_alpha = physical_constants["alpha particle mass"][0]
    assert get_species("He II").nuclear_mass.to_value(u.kg) == pytest.approx(m_alpha, rel=1e-8)


def test_isotope_prefix_and_aliases():
    assert get_species("2H I") == get_species("D I")
    assert get_species("3H I").name == "T I"
    assert get_species("4He II") == get_species("He II")
    assert get_species("3He II").nuclear_mass < get_species("He II").nuclear_mass


def test_rydberg_carriers():
    for name, Z in (("He I", 2), ("C I", 6)):
        sp = get_species(name)
        assert sp.rydberg and sp.charge == 1 and sp.Z == Z
        ion = get_species(f"{sp.element} {int_to_roman(Z)}")
        # core = atom minus one electron = bare nucleus plus (Z-1) electrons, less their binding
        # energy (~14.4 Z^2.39 eV, about 1e-3 of (Z-1) m_e c^2 here)
        assert_quantity_allclose(sp.nuclear_mass - ion.nuclear_mass, (Z - 1) * const.m_e, rtol=1e-3)
        assert sp.nuclear_mass - ion.nuclear_mass < (Z - 1) * const.m_e


@pytest.mark.parametrize(
    ("name", "match"),
    [
        ("C V", r"'C V' is C with 2 electrons.*'C VI'"),
        ("Fe XXV", r"not a one-electron system.*'Fe XXVI'"),
        ("H II", r"'H II'.*0 electrons"),
        ("Xx II", "unknown element 'Xx'"),
        ("He", "cannot parse species name 'He'"),
        ("He IIII", "not a well-formed Roman numeral"),
        ("13C VI", "isotope 13C .* not tabulated; known: 12C"),
        ("2D I", "mass number"),
        ("Ga XXXI", "unknown element"),
    ],
)
def test_bad_names(name, match):
    with pytest.raises(ValueError, match=match):
        get_species(name)


def test_bad_type():
    with pytest.raises(TypeError, match="'name' must be a str"):
        get_species(6)


def test_roman_round_trip():
    for value in range(1, 60):
        assert roman_to_int(int_to_roman(value)) == value
    assert int_to_roman(26) == "XXVI"
    with pytest.raises(ValueError, match="not a Roman numeral"):
        roman_to_int("XQ")
