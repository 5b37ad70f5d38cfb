"""Tests of the named line sets and of the tabulated non-hydrogenic lines."""

import astropy.units as u
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose
from specutils.utils.wcs_utils import vac_to_air

from zline.physics.media import MediumRangeWarning, vacuum_to_air
from zline.physics.catalog import LINE_SETS, line_set, tabulated_lines


def _row(table, label):
    sel = table["label"] == label
    assert sel.sum() == 1, f"{label!r} appears {sel.sum()} times"
    return table[sel][0]


# ----------------------------------------------------------------------------- tabulated file
def test_every_tabulated_row_has_source_and_valid_fields():
    t = tabulated_lines()
    assert len(t) >= 40
    assert t["rest"].unit == u.AA and t.meta["medium"] == "vacuum"
    for row in t:
        assert str(row["source"]).strip(), row["label"]
        assert row["kind"] in ("emission", "absorption")
        assert row["strength"] > 0
        assert set(str(row["sets"]).split()) <= set(LINE_SETS)
    # no hydrogen-like species are hand-typed
    assert not set(t["species"]) & {"H I", "He II", "C VI", "Fe XXVI"}


# Air wavelengths from memory (NIST ASD), independent of the vacuum values in the table.
AIR_CHECKS = [
    ("[O III] 5007", 5006.843),
    ("[O III] 4959", 4958.911),
    ("[N II] 6583", 6583.45),
    ("[S II] 6716", 6716.44),
    ("[S II] 6731", 6730.82),
    ("[O I] 6300", 6300.30),
    ("Na I D2", 5889.951),
    ("Na I D1", 5895.924),
    ("Ca II K", 3933.663),
    ("He I 5876", 5875.62),
]


@pytest.mark.parametrize(("label", "air"), AIR_CHECKS)
def test_tabulated_vacuum_matches_air_values(label, air):
    vac = _row(tabulated_lines(), label)["rest"]
    assert_quantity_allclose(vacuum_to_air(vac), air * u.AA, atol=0.02 * u.AA)


@pytest.mark.parametrize("formula", ["morton2000", "ciddor1996", "edlen1966"])
def test_air_column_agrees_with_specutils(formula):
    # galaxy-emission has no line between 2000 and 3000 A (outside Ciddor's range)
    vac = line_set("galaxy-emission")
    if formula == "ciddor1996":  # Pa-alpha (1.876 um) lies beyond Ciddor's 1.69 um limit
        with pytest.warns(MediumRangeWarning, match="ciddor1996"):
            air = line_set("galaxy-emission", medium="air", air_formula=formula)
    else:
        air = line_set("galaxy-emission", medium="air", air_formula=formula)
    sel = vac["rest"] > 3000 * u.AA  # ciddor1996 is valid from 3000 A
    ref = vac_to_air(vac["rest"][sel], method={"morton2000": "Morton2000",
                                              "ciddor1996": "Ciddor1996",
                                              "edlen1966": "Edlen1966"}[formula])
    assert_quantity_allclose(air["rest"][sel], ref, atol=2e-3 * u.AA)
    assert air.meta["medium"] == "air" and vac.meta["medium"] == "vacuum"


def test_uv_lines_stay_vacuum_in_air():
    vac, air = line_set("galaxy-emission"), line_set("galaxy-emission", medium="air")
    for label in ("C IV 1548", "C III] 1909", "Lyα"):
        assert _row(air, label)["rest"] == _row(vac, label)["rest"]


# ----------------------------------------------------------------------------- computed parts
def test_halpha_air_value():
    t = line_set("galaxy-emission", medium="air")
    # 6562.79 A air, NIST ASD observed (as quoted, check-values.md)
    assert_quantity_allclose(_row(t, "Hα")["rest"], 6562.79 * u.AA, atol=0.05 * u.AA)
    assert _row(t, "Hα")["origin"] == "computed"
    assert _row(t, "[O III] 5007")["origin"] == "tabulated"


def test_nebular_set_contents():
    t = line_set("nebular")
    assert "H30" in t["label"] and "He I 5876" in t["label"]
    he2 = t[(t["species"] == "He II") & (np.abs(t["rest"] - 4687.0 * u.AA) < 1 * u.AA)]
    # He II 3-4 at 4687.02 A vacuum (public line list quoting NIST, as quoted)
    assert_quantity_allclose(he2["rest"][0], 4687.02 * u.AA, atol=0.05 * u.AA)
    assert np.all(np.diff(t["rest"].to_value(u.AA)) >= 0)
    air = line_set("nebular", medium="air")
    # He II 4-7 at 5411.52 A air (as quoted in public line lists)
    assert_quantity_allclose(_row(air, "He II 5412")["rest"], 5411.52 * u.AA, atol=0.03 * u.AA)


