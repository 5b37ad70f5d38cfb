"""Tests of zline.physics.fitting on synthetic spectra (seeded, truth recorded)."""

import math

import astropy.units as u
import numpy as np
import pytest
from astropy.modeling.models import Voigt1D
from astropy.nddata import StdDevUncertainty, VarianceUncertainty
from astropy.tests.helper import assert_quantity_allclose
from specutils import SpectralRegion, Spectrum
from specutils.analysis import centroid, equivalent_width, line_flux

from zline.physics.fitting import LineFit, fit_line

FUNIT = u.Unit("1e-17 erg / (s cm2 AA)")


def gauss(x, mu, sigma, flux):
    return flux * np.exp(-0.5 * ((x - mu) / sigma) ** 2) / (sigma * math.sqrt(2 * math.pi))


def make_spectrum(x, y, err=None, unit=u.AA):
    unc = None if err is None else StdDevUncertainty(np.broadcast_to(err, y.shape).copy())
    return Spectrum(flux=y * FUNIT, spectral_axis=x * unit, uncertainty=unc)


X = np.linspace(6500.0, 6620.0, 241)  # 0.5 A pixels


def test_returns_linefit_with_units():
    rng = np.random.default_rng(11)
    y = 10 + gauss(X, 6563.0, 2.0, 50.0) + rng.normal(0, 0.5, X.size)
    fit = fit_line(make_spectrum(X, y, 0.5), 6562 * u.AA, window=[6530, 6600] * u.AA)
    assert isinstance(fit, LineFit)
    assert fit.success
    assert fit.center.unit == u.AA and fit.fwhm.unit == u.AA
    assert fit.flux.unit == FUNIT * u.AA
    assert fit.fwhm_kms.unit == u.km / u.s
    assert fit.errors_from == "uncertainty"
    assert fit.detected and fit.upper_limit is None
    # model evaluates on any spectral axis
    model = fit.model_flux(X * u.AA)
    assert model.unit == FUNIT and model.shape == X.shape


@pytest.mark.parametrize("profile", ["gaussian", "voigt"])
def test_pulls_monte_carlo(profile):
    """Pulls (fit - truth)/sigma over 200 realisations have mean ~0 and std ~1."""
    rng = np.random.default_rng(20261201)
    x = np.linspace(6530.0, 6600.0, 141)
    truth = dict(mu=6563.3, sigma=1.8, flux=40.0, gamma=0.6)
    noise = 0.4
    if profile == "gaussian":
        line = gauss(x, truth["mu"], truth["sigma"], truth["flux"])
    else:
        line = truth["flux"] * Voigt1D(x_0=truth["mu"], amplitude_L=1.0, fwhm_L=2 * truth["gamma"],
                                       fwhm_G=2.3548200450309493 * truth["sigma"])(x)
        line /= np.trapezoid(Voigt1D(x_0=truth["mu"], amplitude_L=1.0, fwhm_L=2 * truth["gamma"],
                                     fwhm_G=2.3548200450309493 * truth["sigma"])(
            np.linspace(6000, 7100, 400001)), np.linspace(6000, 7100, 400001))
    base = 5.0 + 0.02 * (x - 6563.0) + line
    pulls_c, pulls_f = [], []
    n_mc = 200 if profile == "gaussian" else 120
    for _ in range(n_mc):
        y = base + rng.normal(0, noise, x.size)
        fit = fit_line(make_spectrum(x, y, noise), 6562.5 * u.AA, profile=profile,
                       fwhm=4 * u.AA)
        assert fit.success
        pulls_c.append((fit.center.value - truth["mu"]) / fit.center_err.value)
        pulls_f.append((fit.flux.value - truth["flux"]) / fit.flux_err.value)
    for pulls in (np.array(pulls_c), np.array(pulls_f)):
        assert abs(pulls.mean()) < 3.5 / math.sqrt(n_mc) + 0.1
        assert 0.8 < pulls.std() < 1.2


