"""Tests for zline.physics.media (vacuum <-> air)."""

import warnings

import astropy.units as u
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose
from hypothesis import given, settings
from hypothesis import strategies as st
from specutils.utils.wcs_utils import air_to_vac, refraction_index, vac_to_air

from zline.physics.media import (
    AIR_FORMULAS,
    MediumRangeWarning,
    _air_to_vac_angstrom,
    _vac_to_air_angstrom,
    air_to_vacuum,
    refractive_index,
    vacuum_to_air,
)

# zline formula name -> specutils method name (specutils.utils.wcs_utils, reference library)
SPECUTILS_METHOD = {
    "morton2000": "Morton2000",
    "edlen1966": "Edlen1966",
    "ciddor1996": "Ciddor1996",
    "greisen2006": "Greisen2006",
}
VALID_LO = {"morton2000": 2000.0, "edlen1966": 2000.0, "ciddor1996": 3000.0, "greisen2006": 2000.0}
VALID_HI = {"morton2000": 2e4, "edlen1966": 2e4, "ciddor1996": 1.69e4, "greisen2006": 2e4}


def _grid(formula, n=4001):
    return np.geomspace(VALID_LO[formula], VALID_HI[formula], n) * u.AA


def test_formula_names_match_contract():
    assert set(AIR_FORMULAS) == {"morton2000", "edlen1966", "ciddor1996", "greisen2006"}
    for name, text in AIR_FORMULAS.items():
        assert "valid" in text, name


@pytest.mark.parametrize("formula", list(SPECUTILS_METHOD))
def test_vacuum_to_air_equals_specutils(formula):
    wav = _grid(formula)
    ours = vacuum_to_air(wav, formula)
    ref = vac_to_air(wav, method=SPECUTILS_METHOD[formula])
    assert_quantity_allclose(ours, ref, atol=1e-5 * u.AA, rtol=0)
    n = refractive_index(wav, formula)
    np.testing.assert_allclose(n, refraction_index(wav, method=SPECUTILS_METHOD[formula]),
                               rtol=1e-14, atol=0)


@pytest.mark.parametrize("formula", list(SPECUTILS_METHOD))
def test_air_to_vacuum_equals_specutils_iteration(formula):
    # specutils' default scheme "inversion" evaluates n at the air wavelength (an approximation,
    # ~2e-5 A off at 4861 A); its "iteration" scheme solves the same equation as ours.
    air = _grid(formula)[10:-10]  # keep the vacuum images inside the valid range
    ours = air_to_vacuum(air, formula)
    ref = air_to_vac(air, method=SPECUTILS_METHOD[formula], scheme="iteration", precision=1e-15)
    assert_quantity_allclose(ours, ref, atol=1e-5 * u.AA, rtol=0)
    # and the inversion is exact against our own forward conversion
    assert_quantity_allclose(vacuum_to_air(ours, formula), air, atol=1e-8 * u.AA, rtol=0)


def test_ciddor_worked_examples():
    # Ciddor 1996, standard air, worked examples as quoted in /work/shared/reference/check-values.md
    assert_quantity_allclose(air_to_vacuum(4861.363 * u.AA, "ciddor1996"), 4862.721 * u.AA,
                             atol=0.0005 * u.AA)
    out = vacuum_to_air(633.0 * u.nm, "ciddor1996")
    assert out.unit == u.nm
    assert_quantity_allclose(out, 632.825004768 * u.nm, atol=1e-9 * u.nm, rtol=0)


def test_halpha_air_value():
    # NIST ASD: H-alpha 6564.632 A (vacuum, Ritz), 6562.79 A (air, observed; as quoted).
    # The 15 C formulas agree with each other to < 1 mA; Greisen (0 C) is ~0.1 A lower.
    vals = {f: vacuum_to_air(6564.632 * u.AA, f) for f in AIR_FORMULAS}
    for f in ("morton2000", "edlen1966", "ciddor1996"):
        assert_quantity_allclose(vals[f], 6562.79 * u.AA, atol=0.03 * u.AA)
        assert abs(vals[f] - vals["morton2000"]) < 1e-3 * u.AA
    assert 0.05 * u.AA < vals["morton2000"] - vals["greisen2006"] < 0.15 * u.AA


