"""Tests of zline.physics.measure on the invented demo spectra (truth in their headers)."""

import astropy.units as u
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose

from zline.physics.demo import DEMO_TRUTH, write_demo_spectra
from zline.physics.measure import default_line_set, measure_spectrum
from zline.physics.spectra import read_spectrum


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    paths = write_demo_spectra(tmp_path_factory.mktemp("demo"))
    return {name: read_spectrum(path) for name, path in paths.items()}


def test_default_sets(demo):
    assert default_line_set(demo["galaxy"]) == "galaxy-emission"
    assert default_line_set(demo["radio"]) == "radio"
    assert default_line_set(demo["xray"]) == "xray"


def test_galaxy_redshift(demo):
    truth = DEMO_TRUTH["galaxy"]["z"]
    m = measure_spectrum(demo["galaxy"], z=truth + 3e-4)  # trial 90 km/s off the truth
    assert len(m.locks) >= 5
    assert abs(m.z - truth) < 3 * m.z_err and abs(m.z - truth) < 2e-4
    assert m.medium == "vacuum" and m.line_set == "galaxy-emission"
    assert_quantity_allclose(m.velocity, m.solution.velocity)


def test_nebula_velocity_air(demo):
    truth = DEMO_TRUTH["nebula"]["velocity"]
    m = measure_spectrum(demo["nebula"], z=0.0)
    assert m.medium == "air"  # the file says air; the set follows it
    assert m.solution.solve_for == "velocity"
    assert abs(m.velocity - truth) < 3 * u.km / u.s


def test_radio_velocity(demo):
    truth = DEMO_TRUTH["radio"]["velocity"]
    m = measure_spectrum(demo["radio"], z=0.0, convention="radio")
    assert m.convention == "radio" and len(m.locks) >= 3
    dv = abs((m.velocity - truth).to_value(u.km / u.s))
    assert dv < 3 * m.velocity_err.to_value(u.km / u.s) + 0.5


def test_xray_redshift(demo):
    truth = DEMO_TRUTH["xray"]["z"]
    m = measure_spectrum(demo["xray"], z=truth)
    assert m.line_set == "xray" and abs(m.z - truth) < 2e-4


def test_undetected_lines_get_limits(demo):
    m = measure_spectrum(demo["galaxy"], z=DEMO_TRUTH["galaxy"]["z"])
    missing = [r for r in m.lines if not r["detected"]]
    assert missing, "the galaxy set has lines the demo does not contain"
    for r in missing:
        assert r["limit"].unit == r["fit"].flux.unit and r["limit"].value > 0
        assert r["reason"]
    d = m.to_dict()
    assert {"z", "z_err", "velocity", "velocity_err", "lines"} <= set(d)
    limits = [line for line in d["lines"] if not line["detected"]]
    assert all(line["upper_limit"] is not None for line in limits)
    table = m.table()
    assert int(table["upper_limit"].sum()) == len(missing)
    assert table.meta["z"] == m.z


def test_wrong_trial_finds_nothing(demo):
    # A trial 1000 km/s off searched only +-100 km/s: only chance coincidences of a rich line
    # list lock (e.g. Halpha predicted onto [N II] 6583), far fewer than at the right velocity.
    right = measure_spectrum(demo["nebula"], z=0.0)
    wrong = measure_spectrum(demo["nebula"], z=0.0, velocity=1000 * u.km / u.s,
                             window=100 * u.km / u.s)
    assert len(wrong.locks) < len(right.locks) / 4
    # nothing to lock at all: no result rather than a made-up one
    none = measure_spectrum(demo["nebula"], z=0.0, velocity=-800 * u.km / u.s,
                            tolerance=10 * u.km / u.s, window=50 * u.km / u.s)
    assert none.locks == [] and np.isnan(none.z) and none.solution is None
    assert all(r["limit"].value > 0 for r in none.lines)


