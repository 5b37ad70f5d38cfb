"""Tests of zline.physics.identify: locks, collections and the redshift solution."""

import json
import math

import astropy.units as u
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose

from zline.physics.identify import Identifications, Lock, RedshiftSolution, solve_redshift

C_KMS = 299792.458  # km/s, exact by SI definition

# Invented line list for mechanics (vacuum Angstrom, rounded values of common lines, from memory)
REST = {"Lya": 1215.670, "Hb": 4862.721, "OIII5008": 5008.240, "Ha": 6564.614, "NII6585": 6585.27}


def make_locks(z, rel_err=1e-5, rng=None, medium="vacuum", bias=None):
    rng = rng or np.random.default_rng(0)
    locks = []
    for label, rest in REST.items():
        obs = rest * (1 + z)
        err = obs * rel_err
        obs = obs + rng.normal(0, err) + (bias or {}).get(label, 0.0) * obs
        locks.append(Lock(label, rest * u.AA, obs * u.AA, err * u.AA, species="H I",
                          medium=medium))
    return locks


def test_exact_redshift_from_consistent_locks():
    locks = [Lock(k, v * u.AA, v * 1.25 * u.AA, 0.1 * u.AA) for k, v in REST.items()]
    sol = solve_redshift(locks)
    assert isinstance(sol, RedshiftSolution)
    assert sol.z == pytest.approx(0.25, abs=1e-13)
    assert sol.chi2_dof == pytest.approx(0.0, abs=1e-12)
    assert not sol.scaled
    assert sol.dof == len(REST) - 1 and sol.n_used == len(REST)
    assert sol.residuals.unit == u.km / u.s
    # z_err equals the weighted-mean error: (1+z) / sqrt(sum 1/sigma_i^2), sigma_i = err/obs
    sig = np.array([0.1 / (v * 1.25) for v in REST.values()])
    assert sol.z_err == pytest.approx(1.25 / math.sqrt(np.sum(1 / sig**2)), rel=1e-12)


def test_monte_carlo_pulls_of_z():
    rng = np.random.default_rng(1234)
    z_true = 0.0831
    pulls = []
    for _ in range(300):
        sol = solve_redshift(make_locks(z_true, 2e-5, rng))
        pulls.append((sol.z - z_true) / sol.z_err)
    pulls = np.array(pulls)
    # errors scaled up by sqrt(chi2/dof) when > 1 make the pulls slightly narrower than 1
    assert abs(pulls.mean()) < 0.2
    assert 0.75 < pulls.std() < 1.2


@pytest.mark.parametrize("convention, equivalency", [
    ("optical", u.doppler_optical), ("radio", u.doppler_radio),
    ("relativistic", u.doppler_relativistic)])
def test_velocity_conventions_against_astropy(convention, equivalency):
    rest = 6564.614 * u.AA
    obs = 6600.0 * u.AA
    sol = solve_redshift([Lock("Ha", rest, obs, 0.05 * u.AA)], convention=convention,
                         solve_for="velocity")
    assert_quantity_allclose(sol.velocity, obs.to(u.km / u.s, equivalencies=equivalency(rest)),
                             rtol=1e-12)
    assert math.isnan(sol.chi2_dof) and sol.dof == 0
    # velocity error: dv/dln(1+z) * sigma_y, checked by finite difference of astropy's conversion
    h = 1e-4 * u.AA
    dv = ((obs + h).to(u.km / u.s, equivalencies=equivalency(rest))
          - (obs - h).to(u.km / u.s, equivalencies=equivalency(rest))) / (2 * h)
    assert_quantity_allclose(sol.velocity_err, abs(dv) * 0.05 * u.AA, rtol=1e-6)


def test_frequency_locks_default_to_radio_convention():
    rest = 1420.405751768 * u.MHz  # H I 21 cm, common practice
    v_true = 250.0  # km/s, radio convention
    obs = rest * (1 - v_true / C_KMS)
    lock = Lock("HI21", rest, obs, 1 * u.kHz)
    sol = solve_redshift([lock], solve_for="velocity")
    assert sol.convention == "radio"
    assert sol.velocity.to_value(u.km / u.s) == pytest.approx(v_true, rel=1e-10)
    assert_quantity_allclose(sol.velocity,
                             obs.to(u.km / u.s, equivalencies=u.doppler_radio(rest)), rtol=1e-12)
    # z from frequencies: 1 + z = nu_rest / nu_obs
    assert sol.z == pytest.approx((rest / obs).value - 1, rel=1e-12)
    assert sol.velocity_err.to_value(u.km / u.s) == pytest.approx(
        C_KMS * 1e-3 / obs.to_value(u.MHz) * (obs / rest).value, rel=1e-6)


