"""Benchmark: ~1e5 computed lines shifted to a trial z and v, against per-line astropy conversion.

Ours: `zline.physics.transitions.line_table` computes every multiplet (radio lines n_lower 7-1000,
delta n 1-10, plus the optical series n_lower 1-6) of ten species from the level energies and
radial integrals, with f, A, rest frequency and observed frequency at z and v.
The first zline row is a cold start (the per-species level-table cache is emptied first);
the second repeats the same calls with the level tables cached, as a notebook session does.
Baseline (named, same run): the same rest wavelengths converted one line at a time with astropy,
``(rest * u.AA).to(u.GHz, u.spectral())`` and the shift through ``u.doppler_optical``.
"""

import time
import warnings

import astropy.constants as const
import astropy.units as u
import numpy as np

from zline.physics import transitions
from zline.physics.transitions import line_table

SPECIES = ("H I", "D I", "He I", "C I", "He II", "C VI", "N VII", "O VIII", "Ne X", "Fe XXVI")
Z, V = 0.01, 150.0 * u.km / u.s


def _ours():
    tables = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # hydrogenic-approximation notices for He I / C I
        for sp in SPECIES:
            tables.append(line_table(sp, lower=(1, 1000), delta_n=(1, 10), unit=u.GHz, z=Z,
                                     velocity=V))
    return tables


def _baseline(rest_aa):
    c = const.c.to_value(u.km / u.s)
    v_eff = c * ((1 + Z) * (1 + V.to_value(u.km / u.s) / c) - 1.0) * u.km / u.s
    out = np.empty(rest_aa.size)
    for i, lam in enumerate(rest_aa):
        rest = (lam * u.AA).to(u.GHz, u.spectral())
        out[i] = v_eff.to(u.GHz, equivalencies=u.doppler_optical(rest)).value
    return out


def main():
    transitions._LEVEL_TABLES.clear()  # cold start: no level table computed yet
    t0 = time.perf_counter()
    tables = _ours()
    t_ours = time.perf_counter() - t0
    t0 = time.perf_counter()
    _ours()
    t_warm = time.perf_counter() - t0
    obs = np.concatenate([t["observed"].to_value(u.GHz) for t in tables])
    rest_aa = np.concatenate([t["rest"].to(u.AA, u.spectral()).value for t in tables])
    n = rest_aa.size
    n_base = min(n, 20000)  # per-line loop on a 20 000-line sample, scaled per line
    t0 = time.perf_counter()
    base = _baseline(rest_aa[:n_base])
    t_base = (time.perf_counter() - t0) * n / n_base
    worst = np.max(np.abs(base / obs[:n_base] - 1.0))
    print(f"{'method':58s} {'lines':>8s} {'time [s]':>10s}")
    print(f"{'zline line_table (levels + radial integrals + f, A + shift)':58s} {n:8d} "
          f"{t_ours:10.2f}")
    print(f"{'zline line_table again, level tables cached':58s} {n:8d} {t_warm:10.2f}")
    print(f"{'baseline: per-line astropy spectral + doppler_optical':58s} {n:8d} {t_base:10.2f}"
          f"   (timed on {n_base}, scaled)")
    print(f"ratio baseline / zline = {t_base / t_ours:.1f} cold, {t_base / t_warm:.1f} cached   "
          f"(max relative difference of observed positions {worst:.1e})")


if __name__ == "__main__":
    main()