def test_bad_arguments(demo):
    with pytest.raises(TypeError, match="'velocity' must be a velocity"):
        measure_spectrum(demo["galaxy"], z=0.07, velocity=10)
    with pytest.raises(ValueError, match="unknown convention 'fast'"):
        measure_spectrum(demo["galaxy"], z=0.07, convention="fast")
    with pytest.raises(ValueError, match="unknown line set 'stars'"):
        measure_spectrum(demo["galaxy"], z=0.07, lines="stars")
    with pytest.raises(TypeError, match="'z' must be a plain"):
        measure_spectrum(demo["galaxy"], z=0.07 * u.one)


def test_custom_line_table(demo):
    from astropy.table import QTable

    from zline.physics.catalog import line_set

    full = line_set("galaxy-emission")
    mine = QTable(full[np.isin(full["label"], ["Hα", "Hβ"])])
    assert len(mine) == 2
    m = measure_spectrum(demo["galaxy"], z=DEMO_TRUTH["galaxy"]["z"], lines=mine)
    assert m.line_set == "custom" and {lock.label for lock in m.locks} == {"Hα", "Hβ"}
    assert abs(m.z - DEMO_TRUTH["galaxy"]["z"]) < 2e-4
    with pytest.raises(ValueError, match="needs a 'rest' column"):
        measure_spectrum(demo["galaxy"], z=0.07, lines=QTable({"label": ["x"]}))


def _flux_truth(label):
    # the demo builds each galaxy emission line with flux = 120 * strength (physics/demo.py)
    from zline.physics.catalog import line_set

    full = line_set("galaxy-emission")
    return 120.0 * float(full["strength"][full["label"] == label][0])


def test_close_lines_fitted_as_one_blend(demo):
    truth = DEMO_TRUTH["galaxy"]["z"]
    m = measure_spectrum(demo["galaxy"], z=truth + 3e-4)  # trial 90 km/s off the truth
    resid = dict(zip(m.solution.labels, m.solution.residuals.to_value(u.km / u.s)))
    rows = {r["label"]: r for r in m.lines}
    for label in ("[O II] 3726", "[O II] 3729"):
        assert rows[label]["detected"], rows[label]["reason"]
        assert abs(resid[label]) < 20
        assert rows[label]["blend"] == ["[O II] 3726", "[O II] 3729"]
    f1, f2 = rows["[O II] 3726"]["fit"], rows["[O II] 3729"]["fit"]
    ratio = float(f1.flux / f2.flux)
    ratio_err = ratio * np.hypot(float(f1.flux_err / f1.flux), float(f2.flux_err / f2.flux))
    expected = _flux_truth("[O II] 3726") / _flux_truth("[O II] 3729")
    assert abs(ratio - expected) < 3 * ratio_err
    # the two components sit at their own centres, a rest-ratio apart (one shared shift)
    assert_quantity_allclose(f2.center / f1.center,
                             rows["[O II] 3729"]["rest"] / rows["[O II] 3726"]["rest"], rtol=1e-9)
    # no feature is claimed twice: distinct centres for every detected line
    centres = np.sort([r["fit"].center.to_value(u.AA) for r in m.lines if r["detected"]])
    assert np.all(np.diff(centres) > 0.05)
    # the blend's locks share one shift, so together they weigh as one measurement
    locks = {lock.label: lock for lock in m.locks}
    assert_quantity_allclose(locks["[O II] 3726"].observed_err,
                             np.sqrt(2) * f1.center_err)
    assert abs(m.z - truth) < 3 * m.z_err and abs(m.z - truth) < 2e-4


def test_blend_off_gives_each_line_its_centre(demo):
    # blend=0: the [O II] pair is still fitted together (their windows overlap), but each line
    # has its own centre, so the ratio of the centres is no longer the rest ratio exactly
    m = measure_spectrum(demo["galaxy"], z=DEMO_TRUTH["galaxy"]["z"], blend=0 * u.km / u.s)
    rows = {r["label"]: r for r in m.lines}
    f1, f2 = rows["[O II] 3726"]["fit"], rows["[O II] 3729"]["fit"]
    assert rows["[O II] 3726"]["blend"] == ["[O II] 3726", "[O II] 3729"]
    rest_ratio = float(rows["[O II] 3729"]["rest"] / rows["[O II] 3726"]["rest"])
    assert abs(float(f2.center / f1.center) - rest_ratio) > 1e-9
    locks = {lock.label: lock for lock in m.locks}
    assert_quantity_allclose(locks["[O II] 3726"].observed_err, f1.center_err)