def test_no_uncertainty_scales_by_scatter():
    rng = np.random.default_rng(5)
    noise = 0.7
    pulls = []
    for _ in range(100):
        y = 3 + gauss(X, 6563.0, 2.0, 60.0) + rng.normal(0, noise, X.size)
        fit = fit_line(make_spectrum(X, y), 6563.5 * u.AA, window=[6520, 6606] * u.AA)
        assert fit.errors_from == "scatter"
        pulls.append((fit.flux.value - 60.0) / fit.flux_err.value)
    assert 0.75 < np.std(pulls) < 1.25


def test_error_from_uncertainty_not_rescaled():
    """With given errors twice the real noise, the quoted errors stay twice too large."""
    rng = np.random.default_rng(8)
    y = 3 + gauss(X, 6563.0, 2.0, 60.0) + rng.normal(0, 0.5, X.size)
    f1 = fit_line(make_spectrum(X, y, 0.5), 6563 * u.AA, window=[6520, 6606] * u.AA)
    f2 = fit_line(make_spectrum(X, y, 1.0), 6563 * u.AA, window=[6520, 6606] * u.AA)
    assert_quantity_allclose(f2.flux_err, 2 * f1.flux_err, rtol=1e-3)
    assert f2.chi2_dof == pytest.approx(f1.chi2_dof / 4, rel=1e-3)


def test_variance_uncertainty_accepted():
    y = 3 + gauss(X, 6563.0, 2.0, 60.0)
    sp = Spectrum(flux=y * FUNIT, spectral_axis=X * u.AA,
                  uncertainty=VarianceUncertainty(np.full(X.size, 0.25)))
    f = fit_line(sp, 6563 * u.AA)
    ref = fit_line(make_spectrum(X, y, 0.5), 6563 * u.AA)
    assert_quantity_allclose(f.flux_err, ref.flux_err, rtol=1e-6)


def test_against_specutils_analysis_noiseless():
    """Noiseless Gaussian on a flat continuum vs specutils centroid / line_flux / equivalent_width.

    Sign convention: our ew is positive for emission; specutils' equivalent_width integrates
    (1 - F/C) and is negative for emission, so ours == -specutils.
    """
    x = np.linspace(4800.0, 4920.0, 1201)
    cont, mu, sigma, flux = 20.0, 4862.7, 1.5, 80.0
    y = cont + gauss(x, mu, sigma, flux)
    spec = make_spectrum(x, y, 0.1)
    fit = fit_line(spec, 4862 * u.AA, window=[4830, 4895] * u.AA, continuum_order=0)
    region = SpectralRegion(4830 * u.AA, 4895 * u.AA)
    sub = make_spectrum(x, y - cont, 0.1)
    assert_quantity_allclose(fit.center, centroid(sub, regions=region), atol=1e-3 * u.AA)
    assert_quantity_allclose(fit.flux, line_flux(sub, regions=region).to(fit.flux.unit),
                             rtol=1e-4)
    ew_specutils = equivalent_width(spec, continuum=cont * FUNIT, regions=region)
    assert ew_specutils < 0
    assert_quantity_allclose(fit.ew, ew_specutils, rtol=1e-4)
    assert_quantity_allclose(fit.continuum, cont * FUNIT, rtol=1e-8)
    # FWHM of a Gaussian: 2 sqrt(2 ln 2) sigma (common practice)
    assert_quantity_allclose(fit.fwhm, 2 * math.sqrt(2 * math.log(2)) * sigma * u.AA, rtol=1e-6)
    c_kms = 299792.458  # km/s, exact by SI definition
    assert fit.fwhm_kms.to_value(u.km / u.s) == pytest.approx(
        c_kms * (fit.fwhm / fit.center).to_value(u.one), rel=1e-9)


