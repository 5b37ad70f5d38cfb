"""Tests of the hydrogenic radial dipole integrals against independent references."""

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.special import gammaln, genlaguerre

from zline.physics.radial import multiplet_sums, radial_dipole, radial_ladder, same_shell_dipole


def _wavefunction(n, l, r):
    """Normalised hydrogen radial function R_nl(r) (Z = 1, r in a0) from its Laguerre form."""
    rho = 2.0 * r / n
    norm = np.sqrt((2.0 / n) ** 3 * np.exp(gammaln(n - l) - gammaln(n + l + 1)) / (2.0 * n))
    return norm * np.exp(-rho / 2.0) * rho**l * genlaguerre(n - l - 1, 2 * l + 1)(rho)


def _quad_integral(n, l, n2, l2):
    rmax = 8.0 * max(n, n2) ** 2
    val, _ = quad(lambda r: _wavefunction(n, l, r) * _wavefunction(n2, l2, r) * r**3,
                  0.0, rmax, limit=800, epsabs=0, epsrel=1e-12)
    return abs(val)


def test_2p_1s_exact():
    # closed form 128 sqrt(6) / 243 a0 (common practice; Bethe & Salpeter table, from memory)
    assert radial_dipole(2, 1, 1, 0) == pytest.approx(128 * np.sqrt(6) / 243, rel=1e-13)
    assert radial_dipole(1, 0, 2, 1) == pytest.approx(1.2902662, rel=1e-7)


@pytest.mark.parametrize("n, l, n2, l2", [
    (3, 2, 2, 1), (3, 1, 2, 0), (3, 0, 2, 1), (4, 3, 3, 2), (5, 1, 1, 0),
    (10, 3, 7, 4), (12, 5, 9, 4), (15, 0, 14, 1), (15, 14, 14, 13), (14, 3, 3, 2),
])
def test_against_quadrature_of_laguerre_functions(n, l, n2, l2):
    assert radial_dipole(n, l, n2, l2) == pytest.approx(_quad_integral(n, l, n2, l2), rel=1e-9)


def test_symmetric_and_vectorised():
    n = np.array([3, 10, 15])
    l = np.array([2, 3, 14])
    n2 = np.array([2, 7, 14])
    l2 = np.array([1, 4, 13])
    fwd = radial_dipole(n, l, n2, l2)
    np.testing.assert_allclose(fwd, radial_dipole(n2, l2, n, l), rtol=1e-14)
    for i in range(3):
        assert fwd[i] == pytest.approx(radial_dipole(n[i], l[i], n2[i], l2[i]), rel=1e-14)


def test_ladder_matches_single_calls():
    plus, minus = radial_ladder(9, 6)
    assert minus[0] == 0.0
    for lp in range(6):
        assert plus[lp] == pytest.approx(radial_dipole(9, lp + 1, 6, lp), rel=1e-13)
        if lp:
            assert minus[lp] == pytest.approx(radial_dipole(9, lp - 1, 6, lp), rel=1e-13)


def test_same_shell():
    # R(n l, n l-1) = 3/2 n sqrt(n^2 - l^2) (Bethe & Salpeter, from memory); check by quadrature
    assert same_shell_dipole(3, 2) == pytest.approx(_quad_integral(3, 2, 3, 1), rel=1e-9)
    assert radial_dipole(4, 1, 4, 0) == pytest.approx(_quad_integral(4, 1, 4, 0), rel=1e-9)


def test_multiplet_sum_is_sum_of_components():
    nu, nl = 8, 5
    want = sum(max(l, lp) * radial_dipole(nu, l, nl, lp) ** 2
               for lp in range(nl) for l in (lp - 1, lp + 1) if 0 <= l < nu)
    assert multiplet_sums([nu], [nl])[0] == pytest.approx(want, rel=1e-13)


def test_large_n_oscillator_strength_asymptote():
    # f(n -> n+1) -> 0.1908 n for large n (Menzel 1968, Nature 218, 756; from memory).
    # f = (2/3) dE[hartree] S / g_l with S = sum max(l,l') R^2 and g_l = n^2 (no spin).
    n = np.array([200, 500, 1000])
    S = multiplet_sums(n + 1, n)
    de = 0.5 * (1.0 / n**2 - 1.0 / (n + 1.0) ** 2)
    f = 2.0 / 3.0 * de * S / n**2
    assert np.all(np.isfinite(f))
    assert np.all(np.diff(f / n) < 0)  # approaches the limit from above
    assert f[-1] / n[-1] == pytest.approx(0.1908, rel=2e-3)


def test_large_n_all_finite_and_positive():
    plus, minus = radial_ladder(1000, 990)
    assert np.all(np.isfinite(plus)) and np.all(plus > 0)
    assert np.all(np.isfinite(minus[1:])) and np.all(minus[1:] > 0)


def test_bad_quantum_numbers():
    with pytest.raises(ValueError, match=r"\|l - l2\| == 1"):
        radial_dipole(3, 1, 2, 1)
    with pytest.raises(ValueError, match="0 <= l < n"):
        radial_dipole(3, 3, 2, 2)
    with pytest.raises(ValueError, match="n_lower < n_upper"):
        multiplet_sums([2], [2])


def test_multiplet_moments_match_the_plain_sums():
    """With term(n, l) = -n every component has sigma = n_up - n_lo, so the moments are Δn^k Σw."""
    from zline.physics.radial import multiplet_moments, multiplet_sums

    n_up = np.array([2, 3, 7, 40, 120, 300])
    n_lo = np.array([1, 2, 5, 39, 110, 291])
    nmax = int(n_up.max())
    n = np.repeat(np.arange(1, nmax + 1), np.arange(1, nmax + 1))
    m1, m3, m4 = multiplet_moments(n_up, n_lo, -n.astype(float))
    total = multiplet_sums(n_up, n_lo)
    dn = (n_up - n_lo).astype(float)
    np.testing.assert_allclose(m1, dn * total, rtol=1e-12)
    np.testing.assert_allclose(m3, dn**3 * total, rtol=1e-12)
    np.testing.assert_allclose(m4, dn**4 * total, rtol=1e-12)