def test_blend_argument_checked(demo):
    with pytest.raises(TypeError, match="'blend' must be a velocity"):
        measure_spectrum(demo["galaxy"], z=0.07, blend=500)
    with pytest.raises(ValueError, match="'blend' must be finite and >= 0"):
        measure_spectrum(demo["galaxy"], z=0.07, blend=-1 * u.km / u.s)


def test_unresolved_blend_gets_expected_ratio(demo):
    # He I 3889 and H8 are ~30 km/s apart: a free blend fit trades flux between them, so the
    # ratio is fixed to the line set's strengths; both lines then lock at their own centres
    m = measure_spectrum(demo["galaxy"], z=DEMO_TRUTH["galaxy"]["z"] + 3e-4)
    rows = {r["label"]: r for r in m.lines}
    resid = dict(zip(m.solution.labels, m.solution.residuals.to_value(u.km / u.s)))
    he, h8 = rows["He I 3889"], rows["H8"]
    assert he["detected"] and h8["detected"] and "fixed" in he["reason"]
    assert abs(resid["He I 3889"]) < 20 and abs(resid["H8"]) < 20
    expected = _flux_truth("He I 3889") / _flux_truth("H8")
    assert float(he["fit"].flux / h8["fit"].flux) == pytest.approx(expected, rel=1e-6)
    assert float(h8["fit"].center.to_value(u.AA) - he["fit"].center.to_value(u.AA)) > 0.3
    d = m.to_dict()
    assert {"He I 3889", "H8"} <= set({line["label"]: line["blend"] for line in d["lines"]}["H8"])


# ------------------------------------------------------------------------------------------
# Monte-Carlo honesty: one invented emission-line spectrum (SDSS-like log-linear sampling,
# 69 km/s pixels, Gaussian noise exactly as its error array says), many noise realisations.

_C_KMS = 299792.458
_MC_Z = 0.02
_MC_SIGMA_V = 70.0  # km/s, line sigma (instrument and gas)
_MC_PIX_KMS = 69.0
_MC_NOISE = 1.0
_MC_N = 120


def _mc_axis():
    lnx = np.arange(np.log(6250 * (1 + _MC_Z)), np.log(6790 * (1 + _MC_Z)), _MC_PIX_KMS / _C_KMS)
    return lnx, np.exp(lnx)


def _mc_flux_for_snr(snr, mu):
    # white noise, fixed Gaussian profile: sigma_F = noise * sqrt(2 sqrt(pi) sigma dx)
    sig, dx = mu * _MC_SIGMA_V / _C_KMS, mu * _MC_PIX_KMS / _C_KMS
    return snr * _MC_NOISE * np.sqrt(2 * np.sqrt(np.pi) * sig * dx)


def _mc_spectrum(true_snr, rng):
    from scipy.special import erf
    from specutils import Spectrum
    from astropy.nddata import StdDevUncertainty

    from zline.physics.catalog import line_set

    full = line_set("galaxy-emission")
    lnx, x = _mc_axis()
    edges = np.exp(np.concatenate([[lnx[0]], lnx[1:]] ) - 0.5 * _MC_PIX_KMS / _C_KMS)
    edges = np.append(edges, np.exp(lnx[-1] + 0.5 * _MC_PIX_KMS / _C_KMS))
    y = np.full(x.size, 10.0)
    truth = {}
    for label, rest in zip(full["label"], full["rest"].to_value(u.AA)):
        mu = rest * (1 + _MC_Z)
        if not x[0] < mu < x[-1]:
            continue
        flux = _mc_flux_for_snr(true_snr.get(str(label), 0.0), mu)
        truth[str(label)] = flux
        sig = mu * _MC_SIGMA_V / _C_KMS
        cdf = 0.5 * (1 + erf((edges - mu) / (np.sqrt(2) * sig)))
        y += flux * np.diff(cdf) / np.diff(edges)  # pixel-integrated Gaussian
    y += rng.normal(0, _MC_NOISE, x.size)
    spec = Spectrum(flux=y * u.Unit("1e-17 erg / (s cm2 AA)"), spectral_axis=x * u.AA,
                    uncertainty=StdDevUncertainty(np.full(x.size, _MC_NOISE)))
    return spec, truth


