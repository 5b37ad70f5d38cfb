"""Energy levels of one-electron systems as term values (binding wavenumbers).

``term_value(species, n, l, j, model)`` returns the binding energy of a level
as a positive wavenumber in cm^-1; the vacuum wavenumber of a transition is
``term_value(lower) - term_value(upper)``. Models, from crude to complete:

``"bohr"``
    R_inf Z^2 / n^2: infinite nuclear mass, no fine structure.
``"reduced-mass"``
    R_M Z^2 / n^2 with R_M = R_inf mu / m_e.
``"dirac"``
    Dirac energy of an electron with the reduced mass plus the leading
    relativistic recoil terms (the expansion used in the CODATA adjustments:
    Mohr, Taylor & Newell 2008, Rev. Mod. Phys. 80, 633, eq. 27; Barker & Glover
    1955 term for l > 0).
``"qed"`` (default)
    Dirac plus radiative and nuclear corrections: one-loop self energy (Z alpha
    expansion with Bethe logarithms; its remainder is interpolated in Z through the
    tabulated non-perturbative scaled self energy of 1s, 2p1/2, 2p3/2, 3d3/2, 3d5/2
    at Z = 10, 20, 30, and other s, p, d states follow their family),
    vacuum polarization (Uehling and Wichmann-Kroll leading terms), two-loop
    B40/B50 terms, Salpeter recoil and the finite nuclear size. Formulas and
    coefficients follow Mohr, Taylor & Newell 2008 (RMP 80, 633, sec. IV.A.1)
    and Mohr, Newell & Taylor 2016 (RMP 88, 035009, sec. IV.A).

Quantum numbers broadcast with numpy; ``term_value_invcm`` is the float fast
path. Rydberg carriers (``"He I"``, ``"C I"``) use charge 1 and the ion-core
mass; below n = 20 their levels are not hydrogenic (quantum defects), and a
`HydrogenicApproximationWarning` says so.
"""
import functools
import math
import warnings
from dataclasses import dataclass

import astropy.units as u
import numpy as np
from scipy.special import digamma as _digamma

from zline.physics import constants as _k
from zline.physics.species import Species, get_species

__all__ = [
    "MODELS",
    "HydrogenicApproximationWarning",
    "term_value",
    "term_value_invcm",
    "ionization_energy",
    "BohrOrbit",
    "bohr_orbit",
    "RYDBERG_MIN_N",
]

#: Level models, from the simplest to the most complete (default last).
MODELS = ("bohr", "reduced-mass", "dirac", "qed")

#: Below this n the levels of a Rydberg carrier are not hydrogenic.
RYDBERG_MIN_N = 20


class HydrogenicApproximationWarning(UserWarning):
    """A hydrogenic formula is applied where it is only approximate (Rydberg carriers at low n)."""


_ALPHA = _k.alpha
_MEC2 = 2.0 * _k.R_inf_invcm / _ALPHA**2  # m_e c^2 in cm^-1, consistent with R_inf
_LAMBDA_C_FM = _k.lambda_c_bar * 1e15  # reduced Compton wavelength, fm
_ZETA3 = 1.2020569031595942

# Bethe logarithms ln k0(n, l), n = 1..8, l = 0..7 (Drake & Swainson 1990, Phys. Rev. A 41, 1243,
# as tabulated in the CODATA reviews; from memory). Row n, column l.
_BETHE = np.full((9, 8), np.nan)
_BETHE[1, :1] = [2.984128556]
_BETHE[2, :2] = [2.811769893, -0.030016709]
_BETHE[3, :3] = [2.767663612, -0.038190229, -0.005232148]
_BETHE[4, :4] = [2.749811840, -0.041954895, -0.006740939, -0.001733661]
_BETHE[5, :5] = [2.740823727, -0.044034855, -0.007600544, -0.002202122, -0.000772186]
_BETHE[6, :6] = [2.735664206, -0.045312460, -0.008147204, -0.002502084, -0.000962837, -0.000407243]
_BETHE[7, :7] = [2.732429129, -0.046155046, -0.008519307, -0.002709329, -0.001094580, -0.000499174,
                 -0.000240908]
_BETHE[8, :8] = [2.730267260, -0.046740486, -0.008785238, -0.002859541, -0.001190637, -0.000566694,
                 -0.000290429, -0.000153989]

