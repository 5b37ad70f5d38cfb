"""Tests of computed line tables against published wavelengths, f values and A values."""

import warnings

import astropy.units as u
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose

from zline.physics import constants, media
from zline.physics.transitions import (
    BOHR_RADIUS,
    line_label,
    line_table,
    radial_integral,
    series_limit,
    series_name,
)


def _row(table, n_upper, n_lower):
    sel = (table["n_upper"] == n_upper) & (table["n_lower"] == n_lower)
    assert sel.sum() == 1
    return table[sel][0]


# ---- f and A, Wiese & Fuhr 2009, J. Phys. Chem. Ref. Data 38, 565 (as quoted in check-values.md)
@pytest.mark.parametrize("n_upper, n_lower, f_ref, a_ref", [
    (6, 2, 0.022105, 9.7320e5),   # Hδ multiplet
    (4, 1, 0.029006, 1.2785e7),   # Lyγ multiplet (f derived from A there)
    (4, 3, None, 8.9860e6),       # Pa-α multiplet A
])
def test_multiplet_f_and_a(n_upper, n_lower, f_ref, a_ref):
    row = _row(line_table("H I", lower=n_lower, upper=n_upper), n_upper, n_lower)
    if f_ref is not None:
        assert float(row["f_osc"]) == pytest.approx(f_ref, rel=5e-4)
    assert row["A_ul"].to_value(u.s**-1) == pytest.approx(a_ref, rel=5e-4)


def test_lyman_alpha_component_f_and_a():
    # Lyα 2p3/2 -> 1s: f = 0.27760, A = 6.2648e8 s^-1 (Wiese & Fuhr 2009, as quoted)
    t = line_table("H I", series="Lyman", upper=2, components=True)
    row = t[(t["j_upper"] == 1.5)][0]
    assert row["label"] == "Lyα1"
    assert float(row["f_osc"]) == pytest.approx(0.27760, rel=5e-4)
    assert row["A_ul"].to_value(u.s**-1) == pytest.approx(6.2648e8, rel=5e-4)


def test_f_a_relation_and_sum_over_components():
    t = line_table("H I", lower=2, upper=3, components=True)
    lam = t["rest"].to_value(u.AA)
    g_u, g_l = 2 * t["j_upper"] + 1, 2 * t["j_lower"] + 1
    # g_l f = 1.499194e-16 lambda^2 g_u A (common practice)
    np.testing.assert_allclose(g_l * t["f_osc"], 1.499194e-16 * lam**2 * g_u * t["A_ul"].value,
                               rtol=1e-5)
    m = _row(line_table("H I", lower=2, upper=3), 3, 2)
    assert float(m["f_osc"]) == pytest.approx(np.sum(g_l * t["f_osc"]) / 8.0, rel=1e-6)
    assert m["A_ul"].value == pytest.approx(np.sum(g_u * t["A_ul"].value) / 18.0, rel=1e-6)
    # 7 components: 3s-2p (2), 3p-2s (2), 3d-2p (3)
    assert len(t) == 7


# ---- wavelengths: NIST / Morton 2003 (as quoted in check-values.md)
@pytest.mark.parametrize("species, n_upper, n_lower, medium, ref", [
    ("H I", 2, 1, "vacuum", 1215.6701),   # Lyα, Morton 2003 (as quoted)
    ("H I", 4, 1, "vacuum", 972.5368),    # Lyγ, Morton 2003 (as quoted)
    ("H I", 5, 1, "vacuum", 949.7431),    # Lyδ, Morton 2003 (as quoted)
    ("H I", 3, 2, "vacuum", 6564.632),    # Hα Ritz, NIST ASD (as quoted)
    ("H I", 3, 2, "air", 6562.79),        # Hα, NIST ASD observed (as quoted)
    ("H I", 5, 2, "air", 4340.462),       # Hγ, NIST Handbook (as quoted)
    ("H I", 7, 2, "air", 3970.072),       # Hε, NIST Handbook (as quoted)
    ("H I", 4, 3, "air", 18751.01),       # Paα, NIST Handbook (as quoted)
    ("D I", 3, 1, "vacuum", 1025.4432),   # D I Lyβ, Morton 2003 (as quoted)
    ("He II", 4, 3, "vacuum", 4687.02),   # He II 4686 (as quoted; T, n_e move it ~0.05 A)
    ("He II", 7, 4, "air", 5411.52),      # He II 5411 (as quoted in public line lists)
])
def test_multiplet_wavelengths(species, n_upper, n_lower, medium, ref):
    t = line_table(species, lower=n_lower, upper=n_upper, medium=medium)
    tol = 0.05 if (species, n_upper, n_lower) == ("He II", 4, 3) else 0.03
    assert abs(_row(t, n_upper, n_lower)["rest"].to_value(u.AA) - ref) < tol