_MC_TRUE_SNR = {"Hα": 10.0, "[N II] 6583": 10.0, "[N II] 6548": 10.0 / 2.94,
                "[S II] 6716": 10.0, "[S II] 6731": 10.0, "[O I] 6300": 2.0}
_MC_ZERO = ("[O I] 6364", "He I 6678")  # no flux at all


@pytest.fixture(scope="module")
def monte_carlo():
    rng = np.random.default_rng(20261202)
    runs = []
    for _ in range(_MC_N):
        spec, truth = _mc_spectrum(_MC_TRUE_SNR, rng)
        m = measure_spectrum(spec, z=_MC_Z)
        runs.append((m, truth))
    return runs


def test_monte_carlo_false_detections(monte_carlo):
    # lines with zero true flux: detected (3 sigma, expected sign) in <= 1 % of the trials
    trials = [{r["label"]: r for r in m.lines}[lab]["detected"]
              for m, _ in monte_carlo for lab in _MC_ZERO]
    assert len(trials) == 2 * _MC_N
    assert np.mean(trials) <= 0.01


def test_monte_carlo_flux_pulls(monte_carlo):
    # Halpha, [N II] 6583 and [S II] 6716, 6731 at S/N 10, neighbours in the same window
    for label in ("Hα", "[N II] 6583", "[S II] 6716", "[S II] 6731"):
        pulls = np.array([(r["fit"].flux.value - truth[label]) / r["fit"].flux_err.value
                          for m, truth in monte_carlo
                          for r in m.lines if r["label"] == label])
        assert pulls.size == _MC_N
        assert abs(pulls.mean()) < 0.3, label
        assert 0.85 < pulls.std() < 1.15, label


def test_monte_carlo_redshift_pull(monte_carlo):
    pulls = np.array([(m.z - _MC_Z) / m.z_err for m, _ in monte_carlo])
    assert np.all(np.isfinite(pulls))
    assert abs(pulls.mean()) < 0.3 and 0.85 < pulls.std() < 1.15


_MC_LOW_N = 200


@pytest.fixture(scope="module")
def monte_carlo_low():
    # every line of the S/N 10 set scaled to S/N 3 (the set's joint S/N is then about 6)
    rng = np.random.default_rng(20261203)
    snr = {label: 0.3 * s for label, s in _MC_TRUE_SNR.items()}
    return [measure_spectrum(_mc_spectrum(snr, rng)[0], z=_MC_Z) for _ in range(_MC_LOW_N)]


def test_monte_carlo_redshift_pull_low_snr(monte_carlo_low):
    # where a z is given, its error holds: pull std 0.9-1.15, no line-identity jumps (a pull
    # beyond 5), few beyond 3 sigma; a z whenever one line reaches 3 sigma (most trials)
    pulls = np.array([(m.z - _MC_Z) / m.z_err for m in monte_carlo_low if m.locks])
    assert pulls.size > 0.6 * _MC_LOW_N
    assert np.all(np.isfinite(pulls))
    assert abs(pulls.mean()) < 0.3 and 0.9 < pulls.std() < 1.15
    assert np.max(np.abs(pulls)) < 5 and np.mean(np.abs(pulls) > 3) < 0.02
    # the lines with zero true flux stay below the detection threshold here too
    trials = [{r["label"]: r for r in m.lines}[lab]["detected"]
              for m in monte_carlo_low for lab in _MC_ZERO]
    assert np.mean(trials) <= 0.01
    # the z comes from the joint shift of the set, whose S/N is about 6 here (sqrt(4 * 3^2 + ...))
    snr = np.array([m.search["joint_snr"] for m in monte_carlo_low if m.locks])
    assert all(m.search["joint"] for m in monte_carlo_low if m.locks)
    assert 4.5 < np.median(snr) < 7.5