# Low-Z self-energy remainder G_SE(alpha) (Jentschura, Mohr & Soff 1999/2001, as quoted in CODATA
# 2006, Table VIII; from memory). States not listed use the n = 2 value of their (l, j) family;
# these terms are (Z alpha)^2 smaller than the leading ones.
_G_SE_LOW = {(1, 0, 0.5): -30.290240, (2, 0, 0.5): -31.185150, (2, 1, 0.5): -0.97350,
             (2, 1, 1.5): -0.48650, (3, 0, 0.5): -31.04770, (4, 0, 0.5): -30.9616,
             (3, 2, 1.5): 0.0, (3, 2, 2.5): 0.0}  # 3d: below 0.03, taken as 0 at Z = 1

# Scaled one-loop self energy F(Z alpha) of 1s, 2p1/2, 2p3/2, 3d3/2, 3d5/2 for Z = 10, 20, 30
# (non-perturbative values of Mohr 1992, Phys. Rev. A 46, 4421 and Mohr & Kim 1992, Phys. Rev. A 45,
# 2727, as quoted in a public code).
_F_HIGH_Z = np.array([10.0, 20.0, 30.0])
_F_HIGH = {(1, 0, 0.5): np.array([4.6542, 3.2462, 2.5518]),
           (2, 1, 0.5): np.array([-0.1148, -0.0925, -0.0643]),
           (2, 1, 1.5): np.array([0.1304, 0.1438, 0.1606]),
           (3, 2, 1.5): np.array([-0.0427, -0.0420, -0.0410]),
           (3, 2, 2.5): np.array([0.0408, 0.0417, 0.0432])}

# Uehling remainder V60-type constants for the lowest states (CODATA 2006 eq. 44 ff.; from memory).
_G_VP_LOW = {(1, 0, 0.5): -0.618724, (2, 0, 0.5): -0.808872, (2, 1, 0.5): -0.064286,
             (2, 1, 1.5): -0.014286}


def _species(species):
    if isinstance(species, Species):
        return species
    if isinstance(species, str):
        return get_species(species)
    raise TypeError(f"'species' must be a species name such as 'H I' or a Species, got {type(species).__name__}")


def _as_number_array(value, name):
    if isinstance(value, u.Quantity):
        raise TypeError(f"'{name}' is a quantum number and must be a plain number or array, got a Quantity "
                        f"with unit {value.unit}")
    try:
        arr = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise TypeError(f"'{name}' must be a number or an array of numbers, got {value!r}") from None
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"'{name}' must be finite, got {value!r}")
    return arr


def _quantum_numbers(n, l, j, model):
    """Validate and broadcast n, l, j; return float arrays (l, j may be None for the Bohr models)."""
    n = _as_number_array(n, "n")
    if np.any(n != np.round(n)) or np.any(n < 1):
        raise ValueError(f"'n' must be an integer >= 1, got {_show(n)}")
    need_lj = model in ("dirac", "qed")
    if l is None or j is None:
        if need_lj:
            raise ValueError(f"model {model!r} resolves fine structure: give both 'l' and 'j' "
                             f"(got l={l!r}, j={j!r}); only 'bohr' and 'reduced-mass' accept l=None, j=None")
        if l is None and j is None:
            return n, None, None
    if l is not None:
        l = _as_number_array(l, "l")
        if np.any(l != np.round(l)) or np.any(l < 0):
            raise ValueError(f"'l' must be an integer >= 0, got {_show(l)}")
    if j is not None:
        j = _as_number_array(j, "j")
        if np.any(2 * j != np.round(2 * j)) or np.any(np.round(2 * j) % 2 != 1) or np.any(j <= 0):
            raise ValueError(f"'j' must be a positive half-odd integer (0.5, 1.5, ...), got {_show(j)}")
    if l is not None:
        n, l = np.broadcast_arrays(n, l) if j is None else np.broadcast_arrays(n, l, j)[:2]
        if np.any(l >= n):
            raise ValueError(f"'l' must satisfy 0 <= l < n, got l={_show(l)} for n={_show(n)}")
    if l is not None and j is not None:
        n, l, j = np.broadcast_arrays(n, l, j)
        if np.any(np.abs(np.abs(j - l) - 0.5) > 1e-12):
            raise ValueError(f"'j' must be l + 1/2 or l - 1/2 (and > 0), got j={_show(j)} for l={_show(l)}")
    return n, l, j


