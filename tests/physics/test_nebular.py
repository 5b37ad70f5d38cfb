"""Tests of zline.physics.nebular: Case B ratios, the extinction curve, Balmer decrement."""

import math

import astropy.units as u
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose

from zline.physics.fitting import fit_line
from zline.physics.nebular import (CASE_B_LINES, CASE_B_TABLE, HALPHA_AIR, HBETA_AIR, balmer_decrement,
                                   case_b_ratio, deredden, extinction_curve, k_lambda)
from zline.physics.tables import line_table_for_paper

# Osterbrock & Ferland 2006, Table 4.4, n_e = 100 cm^-3 (as quoted)
_OF06 = [(5000, "Halpha", 3.041), (10000, "Halpha", 2.863), (20000, "Halpha", 2.747),
         (5000, "Hgamma", 0.458), (10000, "Hgamma", 0.468), (20000, "Hgamma", 0.475),
         (5000, "Hdelta", 0.251), (10000, "Hdelta", 0.259), (20000, "Hdelta", 0.264)]


@pytest.mark.parametrize("temp, line, value", _OF06)
def test_case_b_table_values(temp, line, value):
    # the table's 4-decimal values against the book's 3 decimals: both rounded
    assert case_b_ratio(line, temp * u.K) == pytest.approx(value, abs=5.5e-4)


def test_case_b_interpolation_and_refusals():
    r = case_b_ratio("Halpha", 7500 * u.K)
    assert 2.863 < r < 3.041  # between the neighbours, monotonic
    assert case_b_ratio("Hbeta") == 1.0 and "Hdelta" in CASE_B_LINES
    with pytest.raises(ValueError, match="outside the table.*5000.*20000"):
        case_b_ratio("Halpha", 30000 * u.K)
    with pytest.raises(ValueError, match=r"density 10000000.0 1 / cm3 is outside the table"):
        case_b_ratio("Halpha", 10000 * u.K, 1e7 * u.cm**-3)
    with pytest.raises(ValueError, match="density 10.0 1 / cm3 is outside"):
        case_b_ratio("Halpha", 10000 * u.K, 10 * u.cm**-3)
    with pytest.raises(ValueError, match="case 'A' is not tabulated"):
        case_b_ratio("Halpha", case="A")
    with pytest.raises(ValueError, match="line 'Hepsilon' not tabulated"):
        case_b_ratio("Hepsilon")
    with pytest.raises(TypeError, match="'temperature' must be a Quantity"):
        case_b_ratio("Halpha", 10000)


def _pyneb_ratio(line, temp, dens):
    import pyneb

    upper = {"Halpha": 3, "Hgamma": 5, "Hdelta": 6}[line]
    h1 = pyneb.RecAtom("H", 1)  # Storey & Hummer 1995 Case B data (h_i_rec_SH95)
    return float(h1.getEmissivity(temp, dens, lev_i=upper, lev_j=2)
                 / h1.getEmissivity(temp, dens, lev_i=4, lev_j=2))


@pytest.mark.parametrize("line", ["Halpha", "Hgamma", "Hdelta"])
@pytest.mark.parametrize("temp, dens", [(5000, 1e2), (10000, 1e4), (20000, 1e6), (7500, 1e5),
                                        (12500, 1e3), (15000, 1e6)])
def test_case_b_grid_against_pyneb(line, temp, dens):
    # reference library: pyneb's H I recombination data (Storey & Hummer 1995, MNRAS 272, 41)
    assert case_b_ratio(line, temp * u.K, dens * u.cm**-3) == pytest.approx(
        _pyneb_ratio(line, temp, dens), abs=6e-5)


@pytest.mark.parametrize("line", ["Halpha", "Hgamma", "Hdelta"])
@pytest.mark.parametrize("temp, dens", [(8000, 3e3), (14000, 3e5), (6000, 5e2), (18000, 2e4),
                                        (5500, 7e5)])