def test_monte_carlo_upper_limits_cover(monte_carlo):
    # every undetected line's limit max(F, 0) + 3 sigma covers its true flux in >= 99 % of the
    # trials (one-sided 3 sigma: 99.87 % expected); [O I] 6300 has a true S/N of 2
    cover = [truth[r["label"]] <= r["limit"].value
             for m, truth in monte_carlo for r in m.lines if not r["detected"]]
    assert len(cover) > 2 * _MC_N
    assert np.mean(cover) >= 0.99


def test_radio_lines_found_from_zero():
    # invented radio recombination spectrum, lines at +52 km/s (radio convention), trial v = 0:
    # the search window finds them and the velocity comes out within its error
    from astropy.nddata import StdDevUncertainty
    from specutils import Spectrum

    from zline.physics.catalog import line_set
    from zline.physics.kinematics import observed_position

    nu = np.arange(4.82e9, 4.90e9, 50e3)  # Hz, 50 kHz channels (~3 km/s)
    lines = line_set("radio", unit=u.Hz)
    centres = observed_position(lines["rest"], velocity=52 * u.km / u.s,
                                convention="radio").to_value(u.Hz)
    rng = np.random.default_rng(52)
    y = np.full(nu.size, 0.2)
    for c, s in zip(centres, lines["strength"]):
        sig = c * 25.0 / 2.3548 / _C_KMS  # FWHM 25 km/s
        y += 0.05 * float(s) * np.exp(-0.5 * ((nu - c) / sig) ** 2)
    noise = 0.002
    y += rng.normal(0, noise, nu.size)
    spec = Spectrum(flux=y * u.K, spectral_axis=nu * u.Hz,
                    uncertainty=StdDevUncertainty(np.full(nu.size, noise)))
    m = measure_spectrum(spec, z=0.0, convention="radio")
    assert m.search["found"] and len(m.locks) >= 3
    dv = abs(m.velocity.to_value(u.km / u.s) - 52.0)
    assert dv < 3 * m.velocity_err.to_value(u.km / u.s)


# ------------------------------------------------------------------------------------------
# real survey spectra (../shared/realdata through the realdata fixture)


def _real(row):
    import warnings

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the reader's notes on the survey layout
        return read_spectrum(row["path"])


def test_offset_start_converges_to_the_same_z(realdata):
    # an emission-line galaxy, trials 300 km/s above and 150 km/s below the published z
    # (SDSS pipeline redshift, HDU 2 column Z) give the z found from the published value
    row = realdata[realdata["file"] == "spec-0266-51630-0215.fits"][0]
    spec = _real(row)
    z_pub = float(row["z_published"])
    ref = measure_spectrum(spec, z=z_pub)
    assert len(ref.locks) >= 5
    for dv in (300.0, -150.0):
        m = measure_spectrum(spec, z=(1 + z_pub) * (1 + dv / _C_KMS) - 1)
        assert abs(m.z - ref.z) < 0.2 * ref.z_err, dv
        assert {lock.label for lock in m.locks} == {lock.label for lock in ref.locks}
        assert abs(m.search["shift"].to_value(u.km / u.s) + dv) < 50


def test_absorption_galaxies_give_published_z(realdata):
    # the absorption-line galaxies: Ca II H, K, Mg I b, Na I D from the catalogue, absorption
    # detected with its sign; z within errors of the SDSS pipeline redshift (HDU 2, column Z)
    from astropy.table import QTable

    from zline.physics.catalog import line_set

    full = line_set("galaxy-absorption")
    names = ["Ca II K", "Ca II H", "Mg I b 5167", "Mg I b 5173", "Mg I b 5184", "Na I D2",
             "Na I D1"]
    table = QTable(full[np.isin(full["label"], names)])
    rows = realdata[realdata["kind"] == "galaxy_absorption"]
    assert len(rows) == 3
    for row in rows:
        m = measure_spectrum(_real(row), z=float(row["z_published"]), lines=table)
        assert len(m.locks) >= 2, row["file"]
        assert all(lock.fit.flux.value < 0 for lock in m.locks)
        assert all(r["fit"].ew.value > 0 for r in m.lines if r["detected"])  # absorption: W > 0
        dz = abs(m.z - float(row["z_published"]))
        assert dz < 3 * np.hypot(m.z_err, float(row["z_published_err"])), row["file"]