@pytest.mark.parametrize("unit", [u.AA, u.nm, u.um, u.m, u.cm])
def test_any_length_unit_same_unit_out(unit):
    wav = (np.array([3000.0, 5000.0, 9000.0]) * u.AA).to(unit)
    out = vacuum_to_air(wav, "morton2000")
    back = air_to_vacuum(out, "morton2000")
    assert out.unit == unit and back.unit == unit
    assert_quantity_allclose(out, vac_to_air(wav.to(u.AA)), atol=1e-9 * u.AA, rtol=0)
    assert_quantity_allclose(back, wav, atol=1e-9 * u.AA, rtol=0)


def test_scalar_in_scalar_out():
    out = vacuum_to_air(5000.0 * u.AA)
    assert out.isscalar
    assert isinstance(refractive_index(5000.0 * u.AA), float)


@settings(max_examples=200, deadline=None)
@given(lam=st.floats(2000.0, 20000.0), formula=st.sampled_from(list(AIR_FORMULAS)))
def test_round_trip_air_vac_air(lam, formula):
    air = np.array([lam])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", MediumRangeWarning)  # ciddor outside 3000 A..1.69 um
        back = vacuum_to_air(air_to_vacuum(air * u.AA, formula), formula).to_value(u.AA)
    assert abs(back[0] - lam) < 1e-6


@pytest.mark.parametrize("formula", list(AIR_FORMULAS))
def test_monotonic_and_air_shorter(formula):
    wav = _grid(formula)
    air = vacuum_to_air(wav, formula)
    assert np.all(np.diff(air) > 0)
    assert np.all(air < wav)
    # n - 1 decreases toward the red (normal dispersion)
    assert np.all(np.diff(refractive_index(wav, formula)) < 0)


def test_uv_convention_returns_vacuum_unchanged():
    wav = np.array([1215.67, 1548.2, 5000.0]) * u.AA
    with pytest.warns(MediumRangeWarning, match=r"2 vacuum wavelength\(s\) below 2000 A were "
                                                r"returned unchanged.*quoted in vacuum"):
        air = vacuum_to_air(wav)
    assert_quantity_allclose(air[:2], wav[:2], rtol=0, atol=0 * u.AA)
    assert air[2] < wav[2]
    with pytest.warns(MediumRangeWarning, match="below 2000 A"):
        vac = air_to_vacuum(air)
    assert_quantity_allclose(vac, wav, atol=1e-9 * u.AA, rtol=0)


def test_uv_cut_is_consistent_between_directions():
    # 2000.000 A vacuum -> 1999.353 A air (Ciddor 1996 worked example, as quoted): above the cut
    with pytest.warns(MediumRangeWarning, match="outside the valid range of 'ciddor1996'"):
        air = vacuum_to_air(2000.0 * u.AA, "ciddor1996")
    assert_quantity_allclose(air, 1999.353 * u.AA, atol=0.0005 * u.AA)
    with pytest.warns(MediumRangeWarning, match="outside the valid range"):
        back = air_to_vacuum(air, "ciddor1996")
    assert_quantity_allclose(back, 2000.0 * u.AA, atol=1e-9 * u.AA, rtol=0)
    # just below the air image of the cut the input is treated as a (UV) vacuum wavelength
    with pytest.warns(MediumRangeWarning, match="below 2000 A"):
        below = air_to_vacuum(air - 1e-6 * u.AA, "ciddor1996")
    assert_quantity_allclose(below, air - 1e-6 * u.AA, rtol=0, atol=0 * u.AA)


def test_beyond_upper_limit_extrapolates_with_warning():
    wav = 4.05226 * u.um  # Br-alpha vacuum (check-values.md)
    with pytest.warns(MediumRangeWarning, match=r"outside the valid range of 'morton2000' "
                                                r"\(2000 A - 2 um\); the formula was extrapolated"):
        air = vacuum_to_air(wav)
    assert_quantity_allclose(air, vac_to_air(wav), rtol=1e-14)
    with pytest.warns(MediumRangeWarning, match="outside the valid range of 'morton2000'"):
        refractive_index(wav)