def test_infrared_vacuum_lines():
    # Paα, Paγ, Brα vacuum (public hydrogen recombination line list, consistent with NIST)
    t = line_table("H I", lower=(3, 4), upper=(4, 6), unit=u.um)
    for nu, nl, ref in [(4, 3, 1.87561), (6, 3, 1.09411), (5, 4, 4.05226)]:
        assert _row(t, nu, nl)["rest"].to_value(u.um) == pytest.approx(ref, abs=6e-6)  # quoted to 1e-5 um


def test_lyman_limit():
    # 911.7535 A from the NIST ionization energy 109678.7717 cm^-1 (NIST Handbook, as quoted)
    assert series_limit("H I", 1).to_value(u.AA) == pytest.approx(911.7535, abs=2e-4)
    assert series_limit("H I", 2, unit=u.cm**-1).value < series_limit("H I", 1, unit=u.cm**-1).value


# ---- Lyα1 / Lyα2 of ions (public X-ray line lists, consistent with NIST ASD; as quoted)
@pytest.mark.parametrize("species, a1, a2", [
    ("N VII", 24.7792, 24.7846),
    ("Ne X", 12.1321, 12.1375),
    ("Mg XII", 8.41920, 8.42461),
    ("S XVI", 4.72735, 4.73276),
])
def test_ion_lyman_alpha_components(species, a1, a2):
    t = line_table(species, series="Lyman", upper=2, components=True)
    got = {row["label"]: row["rest"].to_value(u.AA) for row in t}
    assert set(got) == {"Lyα1", "Lyα2"}
    assert abs(got["Lyα1"] - a1) < 2e-4
    assert abs(got["Lyα2"] - a2) < 2e-4


# ---- radio recombination lines
@pytest.mark.parametrize("species, n_lower, ref_mhz", [
    ("H I", 110, 4874.157),     # H110α, Lilley & Palmer 1968 ApJS 16, 143 (as quoted)
    ("H I", 91, 8584.823),      # H91α, same
    ("H I", 76, 14689.99),      # H76α, spectral-line catalogue values (as quoted)
    ("He I", 30, 231995.43),    # He30α, same
    ("C I", 30, 232016.636),    # C30α, same
])
def test_radio_recombination_lines(species, n_lower, ref_mhz):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # hydrogenic approximation notice for Rydberg carriers
        t = line_table(species, lower=n_lower, delta_n=1, unit=u.MHz)
    row = t[0]
    assert row["label"] == f"{species.split()[0]}{n_lower}α"
    assert row["rest"].to_value(u.MHz) == pytest.approx(ref_mhz, rel=1e-6)


def test_radio_offsets_of_helium_and_carbon():
    # about -122.2 and -149.6 km/s from the H line of the same n, radio convention (common practice)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        nu = {sp: line_table(sp, lower=109, delta_n=1, unit=u.MHz)["rest"][0]
              for sp in ("H I", "He I", "C I")}
    for sp, ref in (("He I", -122.2), ("C I", -149.6)):
        v = nu[sp].to(u.km / u.s, equivalencies=u.doppler_radio(nu["H I"]))
        assert v.to_value(u.km / u.s) == pytest.approx(ref, abs=0.1)