def test_absorption_galaxies_full_set_give_published_z(realdata):
    # the whole galaxy-absorption set (Balmer series, Ca II H and K, Ca I, Mg I b, Na I D, the
    # Ca II triplet) at the published z: absorption locks, z within errors of the SDSS pipeline
    # redshift (HDU 2, column Z)
    rows = realdata[realdata["kind"] == "galaxy_absorption"]
    assert len(rows) == 3
    offsets = []  # km/s
    for row in rows:
        m = measure_spectrum(_real(row), z=float(row["z_published"]), lines="galaxy-absorption")
        assert m.line_set == "galaxy-absorption" and m.medium == "vacuum"
        assert len(m.lines) >= 10, row["file"]
        assert len(m.locks) >= 2, row["file"]
        assert all(lock.fit.flux.value < 0 for lock in m.locks), row["file"]
        dz = abs(m.z - float(row["z_published"]))
        assert dz < 3 * np.hypot(m.z_err, float(row["z_published_err"])), row["file"]
        # the locks' weighted mean, before the joint shift, agrees too
        dz_locks = abs(m.search["locks_z"] - float(row["z_published"]))
        assert dz_locks < 3 * np.hypot(m.search["locks_z_err"],
                                       float(row["z_published_err"])), row["file"]
        zp = float(row["z_published"])
        for r in m.lines:
            if r["detected"]:
                obs = r["fit"].center.to_value(u.AA)
                offsets.append(_C_KMS * (obs / (r["rest"].to_value(u.AA) * (1 + zp)) - 1))
    # each detected line against the SDSS pipeline redshift: no common offset of the set's rest
    # wavelengths (air positions in these vacuum spectra would read about -85 km/s)
    assert len(offsets) >= 10
    assert abs(np.median(offsets)) < 30.0


def test_quasar_broad_lines_measured_with_offsets(realdata):
    # broad lines from published vacuum rest wavelengths (Lyα, C IV and Mg II doublet means,
    # C III], Hβ, Hα: the SDSS spectroscopic pipeline line list; [O III] 5007 narrow)
    from astropy.table import QTable

    table = QTable({
        "label": ["Lyα", "C IV 1549", "C III] 1909", "Mg II 2800", "Hβ", "[O III] 5007", "Hα"],
        "rest": [1215.67, 1549.48, 1908.73, 2799.94, 4862.68, 5008.24, 6564.61] * u.AA,
        "kind": ["broad", "broad", "broad", "broad", "broad", "emission", "broad"]})
    rows = realdata[realdata["kind"] == "qso"]
    chosen = [r for r in rows if r["file"] in ("spec-3655-55240-0630.fits",
                                               "spec-3655-55240-0994.fits",
                                               "spec-3655-55240-0686.fits",
                                               "spec-3655-55240-0472.fits",
                                               "spec-9367-57758-0446.fits")]
    assert len(chosen) == 5
    n_broad = n_measured = 0
    for row in chosen:
        m = measure_spectrum(_real(row), z=float(row["z_published"]), lines=table)
        d = m.to_dict()
        for line in d["lines"]:
            if line["class"] != "broad":
                continue
            n_broad += 1
            if line["detected"]:
                n_measured += 1
                assert line["offset_kms"] is not None and abs(line["offset_kms"]) < 5000
                assert 1000 < line["fwhm_kms"] < 20000
    assert n_measured >= 0.9 * n_broad and n_broad >= 15


# ------------------------------------------------------------------------------------------
# the pipeline's small parts: find, group, class, joint shift


def test_line_class_and_grouping():
    from zline.physics.linefind import group_lines, line_class

    assert line_class("absorption") == "absorption" and line_class("broad") == "broad"
    assert line_class("emission", "Hβ", "quasar") == "broad"
    assert line_class("emission", "[O III] 5007", "quasar") == "emission"
    assert group_lines([10.0, 11.0, 20.0, 20.5], [0.6, 0.6, 0.3, 0.3]) == [[0, 1], [2, 3]]
    assert group_lines([10.0, 11.0], [0.4, 0.4]) == [[0], [1]]


