"""Tests for zline.physics.kinematics (redshift and velocity shifts)."""

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
from astropy.tests.helper import assert_quantity_allclose
from hypothesis import given, settings
from hypothesis import strategies as st

from zline.physics.kinematics import (
    CONVENTION_DEFINITIONS,
    CONVENTIONS,
    observed_position,
    redshift_from,
    redshift_to_velocity,
    shift_factor,
    velocity_from,
    velocity_to_redshift,
)

KMS = u.km / u.s
C_KMS = const.c.to_value(KMS)
ASTROPY_DOPPLER = {
    "optical": u.doppler_optical,
    "radio": u.doppler_radio,
    "relativistic": u.doppler_relativistic,
}
VELOCITIES = np.array([-0.9, -0.3, -1e-3, -1e-6, 0.0, 1e-6, 1e-4, 1e-2, 0.2, 0.6, 0.95]) * C_KMS * KMS


def test_conventions_contract():
    assert CONVENTIONS == ("optical", "radio", "relativistic")
    assert set(CONVENTION_DEFINITIONS) == set(CONVENTIONS)


@pytest.mark.parametrize("convention", CONVENTIONS)
def test_wavelength_matches_astropy_equivalency(convention):
    rest = 6564.61 * u.AA
    ours = observed_position(rest, velocity=VELOCITIES, convention=convention)
    ref = VELOCITIES.to(u.AA, equivalencies=ASTROPY_DOPPLER[convention](rest))
    assert_quantity_allclose(ours, ref, rtol=1e-12)
    back = velocity_from(ours, rest, convention)
    ref_v = ours.to(KMS, equivalencies=ASTROPY_DOPPLER[convention](rest))
    assert_quantity_allclose(back, ref_v, rtol=1e-12, atol=1e-9 * KMS)
    assert back.unit == KMS


@pytest.mark.parametrize("convention", CONVENTIONS)
def test_frequency_matches_astropy_equivalency(convention):
    rest = 1.420405751768 * u.GHz  # H I 21 cm (common practice value)
    ours = observed_position(rest, velocity=VELOCITIES, convention=convention)
    assert ours.unit == u.GHz
    ref = VELOCITIES.to(u.GHz, equivalencies=ASTROPY_DOPPLER[convention](rest))
    assert_quantity_allclose(ours, ref, rtol=1e-12)
    back = velocity_from(ours, rest, convention)
    ref_v = ours.to(KMS, equivalencies=ASTROPY_DOPPLER[convention](rest))
    assert_quantity_allclose(back, ref_v, rtol=1e-12, atol=1e-9 * KMS)


def test_known_velocities_of_one_line():
    # api-facts.md section 2.1 (astropy 8 run): 6600 A, rest 6564.61 A
    expected = {"optical": 1616.190, "radio": 1607.523, "relativistic": 1611.833}
    for convention, v in expected.items():
        got = velocity_from(6600 * u.AA, 6564.61 * u.AA, convention)
        assert_quantity_allclose(got, v * KMS, atol=0.001 * KMS)


def test_radio_definition_frequency_linear():
    # radio convention: nu_obs = nu_rest (1 - v/c) exactly
    v = 3000.0 * KMS
    nu = observed_position(5.0 * u.GHz, velocity=v, convention="radio")
    assert_quantity_allclose(nu, 5.0 * u.GHz * (1 - 3000.0 / C_KMS), rtol=1e-14)


@pytest.mark.parametrize("unit", [u.keV, u.eV, u.cm**-1, u.um**-1, u.THz, u.nm, u.um])
def test_any_spectral_unit(unit):
    rest_aa = 12.1321 * u.AA  # Ne X Ly-alpha1 vacuum (check-values.md, as quoted)
    rest = rest_aa.to(unit, equivalencies=u.spectral())
    z, v = 0.05, 600 * KMS
    obs = observed_position(rest, z=z, velocity=v, convention="relativistic")
    assert obs.unit == unit
    expected_aa = rest_aa * (1 + z) * np.sqrt((1 + 600 / C_KMS) / (1 - 600 / C_KMS))
    assert_quantity_allclose(obs.to(u.AA, equivalencies=u.spectral()), expected_aa, rtol=1e-12)
    assert redshift_from(obs, rest) == pytest.approx(expected_aa / rest_aa - 1, rel=1e-10)
    # mixed units between observed and rest
    assert redshift_from(obs, rest_aa) == pytest.approx(expected_aa / rest_aa - 1, rel=1e-10)
    assert_quantity_allclose(velocity_from(obs, rest_aa, "relativistic", z=z), v, rtol=1e-8)


def test_vectorised_broadcasting():
    rest = np.array([4862.68, 6564.61]) * u.AA
    z = np.array([[0.0], [0.1], [1.0]])
    obs = observed_position(rest, z=z, velocity=[100.0, -50.0] * KMS)
    assert obs.shape == (3, 2)
    assert_quantity_allclose(obs[2], rest * 2 * (1 + np.array([100.0, -50.0]) / C_KMS), rtol=1e-14)
    f = shift_factor(z, [100.0, -50.0] * KMS, "radio")
    assert f.shape == (3, 2)
    assert isinstance(shift_factor(0.3), float)
    assert shift_factor(0.3) == pytest.approx(1.3, rel=1e-15)