def test_case_b_between_the_grid_against_pyneb(line, temp, dens):
    # bilinear in (log T, log n_e) between the tabulated points: within 0.3 % of pyneb's own
    # interpolation of the same data
    assert case_b_ratio(line, temp * u.K, dens * u.cm**-3) == pytest.approx(
        _pyneb_ratio(line, temp, dens), rel=3e-3)


def test_case_b_density_dependence():
    # Halpha / Hbeta falls with density at fixed T (collisional effects, Storey & Hummer 1995)
    ratios = [case_b_ratio("Halpha", 10000 * u.K, n * u.cm**-3) for n in (1e2, 1e3, 1e4, 1e5, 1e6)]
    assert np.all(np.diff(ratios) < 0)
    assert "Storey & Hummer 1995" in CASE_B_TABLE["source"]


@pytest.mark.parametrize("curve, model", [("ccm89", "CCM89"), ("odonnell94", "O94")])
@pytest.mark.parametrize("r_v", [2.5, 3.1, 5.0])
def test_extinction_curves_against_dust_extinction(curve, model, r_v):
    # reference library: dust_extinction's CCM89 (Cardelli, Clayton & Mathis 1989) and O94
    # (O'Donnell 1994) over their common range 0.3 ... 10 um^-1
    from dust_extinction import parameter_averages

    ref = getattr(parameter_averages, model)(Rv=r_v)
    x = np.linspace(0.31, 9.99, 400) / u.um
    wave = (1 / x).to(u.AA)
    np.testing.assert_allclose(extinction_curve(wave, r_v=r_v, curve=curve), ref(x),
                               rtol=1e-6, atol=1e-9)


# A_lambda / A_V for R_V = 3.1 at the effective wavelengths of Cardelli, Clayton & Mathis 1989
# (ApJ 345, 245) Table 3 (from memory): U 1.569, B 1.337, V 1.000, R 0.751, I 0.479, J 0.282,
# K 0.114.  The table was made from the curve over filter passbands, so the effective-wavelength
# values differ by up to ~1% in the blue.
@pytest.mark.parametrize("lam_um, value, rtol", [
    (0.365, 1.569, 0.015), (0.44, 1.337, 0.015), (0.55, 1.000, 0.005), (0.70, 0.751, 0.005),
    (0.90, 0.479, 0.005), (1.25, 0.282, 0.005), (2.2, 0.114, 0.01)])
def test_ccm89_against_published_table(lam_um, value, rtol):
    assert extinction_curve(lam_um * u.um) == pytest.approx(value, rel=rtol)


def test_ccm89_balmer_k_values():
    # k(Hbeta) = 3.61, k(Halpha) = 2.53 for CCM89 with R_V = 3.1 (common practice values);
    # their difference is 1.08, not 1.163 (that figure belongs to other curves).
    kb, ka = k_lambda(HBETA_AIR), k_lambda(HALPHA_AIR)
    assert kb == pytest.approx(3.61, abs=0.01) and ka == pytest.approx(2.53, abs=0.01)
    assert kb - ka == pytest.approx(1.08, abs=0.01)
    # O'Donnell 1994 optical coefficients change the optical curve by a few per cent
    kb94 = k_lambda(HBETA_AIR, curve="odonnell94") - k_lambda(HALPHA_AIR, curve="odonnell94")
    assert 1.10 < kb94 < 1.20


def test_curve_is_continuous_and_defined_by_v():
    # by construction a(V) = 1, b(V) = 0 at x = 1.82 um^-1 for any R_V
    for r_v in (2.5, 3.1, 5.0):
        assert extinction_curve((1 / 1.82) * u.um, r_v=r_v) == pytest.approx(1.0, abs=1e-12)
    for edge in (1.1, 3.3, 8.0):  # segments meet within a few per cent (published fit)
        lo, hi = extinction_curve([1 / (edge - 1e-6), 1 / (edge + 1e-6)] * u.um)
        assert abs(lo - hi) / hi < 0.05
    # accepts frequency too
    f = (HALPHA_AIR).to(u.THz, equivalencies=u.spectral())
    assert extinction_curve(f) == pytest.approx(extinction_curve(HALPHA_AIR))
    with pytest.raises(ValueError, match="outside the curve's range"):
        extinction_curve(5 * u.um)
    with pytest.raises(ValueError, match="unknown curve 'smc'.*ccm89"):
        extinction_curve(HALPHA_AIR, curve="smc")