def test_errors_name_argument():
    with pytest.raises(TypeError, match="Argument 'wavelength' must be an astropy Quantity"):
        vacuum_to_air(5000.0)
    with pytest.raises(TypeError, match="Argument 'wavelength' must be an astropy Quantity"):
        air_to_vacuum(np.array([5000.0]))
    with pytest.raises(u.UnitTypeError, match="Argument 'wavelength' must have a length unit.*"
                                              "got unit 'GHz' \\(frequency\\)"):
        vacuum_to_air(5 * u.GHz)
    with pytest.raises(ValueError, match="Argument 'wavelength' must hold positive wavelengths; "
                                         "got minimum -5 Angstrom"):
        air_to_vacuum([5000.0, -5.0] * u.AA)
    with pytest.raises(u.UnitTypeError, match="Argument 'vacuum_wavelength'"):
        refractive_index(2 * u.keV)
    with pytest.raises(ValueError, match="Unknown air formula 'Morton2000' for argument "
                                         "'formula'; expected one of 'morton2000', 'edlen1966', "
                                         "'ciddor1996', 'greisen2006'"):
        vacuum_to_air(5000 * u.AA, formula="Morton2000")
    with pytest.raises(ValueError, match="expected one of"):
        air_to_vacuum(5000 * u.AA, formula="peck1972")


@pytest.mark.parametrize("formula", list(AIR_FORMULAS))
def test_fast_paths_match_public(formula):
    wav = np.geomspace(1000.0, 20000.0, 1001)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", MediumRangeWarning)
        pub_air = vacuum_to_air(wav * u.AA, formula).to_value(u.AA)
        pub_vac = air_to_vacuum(wav * u.AA, formula).to_value(u.AA)
    np.testing.assert_array_equal(_vac_to_air_angstrom(wav, formula), pub_air)
    np.testing.assert_array_equal(_air_to_vac_angstrom(wav, formula), pub_vac)
    above = wav[wav >= 2000]
    assert np.all(np.abs(_air_to_vac_angstrom(_vac_to_air_angstrom(above, formula), formula)
                         - above) < 1e-8)


@pytest.mark.parametrize("formula", list(AIR_FORMULAS))
def test_newton_inverse_at_float64_limit(formula):
    # Independent solution of lambda_vac = lambda_air * n(lambda_vac) by fixed-point iteration in
    # extended precision (np.longdouble), starting from the float64 Newton answer.
    air = np.geomspace(2000.0, 20000.0, 501)
    vac = _air_to_vac_angstrom(air, formula)
    x = vac.astype(np.longdouble)
    for _ in range(6):
        s2 = np.longdouble(1e8) / (x * x)
        if formula == "greisen2006":
            nm1 = np.longdouble("287.6155e-6") + s2 * (np.longdouble("1.62887e-6")
                                                       + np.longdouble("0.01360e-6") * s2)
        else:
            c0, k1, a1, k2, a2 = {
                "morton2000": ("8.34254e-5", "2.406147e-2", "130", "1.5998e-4", "38.9"),
                "edlen1966": ("8.34213e-5", "2.406030e-2", "130", "1.5997e-4", "38.9"),
                "ciddor1996": ("0", "5.792105e-2", "238.0185", "1.67917e-3", "57.362"),
            }[formula]
            nm1 = (np.longdouble(c0) + np.longdouble(k1) / (np.longdouble(a1) - s2)
                   + np.longdouble(k2) / (np.longdouble(a2) - s2))
        x = air.astype(np.longdouble) * (1 + nm1)
    assert float(np.max(np.abs(vac - x))) < 1e-10  # A; measured ~4e-12 A (float64 rounding)


def test_nan_propagates_and_empty_arrays():
    # masked pixels arrive as NaN: they stay NaN and do not disturb the other values
    wav = np.array([np.nan, 5000.0]) * u.AA
    air = vacuum_to_air(wav)
    assert np.isnan(air[0]) and air[1] == vacuum_to_air(5000.0 * u.AA)
    vac = air_to_vacuum(air)
    assert np.isnan(vac[0])
    assert_quantity_allclose(vac[1], 5000.0 * u.AA, atol=1e-9 * u.AA, rtol=0)
    assert vacuum_to_air(np.array([]) * u.nm).shape == (0,)
    assert air_to_vacuum(np.array([]) * u.nm).unit == u.nm