@settings(max_examples=150, deadline=None)
@given(z1=st.floats(-0.5, 8.0), beta=st.floats(-0.8, 0.8),
       convention=st.sampled_from(CONVENTIONS))
def test_z_composition(z1, beta, convention):
    rest = 1215.6701 * u.AA  # Ly-alpha vacuum, Morton 2003 (as quoted)
    v = beta * C_KMS * KMS
    obs = observed_position(rest, z=z1, velocity=v, convention=convention)
    z_total = redshift_from(obs, rest)
    # composed total redshift (1 + z1)(1 + z_v)
    assert 1 + z_total == pytest.approx((1 + z1) * (1 + velocity_to_redshift(v, convention)),
                                        rel=1e-12)
    # removing z1 gives back the velocity
    assert_quantity_allclose(velocity_from(obs, rest, convention, z=z1), v, rtol=1e-9,
                             atol=1e-6 * KMS)
    # velocity of the total shift alone = the single velocity with the same factor
    assert_quantity_allclose(velocity_from(obs, rest, convention),
                             redshift_to_velocity(z_total, convention), rtol=1e-12,
                             atol=1e-6 * KMS)


@settings(max_examples=100, deadline=None)
@given(z=st.floats(-0.9, 20.0), convention=st.sampled_from(CONVENTIONS))
def test_redshift_velocity_round_trip(z, convention):
    v = redshift_to_velocity(z, convention)
    # relativistic: always below c; radio: v/c = z/(1+z), below c only for z > -1/2
    if convention == "relativistic" or (convention == "radio" and z > -0.5):
        assert abs(v) < const.c
    if abs(v.to_value(KMS)) < C_KMS:
        assert velocity_to_redshift(v, convention) == pytest.approx(z, rel=1e-9, abs=1e-12)


@pytest.mark.parametrize("convention", CONVENTIONS)
def test_redshift_to_velocity_matches_astropy(convention):
    z = np.array([0.0, 1e-4, 0.01, 0.5])
    rest = 5000 * u.AA
    ref = (rest * (1 + z)).to(KMS, equivalencies=ASTROPY_DOPPLER[convention](rest))
    assert_quantity_allclose(redshift_to_velocity(z, convention), ref, rtol=1e-12, atol=1e-9 * KMS)
    # the relativistic case is also astropy's doppler_redshift (z=0.1 -> 28487.07 km/s, api-facts)
    if convention == "relativistic":
        assert_quantity_allclose(redshift_to_velocity(0.1, convention), 28487.07 * KMS,
                                 atol=0.01 * KMS)


def test_errors():
    with pytest.raises(ValueError, match="Unknown velocity convention 'Optical' for argument "
                                         "'convention'; expected one of 'optical', 'radio', "
                                         "'relativistic'"):
        shift_factor(0.1, convention="Optical")
    with pytest.raises(ValueError, match="argument 'convention'"):
        velocity_from(5000 * u.AA, 4000 * u.AA, "doppler")
    with pytest.raises(ValueError, match=r"Argument 'velocity' must satisfy \|v\| < c"):
        observed_position(5000 * u.AA, velocity=3e5 * KMS)
    with pytest.raises(ValueError, match=r"Argument 'velocity' must satisfy \|v\| < c.*got "
                                         r"-400000.0 km / s"):
        shift_factor(velocity=[1.0, -4e5] * KMS)
    with pytest.raises(ValueError, match="Argument 'z' must be a redshift > -1; got -1.0"):
        observed_position(5000 * u.AA, z=-1.0)
    with pytest.raises(ValueError, match="Argument 'z' must be a redshift > -1; got nan"):
        shift_factor(z=np.nan)
    with pytest.raises(TypeError, match="Argument 'velocity' must be an astropy Quantity"):
        shift_factor(velocity=100.0)
    with pytest.raises(u.UnitTypeError, match="Argument 'velocity' must have a speed unit.*'m'"):
        shift_factor(velocity=100.0 * u.m)
    with pytest.raises(TypeError, match="Argument 'rest' must be an astropy Quantity"):
        observed_position(6563.0, z=0.1)
    with pytest.raises(u.UnitTypeError, match="Argument 'rest' must have a spectral unit.*'s'"):
        observed_position(3 * u.s, z=0.1)
    with pytest.raises(u.UnitTypeError, match="Argument 'observed' must have a spectral unit"):
        redshift_from(1 * u.kg, 5000 * u.AA)
    with pytest.raises(ValueError, match="must be positive spectral positions"):
        redshift_from(-5000 * u.AA, 5000 * u.AA)
    with pytest.raises(u.UnitTypeError, match="Argument 'z' must be a dimensionless redshift"):
        shift_factor(z=0.1 * u.m)