def test_voigt_fwhm_matches_astropy():
    """Fitted Voigt FWHM agrees with the half-maximum width of astropy's Voigt1D profile."""
    x = np.linspace(6530.0, 6600.0, 701)
    truth = Voigt1D(x_0=6563.0, amplitude_L=2.0, fwhm_L=1.5, fwhm_G=2.5)
    y = 1.0 + truth(x)
    fit = fit_line(make_spectrum(x, y, 0.001), 6563 * u.AA, profile="voigt", fwhm=3 * u.AA)
    fine = np.linspace(6550.0, 6576.0, 260001)
    prof = truth(fine)
    above = fine[prof >= 0.5 * prof.max()]
    assert fit.fwhm.value == pytest.approx(above[-1] - above[0], rel=2e-3)
    assert fit.center.value == pytest.approx(6563.0, abs=1e-4)


def test_absorption_negative_flux_positive_ew():
    y = 10 - gauss(X, 6563.0, 2.0, 30.0)
    fit = fit_line(make_spectrum(X, y, 0.05), 6563 * u.AA)
    assert fit.flux.value == pytest.approx(-30.0, rel=1e-4)
    assert fit.ew.value == pytest.approx(3.0, rel=1e-4)  # absorption: W > 0 (common practice)


def test_frequency_axis():
    nu = np.linspace(1.4195e9, 1.4215e9, 201)  # Hz
    mu, sigma, flux = 1.42040e9, 5.0e4, 4.0e5
    rng = np.random.default_rng(3)
    y = 1.0 + gauss(nu, mu, sigma, flux) + rng.normal(0, 0.05, nu.size)
    sp = Spectrum(flux=y * u.Jy, spectral_axis=nu * u.Hz,
                  uncertainty=StdDevUncertainty(np.full(nu.size, 0.05)))
    fit = fit_line(sp, 1.4204 * u.GHz, fwhm=100 * u.kHz)
    assert fit.center.unit == u.Hz
    assert abs(fit.center.value - mu) < 4 * fit.center_err.value
    assert abs(fit.flux.value - flux) < 4 * fit.flux_err.value
    assert fit.flux.unit == u.Jy * u.Hz


def test_blend_halpha_nii_tied():
    """Halpha + [N II] 6550, 6585 with tied widths, one z and 6585/6550 = 2.94 (common practice)."""
    rest = {"[N II] 6550": 6549.86, "H I 3-2": 6564.61, "[N II] 6585": 6585.27}  # vacuum A,
    # NIST-based values as commonly tabulated (from memory)
    z = 0.0123
    sigma_v = 90.0  # km/s
    c_kms = 299792.458
    f_ha, f_n2 = 100.0, 35.0
    x = np.linspace(6580.0, 6700.0, 481)
    rng = np.random.default_rng(42)
    mus = {k: v * (1 + z) for k, v in rest.items()}
    sig = {k: m * sigma_v / c_kms for k, m in mus.items()}
    truth_flux = {"H I 3-2": f_ha, "[N II] 6585": f_n2, "[N II] 6550": f_n2 / 2.94}
    y = 2.0 + sum(gauss(x, mus[k], sig[k], truth_flux[k]) for k in rest)
    noise = 0.3
    y = y + rng.normal(0, noise, x.size)
    comps = {"H I 3-2": rest["H I 3-2"] * u.AA, "[N II] 6550": rest["[N II] 6550"] * u.AA,
             "[N II] 6585": rest["[N II] 6585"] * u.AA}
    fit = fit_line(make_spectrum(x, y, noise), 6565 * (1 + z) * u.AA, components=comps,
                   tie_width=True, tie_ratio={("[N II] 6585", "[N II] 6550"): 2.94},
                   label="H I 3-2", fwhm=4 * u.AA)
    assert fit.success
    assert len(fit.components) == 3
    by = {c.label: c for c in fit.components}
    for k, cfit in by.items():
        assert abs(cfit.center.value - mus[k]) < 4 * cfit.center_err.value, k
        assert abs(cfit.flux.value - truth_flux[k]) < 4 * cfit.flux_err.value, k
    assert by["[N II] 6585"].flux.value == pytest.approx(2.94 * by["[N II] 6550"].flux.value)
    # one velocity width
    assert by["H I 3-2"].fwhm_kms.value == pytest.approx(by["[N II] 6585"].fwhm_kms.value)
    truth_fwhm_kms = 2 * math.sqrt(2 * math.log(2)) * sigma_v
    assert abs(fit.fwhm_kms.value - truth_fwhm_kms) < 4 * fit.fwhm_kms_err.value
    # centres tied: ratio preserved exactly
    assert by["[N II] 6585"].center.value / fit.center.value == pytest.approx(
        rest["[N II] 6585"] / rest["H I 3-2"], rel=1e-12)