def test_radio_set_frequencies_and_offsets():
    t = line_set("radio")
    assert t["rest"].unit == u.GHz
    # H110α 4874.157 MHz (telescope configuration tables, as quoted; Lilley & Palmer 1968)
    assert_quantity_allclose(_row(t, "H110α")["rest"], 4874.157 * u.MHz, rtol=1e-6)
    # H91α 8584.823 MHz, same source
    assert_quantity_allclose(_row(t, "H91α")["rest"], 8584.823 * u.MHz, rtol=1e-6)
    # H76α 14689.99 MHz (spectral-line catalogue values quoted in public observing scripts)
    assert_quantity_allclose(_row(t, "H76α")["rest"], 14689.99 * u.MHz, rtol=1e-6)
    h = _row(t, "H109α")["rest"]
    for label, dv in (("He109α", -122.2), ("C109α", -149.6)):  # common practice
        v = (_row(t, label)["rest"]).to(u.km / u.s, equivalencies=u.doppler_radio(h))
        assert abs(v.to_value(u.km / u.s) - dv) < 0.3
    assert "H150β" in t["label"]


def test_xray_set_lyman_alpha_doublet():
    t = line_set("xray")
    assert t["rest"].unit == u.keV
    a1 = _row(t, "S XVI Lyα1")["rest"].to(u.AA, equivalencies=u.spectral())
    a2 = _row(t, "S XVI Lyα2")["rest"].to(u.AA, equivalencies=u.spectral())
    # public X-ray line lists consistent with NIST ASD (as quoted, check-values.md)
    assert_quantity_allclose(a1, 4.72735 * u.AA, atol=5e-5 * u.AA)
    assert_quantity_allclose(a2, 4.73276 * u.AA, atol=5e-5 * u.AA)
    wav = line_set("xray", unit=u.AA)
    # same source: N VII, Ne X, Mg XII Lyα1 / Lyα2 (as quoted, check-values.md)
    for label, value in (("N VII Lyα1", 24.7792), ("N VII Lyα2", 24.7846),
                         ("Ne X Lyα1", 12.1321), ("Ne X Lyα2", 12.1375),
                         ("Mg XII Lyα1", 8.41920), ("Mg XII Lyα2", 8.42461)):
        assert_quantity_allclose(_row(wav, label)["rest"], value * u.AA, atol=5e-5 * u.AA)
    assert "Fe XXVI Lyβ" in t["label"] and "Ni XXVIII Lyα1" in t["label"]


@pytest.mark.parametrize("name", list(LINE_SETS))
def test_every_set_row_has_source_and_origin(name):
    t = line_set(name)
    assert {"label", "species", "rest", "strength", "kind", "origin", "source"} <= set(t.colnames)
    assert len(t) > 5
    assert all(str(s).strip() for s in t["source"])
    assert set(t["origin"]) <= {"computed", "tabulated"}
    assert set(t["kind"]) <= {"emission", "absorption"}
    assert np.all(t["strength"] > 0)
    assert t.meta["set"] == name


def test_units_conversions():
    a = line_set("galaxy-emission", unit=u.nm)
    b = line_set("galaxy-emission", unit="Angstrom")
    assert_quantity_allclose(a["rest"], b["rest"])
    f = line_set("galaxy-emission", unit=u.THz)
    assert_quantity_allclose(f["rest"].to(u.AA, equivalencies=u.spectral()), b["rest"])


# ----------------------------------------------------------------------------- errors
def test_errors_name_the_argument():
    with pytest.raises(ValueError, match="'name' must be one of 'galaxy-emission'.*got 'galaxy'"):
        line_set("galaxy")
    with pytest.raises(ValueError, match="'medium'"):
        line_set("hydrogen", medium="water")
    with pytest.raises(ValueError, match="needs a wavelength unit"):
        line_set("radio", medium="air")
    with pytest.raises(u.UnitTypeError, match="spectral unit"):
        line_set("hydrogen", unit=u.s)
    with pytest.raises(ValueError, match="'air_formula'"):
        line_set("hydrogen", medium="air", air_formula="guess")