def _show(arr):
    arr = np.asarray(arr)
    return repr(arr.item()) if arr.ndim == 0 else np.array2string(arr, threshold=8)


def _warn_rydberg(sp, n):
    if sp.rydberg and np.any(n < RYDBERG_MIN_N):
        warnings.warn(
            f"{sp.name} is treated as a hydrogenic Rydberg atom (electron around a singly charged core); "
            f"for n < {RYDBERG_MIN_N} (got n min = {int(np.min(n))}) core penetration and polarization "
            f"(quantum defects) move its levels far more than the model accuracy, so these values are "
            f"approximate; use n >= {RYDBERG_MIN_N} or tabulated levels",
            HydrogenicApproximationWarning,
            stacklevel=3,
        )


def _harmonic(n):
    """Harmonic number 1 + 1/2 + ... + 1/n, vectorised (digamma(n + 1) + Euler's gamma)."""
    return _digamma(n + 1.0) + np.euler_gamma


def _bethe_log(n, l):
    """ln k0(n, l): table for n <= 8; the n = 8 row beyond, with an l^-4 tail for l > 7 (tiny)."""
    ni = np.minimum(n, 8).astype(int)
    li = np.minimum(l, 7).astype(int)
    li = np.minimum(li, ni - 1)
    val = _BETHE[ni, li]
    return np.where(l > 7, _BETHE[8, 7] * (7.0 / np.maximum(l, 1.0)) ** 4, val)


def _lookup(table, n, l, j, default):
    shape = np.broadcast(n, l, j, default).shape
    out = np.array(np.broadcast_to(default, shape), dtype=float)
    if not table:
        return out
    # tabulated states are all low n: compare only the few candidates
    cand = np.broadcast_to(n, shape) <= max(key[0] for key in table)
    if not np.any(cand):
        return out
    nc, lc, jc = (np.broadcast_to(x, shape)[cand] for x in (n, l, j))
    sub = out[cand]
    for (nn, ll, jj), value in table.items():
        sub = np.where((nc == nn) & (lc == ll) & (jc == jj), value, sub)
    out[cand] = sub
    return out


def _where_only(mask, func, *arrays):
    """``func(*arrays)`` where ``mask``, 0.0 elsewhere, evaluating ``func`` on the masked elements only."""
    shape = np.broadcast(mask, *arrays).shape
    out = np.zeros(shape)
    mask = np.broadcast_to(mask, shape)
    if np.any(mask):
        out[mask] = func(*(np.broadcast_to(np.asarray(a, dtype=float), shape)[mask] for a in arrays))
    return out


def _dirac_invcm(Z, mu, n, l, j):
    """Dirac energy with reduced mass and leading recoil (CODATA 2006 eq. 27), as binding wavenumber."""
    x = (Z * _ALPHA) ** 2
    k = j + 0.5
    delta = x / (k + np.sqrt(k * k - x))
    y = x / (n - delta) ** 2
    s = np.sqrt(1.0 + y)
    fm1 = -y / (s * (1.0 + s))  # f(n, j) - 1 without cancellation
    me_over_M = 1.0 - mu  # m_e / (m_N + m_e)
    me_over_mN = (1.0 - mu) / mu
    kappa = np.where(j > l, -(l + 1.0), l)
    barker_glover = np.where(
        l > 0, x * x * mu**3 * me_over_mN**2 / (2.0 * n**3 * np.where(l > 0, kappa * (2.0 * l + 1.0), 1.0)), 0.0
    )
    energy = fm1 * mu - fm1**2 * mu**2 * me_over_M / 2.0 + barker_glover
    return -energy * _MEC2