def test_energy_and_mixed_units():
    rest_kev = (6.9662 * u.keV)  # Fe XXVI Lya1 approx (from memory); mechanics only
    z = 0.05
    obs = rest_kev / (1 + z)
    wave_lock = Lock("Ha", 6564.614 * u.AA, 6564.614 * (1 + z) * u.AA, 0.2 * u.AA)
    sol = solve_redshift([Lock("FeXXVI", rest_kev, obs, 2 * u.eV), wave_lock])
    assert sol.z == pytest.approx(z, rel=1e-10)


def test_error_in_kms_accepted():
    rest = 5008.240 * u.AA
    a = Lock("OIII", rest, rest * 1.1, 15 * u.km / u.s)
    b = Lock("OIII", rest, rest * 1.1, rest * 1.1 * 15 / C_KMS)
    assert a.relative_error == pytest.approx(b.relative_error, rel=1e-12)


def test_chi2_scaling_when_inconsistent():
    rng = np.random.default_rng(2)
    locks = make_locks(0.3, 1e-5, rng, bias={"Hb": 2.5e-5, "Ha": -2.5e-5})
    sol = solve_redshift(locks)
    assert sol.chi2_dof > 1 and sol.scaled
    unscaled = (1 + sol.z) / math.sqrt(sum(1 / l.relative_error**2 for l, o in
                                   zip(locks, sol.outliers) if not o))
    assert sol.z_err == pytest.approx(unscaled * math.sqrt(sol.chi2_dof), rel=1e-6)


def test_outlier_flagged_not_dropped():
    rng = np.random.default_rng(3)
    z = 0.15
    locks = make_locks(z, 1e-5, rng, bias={"OIII5008": 3e-4})  # 30 sigma off: misidentified
    sol = solve_redshift(locks)
    flagged = dict(zip(sol.labels, sol.outliers))
    assert flagged["OIII5008"] and sum(sol.outliers) == 1
    assert sol.n_used == len(REST) - 1
    assert abs(sol.z - z) < 4 * sol.z_err
    # reported for every lock, outlier included
    assert sol.residuals.shape == (len(REST),)
    i = sol.labels.index("OIII5008")
    assert sol.residuals[i].to_value(u.km / u.s) == pytest.approx(C_KMS * 3e-4, rel=0.05)
    # the all-locks solution is reported too and is pulled by the outlier
    assert sol.z_all > sol.z and sol.chi2_dof_all > 10
    # use_outliers keeps it in the estimate but still flags it
    sol2 = solve_redshift(locks, use_outliers=True)
    assert sol2.outliers[i] and sol2.n_used == len(REST)
    assert sol2.z == pytest.approx(sol.z_all, rel=1e-12)


def test_two_locks_never_flagged():
    locks = [Lock("a", 5000 * u.AA, 5500 * u.AA, 0.01 * u.AA),
             Lock("b", 6000 * u.AA, 6700 * u.AA, 0.01 * u.AA)]
    sol = solve_redshift(locks)
    assert not sol.outliers.any() and sol.chi2_dof > 100 and sol.scaled


def test_air_locks_converted_to_vacuum():
    """Air rest + air observed: z equals the vacuum z (Morton 2000 refraction), not the naive ratio."""
    from specutils.utils.wcs_utils import vac_to_air

    z = 0.4
    vac_rest = np.array([4862.721, 6564.614]) * u.AA
    air_rest = vac_to_air(vac_rest, method="Morton2000")
    air_obs = vac_to_air(vac_rest * (1 + z), method="Morton2000")
    locks = [Lock(f"l{i}", r, o, 0.01 * u.AA, medium="air") for i, (r, o) in
             enumerate(zip(air_rest, air_obs))]
    sol = solve_redshift(locks)
    assert sol.z == pytest.approx(z, abs=1e-9)
    naive = (air_obs[0] / air_rest[0]).value - 1
    assert abs(naive - z) > 1e-6  # the correction matters at this level