def test_blend_untied_centres():
    x = np.linspace(6520.0, 6620.0, 401)
    y = 1 + gauss(x, 6560.0, 1.5, 30.0) + gauss(x, 6575.0, 2.5, 20.0)
    fit = fit_line(make_spectrum(x, y, 0.01), 6560.5 * u.AA,
                   components=[6560.0, 6575.5] * u.AA, tie_center=False)
    c2 = fit.components[1]
    assert fit.center.value == pytest.approx(6560.0, abs=1e-3)
    assert c2.center.value == pytest.approx(6575.0, abs=1e-3)
    assert c2.flux.value == pytest.approx(20.0, rel=1e-3)


def test_upper_limit_absent_line():
    """No line: 3-sigma upper limit; sigma_F ~ noise * sqrt(2 sqrt(pi) sigma dx) for white noise."""
    rng = np.random.default_rng(7)
    noise, dx = 0.5, X[1] - X[0]
    y = 10 + rng.normal(0, noise, X.size)
    fwhm = 4.0
    fit = fit_line(make_spectrum(X, y, noise), 6563 * u.AA, fwhm=fwhm * u.AA,
                   window=[6503, 6618] * u.AA, continuum_order=0)
    assert not fit.detected
    assert fit.upper_limit is not None
    sigma = fwhm / (2 * math.sqrt(2 * math.log(2)))
    expect = 3 * noise * math.sqrt(2 * math.sqrt(math.pi) * sigma * dx)
    assert fit.upper_limit.unit == FUNIT * u.AA
    # limit = max(F, 0) + 3 sigma_F with the profile held at the expected centre and FWHM
    assert 3 * fit.upper_limit_sigma.value == pytest.approx(expect, rel=0.05)
    assert fit.upper_limit.value >= 3 * fit.upper_limit_sigma.value


def test_detected_line_has_no_upper_limit():
    rng = np.random.default_rng(9)
    noise = 0.5
    y = 10 + gauss(X, 6563, 1.7, 8.0) + rng.normal(0, noise, X.size)
    fit = fit_line(make_spectrum(X, y, noise), 6563 * u.AA, fwhm=4 * u.AA)
    assert fit.snr > 3 and fit.upper_limit is None


def test_exclude_region_ignores_spike():
    y = 5 + gauss(X, 6563.0, 2.0, 50.0)
    y_bad = y.copy()
    y_bad[(X > 6580) & (X < 6582)] += 500.0
    clean = fit_line(make_spectrum(X, y_bad, 0.1), 6563 * u.AA, window=[6530, 6600] * u.AA,
                     exclude=[(6579 * u.AA, 6583 * u.AA)])
    assert clean.flux.value == pytest.approx(50.0, rel=1e-5)
    single = fit_line(make_spectrum(X, y_bad, 0.1), 6563 * u.AA, window=[6530, 6600] * u.AA,
                      exclude=[6579, 6583] * u.AA)
    region = fit_line(make_spectrum(X, y_bad, 0.1), 6563 * u.AA, window=[6530, 6600] * u.AA,
                      exclude=SpectralRegion(6579 * u.AA, 6583 * u.AA))
    assert single.flux.value == pytest.approx(50.0, rel=1e-5)
    assert region.flux.value == pytest.approx(50.0, rel=1e-5)
    assert single.n_pixels == region.n_pixels == clean.n_pixels < 141
    dirty = fit_line(make_spectrum(X, y_bad, 0.1), 6563 * u.AA, window=[6530, 6600] * u.AA)
    assert abs(dirty.flux.value - 50.0) > 1.0