def _se_coefficients(n, l, j, bethe=None):
    """One-loop self-energy coefficients A41, A40 (non-magnetic), A40 magnetic, A50, A61, A62.

    Mohr, Taylor & Newell 2008 (RMP 80, 633) eqs. 32-37: A41 = 4/3 d_l0;
    A40 = -4/3 ln k0(n,l) + 10/9 d_l0 - 1/(2 kappa (2l+1)) (1 - d_l0);
    A50 = (139/32 - 2 ln 2) pi d_l0; A62 = -d_l0; A61 as eq. 36.
    """
    s = l == 0
    p = l == 1
    kappa = np.where(j > l, -(l + 1.0), l)
    A41 = np.where(s, 4.0 / 3.0, 0.0)
    A40 = -4.0 / 3.0 * (_bethe_log(n, l) if bethe is None else bethe) + np.where(s, 10.0 / 9.0, 0.0)
    A40_mag = np.where(s, 0.0, -1.0 / (2.0 * np.where(s, 1.0, kappa * (2.0 * l + 1.0))))
    A50 = np.where(s, (139.0 / 32.0 - 2.0 * math.log(2.0)) * math.pi, 0.0)
    A62 = np.where(s, -1.0, 0.0)
    A61 = _where_only(
        s,
        lambda n: 4.0 * _harmonic(n) + 28.0 / 3.0 * math.log(2.0) - 4.0 * np.log(n) - 601.0 / 180.0
        - 77.0 / (45.0 * n**2),
        n,
    ) + _where_only(p, lambda n, j: (1.0 - 1.0 / n**2) * (2.0 / 15.0 + np.where(j == 0.5, 1.0 / 3.0, 0.0)), n, j)
    lm2 = 2.0 * np.maximum(l, 1.0)  # integer-valued: lm2 - 1 etc. equal 2 * lm - 1 etc. exactly
    n2 = n * n
    A61 = A61 + np.where(
        l >= 1,
        (96.0 * n2 - 32.0 * l * (l + 1.0))
        / (3.0 * n2 * (lm2 - 1.0) * lm2 * (lm2 + 1.0) * (lm2 + 2.0) * (lm2 + 3.0)),
        0.0,
    )
    return A41, A40, A40_mag, A50, A61, A62


def _expansion_without_remainder(n, l, j, za):
    """F(Z alpha) of the Z alpha expansion without the remainder G (infinite nuclear mass)."""
    A41, A40, A40_mag, A50, A61, A62 = _se_coefficients(n, l, j)
    L = math.log(za**-2)
    return A41 * L + A40 + A40_mag + A50 * za + A62 * za * za * L * L + A61 * za * za * L


def _remainder_G(Z, n, l, j):
    """Self-energy remainder G_SE(Z alpha).

    Low-Z values (table above) and, for the tabulated states 1s, 2p1/2, 2p3/2, the difference between
    the non-perturbative F at Z = 10, 20, 30 and the expansion, divided by (Z alpha)^2 and interpolated
    linearly in Z from the Z = 1 value. Untabulated states of the same (l, j) family (2s, 3s, ... after
    1s; np1/2, np3/2 after 2p; nd after 3d) take the same change of G with Z from their own low-Z
    value, an approximation justified by their nearly equal low-Z remainders; f and higher states keep
    G = 0 (their F is below 0.02).
    """
    s = l == 0
    p = l == 1
    default = np.where(s, -30.9, np.where(p & (j == 0.5), -1.15, np.where(p, -0.62, 0.0)))
    G = _lookup(_G_SE_LOW, n, l, j, default)
    if Z <= 1:
        return G
    for key in _F_HIGH:
        family = (l == key[1]) & (j == key[2])
        if not np.any(family):
            continue
        g_here = float(np.interp(Z, _G_KNOT_Z, _g_knots(key)))
        G = np.where(family & (n == key[0]), g_here, np.where(family, G + (g_here - _G_SE_LOW[key]), G))
    return G


_G_KNOT_Z = np.concatenate(([1.0], _F_HIGH_Z))


@functools.lru_cache(maxsize=None)
def _g_knots(key):
    """G_SE of a tabulated state at Z = 1, 10, 20, 30 (from the low-Z value and the tabulated F)."""
    kn, kl, kj = (np.array(float(v)) for v in key)
    knots = [float((_F_HIGH[key][i] - _expansion_without_remainder(kn, kl, kj, zk * _ALPHA)) / (zk * _ALPHA) ** 2)
             for i, zk in enumerate(_F_HIGH_Z)]
    return np.array([_G_SE_LOW[key], *knots])