def test_find_shift_places_the_set_not_a_spike():
    from astropy.nddata import StdDevUncertainty
    from specutils import Spectrum

    from zline.physics.linefind import find_shift

    x = np.linspace(6400.0, 6800.0, 2001)  # 0.2 A pixels
    rest = np.array([6549.86, 6564.61, 6585.27])
    true = rest * (1 + 250 / _C_KMS)  # the set 250 km/s above the trial
    rng = np.random.default_rng(3)
    y = 1 + sum(f * np.exp(-0.5 * ((x - m) / 1.0) ** 2) for f, m in zip((2, 6, 5), true))
    y[np.argmin(np.abs(x - 6570.0))] += 8.0  # a one-pixel spike near Halpha's trial position
    y += rng.normal(0, 0.1, x.size)
    spec = Spectrum(flux=y * u.Jy, spectral_axis=x * u.AA,
                    uncertainty=StdDevUncertainty(np.full(x.size, 0.1)))
    found = find_shift(spec, rest * u.AA, ["emission"] * 3)
    assert found.found and abs(found.velocity.to_value(u.km / u.s) - 250) < 10
    narrow = find_shift(spec, rest * u.AA, ["emission"] * 3, window=50 * u.km / u.s)
    assert abs(narrow.velocity.to_value(u.km / u.s)) <= 50


def test_joint_shift_error_interval():
    from zline.physics.jointshift import JointWindow, joint_shift

    # one line, known width, white noise: the Delta chi2 = 1 half widths match the analytic
    # centroid error and the joint S/N the analytic flux S/N (common practice)
    rng = np.random.default_rng(8)
    x = np.linspace(6540.0, 6590.0, 501)
    sig, flux, noise = 1.5, 40.0, 0.2
    y = 3 + flux * np.exp(-0.5 * ((x - 6565.0) / sig) ** 2) / (sig * np.sqrt(2 * np.pi))
    y += rng.normal(0, noise, x.size)
    win = JointWindow(x, y, np.full(x.size, noise), 1, np.array([6565.0]), np.array([sig]),
                      np.array([True]), np.array([1.0]))
    res = joint_shift([win], 0.0, 300.0, min_scale=0.5, max_scale=2.0)
    # Fisher: 1 / sigma_mu^2 = (flux / noise)^2 / dx * integral g'^2 = ... / (4 sqrt(pi) sigma^3)
    expect = noise * np.sqrt(4 * np.sqrt(np.pi) * sig**3 * 0.1) / flux / 6565.0 * _C_KMS
    assert res.err_low == pytest.approx(expect, rel=0.15)
    assert res.err_high == pytest.approx(expect, rel=0.15)
    assert abs(res.v) < 4 * expect and 0.85 < res.width_scale < 1.2
    # flux S/N of a Gaussian on white noise: F / (noise sqrt(2 sqrt(pi) sigma dx))
    assert res.snr == pytest.approx(flux / (noise * np.sqrt(2 * np.sqrt(np.pi) * sig * 0.1)),
                                    rel=0.1)


def test_joint_shift_holds_the_sign_and_searches_the_span():
    from zline.physics.jointshift import JointWindow, joint_shift

    # an absorption line 200 km/s from the start and an emission bump of the same size at
    # -150 km/s: with the flux held to the absorption sign the search over the span finds the
    # dip, not the bump
    x = np.linspace(6520.0, 6610.0, 901)
    mu = 6565.0 * (1 + 200 / _C_KMS)
    bump = 6565.0 * (1 - 150 / _C_KMS)
    g = lambda m: np.exp(-0.5 * ((x - m) / 1.5) ** 2)  # noqa: E731
    y = 5.0 - 1.0 * g(mu) + 1.0 * g(bump) + np.random.default_rng(4).normal(0, 0.05, x.size)
    win = JointWindow(x, y, np.full(x.size, 0.05), 1, np.array([6565.0]), np.array([1.5]),
                      np.array([True]), np.array([-1.0]))
    res = joint_shift([win], 0.0, 400.0, min_scale=0.8, max_scale=1.25)
    assert abs(res.v - 200.0) < 3 * res.err_high and res.snr > 20
    narrow = joint_shift([win], 0.0, 100.0, min_scale=0.8, max_scale=1.25)
    assert abs(narrow.v) <= 100.0 + 1e-6