def test_window_as_velocity_width():
    y = 5 + gauss(X, 6563.0, 2.0, 50.0)
    fit = fit_line(make_spectrum(X, y, 0.1), 6563 * u.AA, window=3000 * u.km / u.s)
    half = 6563.0 * 1500 / 299792.458
    assert fit.window.value == pytest.approx([6563 - half, 6563 + half])


def test_error_window_outside_spectrum():
    y = 5 + gauss(X, 6563.0, 2.0, 50.0)
    with pytest.raises(ValueError, match=r"window \[7000, 7100\] Angstrom for line 'H I 3-2' "
                                         r"lies outside the spectral range \[6500, 6620\]"):
        fit_line(make_spectrum(X, y, 0.1), 7050 * u.AA, window=[7000, 7100] * u.AA,
                 label="H I 3-2")


def test_error_too_few_pixels():
    y = 5 + gauss(X, 6563.0, 2.0, 50.0)
    with pytest.raises(ValueError, match=r"for line 'Hb' has 5 usable pixels, need at least 8"):
        fit_line(make_spectrum(X, y, 0.1), 6563 * u.AA, window=[6562, 6564] * u.AA, label="Hb")


def test_error_bare_number_and_options():
    sp = make_spectrum(X, 5 + gauss(X, 6563.0, 2.0, 50.0), 0.1)
    with pytest.raises(TypeError, match=r"argument 'center' .* must be an astropy Quantity"):
        fit_line(sp, 6563.0)
    with pytest.raises(ValueError, match=r"unknown profile 'lorentz'; options: gaussian, voigt"):
        fit_line(sp, 6563 * u.AA, profile="lorentz")
    with pytest.raises(u.UnitConversionError, match=r"argument 'center' .* unit s"):
        fit_line(sp, 3 * u.s)
    with pytest.raises(ValueError, match=r"'tie_ratio' names component 'X'"):
        fit_line(sp, 6563 * u.AA, components=[6563, 6583] * u.AA, tie_ratio={("X", 0): 2.0})
    with pytest.raises(TypeError, match=r"'spectrum' must be a specutils.Spectrum"):
        fit_line(np.ones(10), 6563 * u.AA)


def test_linefit_to_dict_is_plain():
    import json

    sp = make_spectrum(X, 5 + gauss(X, 6563.0, 2.0, 50.0), 0.1)
    d = fit_line(sp, 6563 * u.AA).to_dict()
    assert json.loads(json.dumps(d))["center"]["unit"] == "Angstrom"


def test_decreasing_axis_same_result():
    rng = np.random.default_rng(21)
    y = 4 + gauss(X, 6563.2, 2.0, 50.0) + rng.normal(0, 0.3, X.size)
    up = fit_line(make_spectrum(X, y, 0.3), 6562 * u.AA)
    down = fit_line(make_spectrum(X[::-1], y[::-1], 0.3), 6562 * u.AA)
    assert_quantity_allclose(down.center, up.center, rtol=1e-9)
    assert_quantity_allclose(down.flux_err, up.flux_err, rtol=1e-6)