def _self_energy_F(Z, n, l, j, mu, bethe=None):
    """Scaled one-loop self energy F(Z alpha) including the CODATA mass factors.

    All terms carry (m_r/m_e)^3 and logs take (m_e/m_r)(Z alpha)^-2, except the magnetic-moment part
    of A40, which carries (m_r/m_e)^2 (Mohr, Taylor & Newell 2008, eq. 38).
    """
    za = Z * _ALPHA
    L = math.log(za**-2)
    A41, A40, A40_mag, A50, A61, A62 = _se_coefficients(n, l, j, bethe)
    G = _remainder_G(Z, n, l, j)
    F3 = A41 * (L - math.log(mu)) + A40 + A50 * za + A62 * za * za * L * L + A61 * za * za * L + G * za * za
    return F3 * mu**3 + A40_mag * mu**2


def _qed_correction(sp, n, l, j):
    """Sum of radiative, recoil and nuclear-size shifts, in units of m_e c^2 (positive = less bound)."""
    Z = float(sp.charge)
    mu = sp.mass_ratio
    za = Z * _ALPHA
    L = math.log(za**-2)
    s = l == 0
    kappa = np.where(j > l, -(l + 1.0), l)
    scale = (_ALPHA / math.pi) * za**4 / n**3
    # one-loop self energy
    bethe = _bethe_log(n, l)
    e_se = scale * _self_energy_F(Z, n, l, j, mu, bethe)
    # vacuum polarization: Uehling C40, C50, C61 and remainder, Wichmann-Kroll leading term
    g_vp = _lookup(_G_VP_LOW, n, l, j, np.where(s, -0.85, 0.0))
    wk = np.where(s, 19.0 / 45.0 - math.pi**2 / 27.0, 0.0)
    H = np.where(s, -4.0 / 15.0 + 5.0 * math.pi / 48.0 * za - 2.0 / 15.0 * za * za * L, 0.0) + (g_vp + wk) * za * za
    e_vp = scale * H * mu**3
    # two-loop: B40 (s and magnetic part) and B50
    b40_s = 1.5 * math.pi**2 * math.log(2.0) - 10.0 * math.pi**2 / 27.0 - 2179.0 / 648.0 - 2.25 * _ZETA3
    b40_mag = (math.pi**2 * math.log(2.0) / 2.0 - math.pi**2 / 12.0 - 197.0 / 144.0 - 0.75 * _ZETA3)
    B = np.where(s, b40_s - 21.55447 * za, 0.0) * mu**3 + np.where(
        s, 0.0, b40_mag / np.where(s, 1.0, kappa * (2.0 * l + 1.0))) * mu**2
    e_2l = (_ALPHA / math.pi) * scale * B
    # Salpeter recoil (CODATA 2006 eq. 29)
    r = (1.0 - mu) / mu  # m_e / m_N
    lm = np.maximum(l, 1.0)
    a_s = _where_only(s, lambda n: -2.0 * (np.log(2.0 / n) + _harmonic(n) + 1.0 - 1.0 / (2.0 * n)), n)
    a_n = np.where(s, a_s, 1.0 / (lm * (lm + 1) * (2 * lm + 1)))
    last = 2.0 / (1.0 - r * r) * (math.log(1.0 / mu) - (mu * r) ** 2 * math.log(1.0 / (mu * r)))
    bracket = (np.where(s, L / 3.0 - 1.0 / 9.0 - last, 0.0) - 8.0 / 3.0 * bethe - 7.0 / 3.0 * a_n)
    e_rec = mu**3 * r * za**5 / (math.pi * n**3) * bracket
    # finite nuclear size, s states (CODATA 2006 eq. 59, leading term)
    if sp.rydberg:
        e_ns = 0.0
    else:
        rn = sp.nuclear_radius.to_value(u.fm)
        e_ns = np.where(s, 2.0 / 3.0 * mu**3 * za**2 / n**3 * (za * rn / _LAMBDA_C_FM) ** 2, 0.0)
    return e_se + e_vp + e_2l + e_rec + e_ns