def test_balmer_decrement_hand_calculation():
    # invented ratio 4.0 +- 5%: E(B-V) = 2.5 / (3.61 - 2.53) * log10(4.0 / 2.863) = 0.3362
    res = balmer_decrement(4.0 * u.one, 1.0 * u.one, flux_ha_err=0.2 * u.one)
    assert res.ebv.unit == u.mag
    assert res.ebv.value == pytest.approx(0.3362, rel=0.01)
    assert res.a_v.value == pytest.approx(3.1 * res.ebv.value)
    # error: 2.5 / (dk ln 10) * 0.05
    assert res.ebv_err.value == pytest.approx(2.5 / (1.08 * math.log(10)) * 0.05, rel=0.01)
    # intrinsic ratio gives zero, a lower one a negative value (not clipped)
    intrinsic = case_b_ratio("Halpha")  # 2.8632 at 10 000 K, 100 cm^-3 (Storey & Hummer 1995)
    assert balmer_decrement(intrinsic * u.one, 1 * u.one).ebv.value == pytest.approx(0, abs=1e-12)
    assert balmer_decrement(2.5 * u.one, 1 * u.one).ebv.value < 0


def test_balmer_decrement_errors():
    with pytest.raises(TypeError, match="'flux_ha' must be a Quantity"):
        balmer_decrement(4.0, 1.0 * u.one)
    with pytest.raises(u.UnitsError, match="same physical type"):
        balmer_decrement(4.0 * u.erg / u.s / u.cm**2, 1.0 * u.AA)


def test_deredden_round_trip():
    wave = [4861.33, 6562.80] * u.AA
    flux = [1.0, 2.0] * u.erg / u.s / u.cm**2
    out = deredden(flux, wave, 0.3)
    assert out.unit == flux.unit
    expected = flux * 10 ** (0.4 * 0.3 * k_lambda(wave))
    assert_quantity_allclose(out, expected)
    assert_quantity_allclose(deredden(flux, wave, 0.3 * u.mag), out)
    # the dereddened Balmer decrement equals the intrinsic ratio
    res = balmer_decrement(3.5 * u.one, 1.0 * u.one)
    fixed = deredden([1.0, 3.5] * u.one, wave, res.ebv)
    assert (fixed[1] / fixed[0]).to_value(u.one) == pytest.approx(case_b_ratio("Halpha"),
                                                                  rel=1e-10)


def test_dereddened_column_in_paper_table():
    from specutils import Spectrum

    x = np.linspace(6500, 6620, 601) * u.AA
    y = 1 + 5 * np.exp(-0.5 * ((x.value - 6562.8) / 2.0) ** 2)  # invented line
    rng = np.random.default_rng(5)
    spec = Spectrum(spectral_axis=x, flux=(y + rng.normal(0, 0.05, x.size)) * u.Jy)
    fit = fit_line(spec, 6562.8 * u.AA, label="Halpha")
    t = line_table_for_paper([{"label": "Halpha", "rest": HALPHA_AIR, "fit": fit}],
                             settings={"ebv": 0.2, "ebv_err": 0.02})
    factor = 10 ** (0.4 * 0.2 * k_lambda(HALPHA_AIR))
    assert_quantity_allclose(t["flux_dered"][0], t["flux"][0] * factor)
    assert t["flux_dered_err"][0] > t["flux_err"][0] * factor
    assert t.meta["ebv"] == 0.2 and t.meta["extinction_curve"] == "ccm89"