def test_lock_validation_messages():
    with pytest.raises(TypeError, match=r"Lock 'Ha': 'rest' must be an astropy Quantity"):
        Lock("Ha", 6564.6, 6600 * u.AA, 0.1 * u.AA)
    with pytest.raises(u.UnitsError, match=r"Lock 'Ha': 'observed' has unit s"):
        Lock("Ha", 6564.6 * u.AA, 3 * u.s, 0.1 * u.AA)
    with pytest.raises(ValueError, match=r"'observed_err' must be positive"):
        Lock("Ha", 6564.6 * u.AA, 6600 * u.AA, 0 * u.AA)
    with pytest.raises(ValueError, match=r"unknown medium 'water'; options: air, vacuum"):
        Lock("Ha", 6564.6 * u.AA, 6600 * u.AA, 0.1 * u.AA, medium="water")
    with pytest.raises(ValueError, match=r"unknown convention 'doppler'; options: optical, "
                                         r"radio, relativistic"):
        solve_redshift([Lock("Ha", 6564.6 * u.AA, 6600 * u.AA, 0.1 * u.AA)],
                       convention="doppler")
    with pytest.raises(ValueError, match=r"'locks' is empty"):
        solve_redshift([])


def test_identifications_collection_roundtrip():
    ids = Identifications(make_locks(0.1))
    assert len(ids) == len(REST) and ids.labels == list(REST)
    with pytest.raises(ValueError, match=r"a lock labelled 'Ha' exists"):
        ids.add(Lock("Ha", 1 * u.AA, 2 * u.AA, 0.1 * u.AA))
    removed = ids.remove("Hb")
    assert removed.label == "Hb" and "Hb" not in ids
    assert ids.remove(0).label == "Lya"
    with pytest.raises(KeyError, match=r"no lock labelled 'nope'"):
        ids.remove("nope")
    with pytest.raises(IndexError, match=r"index 10 out of range for 3 locks"):
        ids.remove(10)
    data = json.loads(json.dumps(ids.to_dicts()))
    back = Identifications.from_dicts(data)
    assert back.labels == ids.labels
    for a, b in zip(back, ids):
        assert a == b
    assert ids.solve().z == pytest.approx(solve_redshift(list(ids)).z)


def test_solution_to_dict_is_json():
    sol = solve_redshift(make_locks(0.2))
    d = json.loads(json.dumps(sol.to_dict()))
    assert d["residuals"]["unit"] == "km / s" and len(d["outliers"]) == len(REST)


@pytest.mark.parametrize("convention", ["optical", "radio", "relativistic"])
def test_velocity_consistent_with_kinematics_module(convention):
    """The solver's velocity agrees with zline.physics.kinematics for one exact lock."""
    from zline.physics.kinematics import velocity_from

    rest, obs = 4862.721 * u.AA, 4870.0 * u.AA
    sol = solve_redshift([Lock("Hb", rest, obs, 0.01 * u.AA)], convention=convention)
    assert_quantity_allclose(sol.velocity, velocity_from(obs, rest, convention=convention),
                             rtol=1e-9)


def test_lock_from_fit_and_end_to_end_redshift():
    """Fit two synthetic lines at a known z, lock them, solve: z recovered within errors."""
    from astropy.nddata import StdDevUncertainty
    from specutils import Spectrum

    from zline.physics.fitting import fit_line

    z = 0.0457
    rng = np.random.default_rng(77)
    x = np.linspace(4950.0, 6950.0, 8001)
    y = np.full(x.size, 2.0)
    for rest, flux in ((REST["Hb"], 30.0), (REST["Ha"], 90.0)):
        mu = rest * (1 + z)
        s = mu * 80.0 / C_KMS
        y += flux * np.exp(-0.5 * ((x - mu) / s) ** 2) / (s * math.sqrt(2 * math.pi))
    y += rng.normal(0, 0.2, x.size)
    spec = Spectrum(flux=y * u.Jy, spectral_axis=x * u.AA,
                    uncertainty=StdDevUncertainty(np.full(x.size, 0.2)))
    locks = []
    for label in ("Hb", "Ha"):
        guess = REST[label] * (1 + z) * u.AA + 0.8 * u.AA
        fit = fit_line(spec, guess, fwhm=4 * u.AA, label=label)
        locks.append(Lock.from_fit(label, REST[label] * u.AA, fit, species="H I"))
    sol = solve_redshift(locks)
    assert abs(sol.z - z) < 4 * sol.z_err
    assert locks[0].fit is not None and locks[0].observed == locks[0].fit.center
    with pytest.raises(TypeError, match=r"'fit' must be a LineFit"):
        Lock.from_fit("x", 1 * u.AA, {"center": 1})