# ---- names, order, units, meta
def test_series_order_and_labels():
    t = line_table("H I", series="Balmer", upper=(3, 9))
    assert list(t["label"]) == ["Hα", "Hβ", "Hγ", "Hδ", "Hε", "Hζ", "Hη"]
    assert np.all(np.diff(t["rest"].to_value(u.AA)) < 0)
    t = line_table("H I", lower=(1, 6), delta_n=1)
    assert list(t["label"]) == ["Lyα", "Hα", "Paα", "Brα", "Pfα", "Huα"]
    assert [series_name(n) for n in (1, 4, 6, 7)] == ["Lyman", "Brackett", "Humphreys", "n=7"]
    assert line_label("He II", 4, 3, 4687.0) == "He II 4686"
    assert line_label("C VI", 2, 1) == "Lyα"


def test_units_and_observed_column():
    t = line_table("H I", lower=2, upper=3, unit=u.GHz, z=0.5, velocity=300 * u.km / u.s)
    rest = line_table("H I", lower=2, upper=3)["rest"][0]
    assert_quantity_allclose(t["rest"][0], rest.to(u.GHz, u.spectral()), rtol=1e-12)
    factor = 1.5 * (1 + 300 / 299792.458)
    assert_quantity_allclose(t["observed"][0], t["rest"][0] / factor, rtol=1e-12)
    meta = t.meta
    assert meta["constants"] == constants.CODATA_RELEASE
    assert meta["model"] == "qed" and meta["medium"] == "vacuum" and meta["z"] == 0.5
    assert "l_upper" not in t.colnames


def test_air_only_above_2000_angstrom():
    t = line_table("H I", lower=(1, 2), upper=3, medium="air", air_formula="morton2000")
    vac = line_table("H I", lower=(1, 2), upper=3)
    ly, ha = _row(t, 3, 1)["rest"], _row(t, 3, 2)["rest"]
    assert ly == _row(vac, 3, 1)["rest"]
    assert_quantity_allclose(ha, media.vacuum_to_air(_row(vac, 3, 2)["rest"]), rtol=1e-12)
    assert t.meta["air_formula"] == "morton2000"


def test_radial_integral_quantity():
    r = radial_integral(2, 1, 1, 0)
    assert r.unit == BOHR_RADIUS
    assert r.to_value(BOHR_RADIUS) == pytest.approx(128 * np.sqrt(6) / 243, rel=1e-13)
    assert radial_integral(2, 1, 1, 0, species="He II").value == pytest.approx(r.value / 2, rel=1e-3)


@pytest.mark.parametrize("kwargs, match", [
    ({"model": "nope"}, "'model'"),
    ({"medium": "water"}, "'medium'"),
    ({"series": "Foo"}, "'series'"),
    ({"unit": u.kg}, "'unit'"),
    ({"medium": "air", "unit": u.GHz}, "wavelength unit"),
    ({"lower": 0}, "'lower'"),
    ({"lower": 3, "series": "Balmer"}, "disagree"),
])
def test_bad_arguments(kwargs, match):
    with pytest.raises((ValueError, TypeError), match=match):
        line_table("H I", **kwargs)


# ---------------------------------------------------------------- Rydberg notice and table cache

def test_rydberg_carrier_at_high_n_gives_no_low_n_notice():
    from zline.physics.levels import HydrogenicApproximationWarning

    # pytest turns warnings into errors: a notice here would fail the call
    t = line_table("He I", lower=(90, 100), delta_n=1, unit=u.GHz)
    assert len(t) == 11
    with pytest.warns(HydrogenicApproximationWarning, match="got n min = 5"):
        line_table("He I", lower=5, upper=6, unit=u.GHz)


def test_cached_level_tables_give_identical_lines():
    from zline.physics import transitions

    transitions._LEVEL_TABLES.clear()
    small_cold = line_table("C I", lower=(40, 45), delta_n=2, unit=u.GHz)
    big = line_table("C I", lower=(40, 300), delta_n=2, unit=u.GHz)
    small_warm = line_table("C I", lower=(40, 45), delta_n=2, unit=u.GHz)  # slices the big table
    for col in ("rest", "f_osc", "A_ul"):
        assert np.array_equal(np.asarray(small_cold[col]), np.asarray(small_warm[col]))
    sel = big["n_lower"] <= 45
    assert np.array_equal(np.asarray(big["rest"][sel]), np.asarray(small_cold["rest"]))
    (table,) = [v for k, v in transitions._LEVEL_TABLES.items() if "C I" in k[0]]
    assert not table.flags.writeable