@pytest.mark.filterwarnings("ignore::astropy.utils.exceptions.AstropyUserWarning")
def test_agrees_with_specutils_fit_lines_on_noisy_data():
    """Same data, same model, same weights: the same least-squares minimum as specutils."""
    from astropy.modeling import models
    from specutils.fitting import fit_lines

    rng = np.random.default_rng(99)
    noise = 0.4
    y = 5 + 0.01 * (X - 6560) + gauss(X, 6563.4, 1.9, 45.0) + rng.normal(0, noise, X.size)
    spec = make_spectrum(X, y, noise)
    ours = fit_line(spec, 6563 * u.AA, window=[6530, 6600] * u.AA, fwhm=4 * u.AA)
    init = (models.Gaussian1D(amplitude=9 * FUNIT, mean=6563 * u.AA, stddev=1.7 * u.AA)
            + models.Linear1D(slope=0 * FUNIT / u.AA, intercept=5 * FUNIT))
    ref = fit_lines(spec, init, window=SpectralRegion(6530 * u.AA, 6600 * u.AA), weights="unc")
    g = ref[0]
    assert ours.center.value == pytest.approx(g.mean.value, abs=1e-4 * ours.center_err.value
                                              + 1e-6)
    ref_flux = g.amplitude.value * g.stddev.value * math.sqrt(2 * math.pi)
    assert ours.flux.value == pytest.approx(ref_flux, rel=1e-5)
    assert ours.fwhm.value == pytest.approx(2 * math.sqrt(2 * math.log(2)) * g.stddev.value,
                                            rel=1e-5)


def test_blend_upper_limits_for_absent_components():
    """Halpha present, [N II] absent: the [N II] components get upper limits, Halpha does not."""
    rng = np.random.default_rng(31)
    x = np.linspace(6520.0, 6630.0, 441)
    noise = 0.3
    y = 2 + gauss(x, 6564.6, 2.0, 80.0) + rng.normal(0, noise, x.size)
    fit = fit_line(make_spectrum(x, y, noise), 6564.6 * u.AA,
                   components={"Ha": 6564.61 * u.AA, "N2a": 6549.86 * u.AA, "N2b": 6585.27 * u.AA},
                   tie_width=True, tie_ratio={("N2b", "N2a"): 2.94}, fwhm=4.7 * u.AA)
    by = {c.label: c for c in fit.components}
    assert by["Ha"].upper_limit is None and by["Ha"].detected
    assert by["N2a"].upper_limit is not None and by["N2b"].upper_limit is not None
    assert by["N2b"].upper_limit.value == pytest.approx(2.94 * by["N2a"].upper_limit.value)
    # white noise, two non-overlapping profiles F*(g_a + 2.94 g_b):
    # sigma_F = noise * sqrt(2 sqrt(pi) sigma dx) / sqrt(1 + 2.94**2)
    sigma = 4.7 / (2 * math.sqrt(2 * math.log(2)))
    scale = noise * math.sqrt(2 * math.sqrt(math.pi) * sigma * (x[1] - x[0]))
    assert 3 * by["N2a"].upper_limit_sigma.value == pytest.approx(
        3 * scale / math.hypot(1, 2.94), rel=0.1)
    assert by["N2a"].upper_limit.value >= 3 * by["N2a"].upper_limit_sigma.value


# ------------------------------------------------------------------------------------------
# the pipeline's small parts: covariance, resolution floor, fit_group


def test_covariance_proper_inverse_and_unconstrained():
    from zline.physics._fitmodel import covariance

    rng = np.random.default_rng(4)
    jac = rng.normal(size=(50, 3))
    cov, bad = covariance(jac)
    assert bad is None
    np.testing.assert_allclose(cov, np.linalg.inv(jac.T @ jac), rtol=1e-10)
    # a parameter the data do not constrain (a column that copies another): flagged, no cov
    degenerate = np.column_stack([jac, jac[:, 1]])
    cov, bad = covariance(degenerate)
    assert cov is None and bad in (1, 3)
    # a held parameter gets zero variance, the rest the inverse of the others
    cov, bad = covariance(degenerate, held=np.array([False, False, False, True]))
    assert bad is None and cov[3, 3] == 0
    np.testing.assert_allclose(cov[:3, :3], np.linalg.inv(jac.T @ jac), rtol=1e-10)