def term_value_invcm(species, n, l=None, j=None, model="qed"):
    """Binding wavenumber of a level in cm^-1 as plain floats (fast path of `term_value`).

    Same arguments as `term_value`; returns a float for scalar input, else an ndarray.
    """
    if model not in MODELS:
        raise ValueError(f"'model' must be one of {list(MODELS)}, got {model!r}")
    sp = _species(species)
    n, l, j = _quantum_numbers(n, l, j, model)
    _warn_rydberg(sp, n)
    Z = float(sp.charge)
    if model == "bohr":
        out = _k.R_inf_invcm * Z * Z / n**2
    elif model == "reduced-mass":
        out = _k.R_inf_invcm * sp.mass_ratio * Z * Z / n**2
    else:
        out = _dirac_invcm(Z, sp.mass_ratio, n, l, j)
        if model == "qed":
            out = out - _qed_correction(sp, n, l, j) * _MEC2
    out = np.asarray(out, dtype=float)
    return float(out) if out.ndim == 0 else out


def term_value(species, n, l=None, j=None, model="qed"):
    """Binding energy of a one-electron level as a positive wavenumber.

    Parameters
    ----------
    species : str or `~zline.physics.species.Species`
        E.g. ``"H I"``, ``"He II"``, ``"C VI"``, ``"Fe XXVI"``, ``"He I"`` (Rydberg carrier).
    n : int or array_like
        Principal quantum number, >= 1.
    l : int or array_like, optional
        Orbital angular momentum, 0 <= l < n. Required for ``"dirac"`` and ``"qed"``.
    j : float or array_like, optional
        Total angular momentum, l +- 1/2 and > 0. Required for ``"dirac"`` and ``"qed"``.
    model : {"bohr", "reduced-mass", "dirac", "qed"}
        Level model (see the module docstring). Default ``"qed"``.

    Returns
    -------
    `~astropy.units.Quantity` ['wavenumber']
        Term value in cm^-1, broadcast over n, l, j. A transition's vacuum
        wavenumber is ``term_value(lower) - term_value(upper)``.

    Warns
    -----
    HydrogenicApproximationWarning
        For a Rydberg carrier with any n < 20.

    Examples
    --------
    >>> from zline.physics.levels import term_value
    >>> term_value("H I", 1, 0, 0.5)  # doctest: +FLOAT_CMP
    <Quantity 109678.7717 1 / cm>
    """
    return u.Quantity(term_value_invcm(species, n, l, j, model), u.cm**-1)


def ionization_energy(species, model="qed"):
    """Ionization energy of the ground state 1s1/2 (or n = 1 for the Bohr models), as a wavenumber."""
    if model in ("bohr", "reduced-mass"):
        return term_value(species, 1, None, None, model)
    return term_value(species, 1, 0, 0.5, model)


@dataclass(frozen=True)
class BohrOrbit:
    """Reduced-mass Bohr-model orbit: radius, speed, period, orbital frequency, energy (negative)."""

    n: np.ndarray
    r: u.Quantity
    v: u.Quantity
    period: u.Quantity
    frequency: u.Quantity
    energy: u.Quantity


def bohr_orbit(species, n):
    """Bohr-model orbit of level ``n`` with the reduced mass.

    r_n = n^2 a0 (m_e / mu) / Z, v_n = Z alpha c / n (electron speed relative to
    the nucleus), period = 2 pi r_n / v_n, energy = -h c R_inf (mu / m_e) Z^2 / n^2.

    Parameters
    ----------
    species : str or Species
    n : int or array_like
        Principal quantum number(s), >= 1.

    Returns
    -------
    BohrOrbit
        ``r`` (m), ``v`` (km/s), ``period`` (s), ``frequency`` (Hz), ``energy`` (eV).
    """
    sp = _species(species)
    n, _, _ = _quantum_numbers(n, None, None, "bohr")
    _warn_rydberg(sp, n)
    Z = float(sp.charge)
    r = n**2 * _k.a0 / (sp.mass_ratio * Z)
    v = Z * _ALPHA * _k.c / n
    period = 2.0 * math.pi * r / v
    energy = -_k.R_inf_invcm * sp.mass_ratio * Z * Z / n**2 / _k.invcm_per_eV
    return BohrOrbit(
        n=n.astype(int),
        r=r * u.m,
        v=(v * u.m / u.s).to(u.km / u.s),
        period=period * u.s,
        frequency=(1.0 / period) * u.Hz,
        energy=energy * u.eV,
    )