def test_resolution_floor_from_meta_or_sampling():
    from zline.physics.fitting import SAMPLING_FWHM_PIXELS, resolution_fwhm

    sp = make_spectrum(X, 5 + gauss(X, 6563.0, 2.0, 50.0), 0.1)
    fw, source = resolution_fwhm(sp, 6563 * u.AA)
    assert source == "sampling" and fw.value == pytest.approx(SAMPLING_FWHM_PIXELS * 0.5)
    sp.meta["zline"] = {"resolution": 2000.0}
    fw, source = resolution_fwhm(sp, 6563 * u.AA)
    assert source == "resolving power" and fw.value == pytest.approx(6563 / 2000)
    sp.meta["zline"] = {"resolution_fwhm": 150 * u.km / u.s}
    fw, source = resolution_fwhm(sp, 6563 * u.AA)
    assert source == "resolution FWHM" and fw.value == pytest.approx(6563 * 150 / 299792.458)


def test_width_never_below_the_floor():
    # a one-pixel spike: the width stops on the floor (held there: unresolved) instead of
    # collapsing below a pixel, so its centre error stays a fair fraction of a pixel (0.5 A)
    y = np.full(X.size, 5.0)
    y[120] += 3.0
    fit = fit_line(make_spectrum(X, y, 0.5), 6560 * u.AA, fwhm=3 * u.AA, kind="emission")
    assert fit.fwhm.value == pytest.approx(fit.fwhm_floor.value, rel=1e-6)
    assert "resolution floor" in fit.reason
    assert fit.center_err.value > 0.1 * 0.5


def test_width_ceiling_by_kind():
    from zline.physics.fitting import WIDTH_CEILING

    # a very broad bump: an emission line's ceiling (1500 km/s) stops it, a broad line fits it
    x = np.linspace(6300.0, 6800.0, 1001)
    y = 1 + gauss(x, 6563.0, 6563 * 4000 / 2.3548 / 299792.458, 400.0)
    sp = make_spectrum(x, y, 0.01)
    narrow = fit_line(sp, 6563 * u.AA, kind="emission", fwhm=20 * u.AA)
    broad = fit_line(sp, 6563 * u.AA, kind="broad", fwhm=40 * u.AA)
    assert not narrow.measured and "ceiling" in narrow.reason
    assert narrow.fwhm_kms <= WIDTH_CEILING["emission"] * 1.001
    assert broad.measured and broad.fwhm_kms.value == pytest.approx(4000, rel=1e-3)


def test_fit_group_follow_and_fixed_centres():
    from zline.physics.fitgroup import fit_group
    from zline.physics.fitting import Component

    x = np.linspace(6700.0, 6760.0, 241)
    mu1, mu2 = 6718.29 * 1.001, 6732.67 * 1.001
    y = 1 + gauss(x, mu1, 1.2, 20.0) + gauss(x, mu2, 1.2 * mu2 / mu1, 14.0)
    sp = make_spectrum(x, y, 0.01)
    comps = [Component("a", 6718.29 * 1.0008 * u.AA, "free", 6718.29 * u.AA, 100 * u.km / u.s,
                       0, 2.8 * u.AA, kind="emission"),
             Component("b", 6732.67 * 1.0008 * u.AA, "follow", 6732.67 * u.AA, None, 0,
                       2.8 * u.AA, kind="emission", follows=0)]
    a, b = fit_group(sp, comps, [6700, 6760] * u.AA)
    assert a.center.value == pytest.approx(mu1, abs=1e-4)
    assert b.center.value / a.center.value == pytest.approx(6732.67 / 6718.29, rel=1e-12)
    assert b.flux.value == pytest.approx(14.0, rel=1e-4)
    fixed = [Component("a", mu1 * u.AA, "fixed", None, None, 0, 2.8257 * u.AA, True, "emission")]
    (f,) = fit_group(sp, fixed, [6700, 6728] * u.AA)
    assert f.message == "linear least squares" and f.center.value == mu1
    with pytest.raises(ValueError, match="follows 5, which is not the index"):
        fit_group(sp, [Component("a", mu1 * u.AA, "follow", follows=5)], [6700, 6760] * u.AA)
