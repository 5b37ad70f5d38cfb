"""Benchmark: vacuum/air conversion and Doppler shifts against specutils / astropy in the same run."""

import timeit
import warnings

import astropy.units as u
import numpy as np
from specutils.utils.wcs_utils import air_to_vac, vac_to_air

from zline.physics.kinematics import observed_position
from zline.physics.media import (
    _air_to_vac_angstrom,
    _vac_to_air_angstrom,
    air_to_vacuum,
    vacuum_to_air,
)

__all__ = ["main"]


def _best(func, number):
    return min(timeit.repeat(func, number=number, repeat=5)) / number


def main():
    rows = []
    for n in (100, 100_000):
        wav = np.geomspace(2000.0, 20000.0, n)
        q = wav * u.AA
        number = 200 if n == 100 else 5
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            base = _best(lambda: vac_to_air(q, method="Morton2000"), number)
            rows.append((f"vac->air n={n}", "specutils vac_to_air", base,
                         _best(lambda: vacuum_to_air(q), number),
                         _best(lambda: _vac_to_air_angstrom(wav, "morton2000"), number)))
            base = _best(lambda: air_to_vac(q, method="Morton2000", scheme="iteration"), number)
            rows.append((f"air->vac n={n}", "specutils air_to_vac iteration", base,
                         _best(lambda: air_to_vacuum(q), number),
                         _best(lambda: _air_to_vac_angstrom(wav, "morton2000"), number)))
        v = 1500.0 * u.km / u.s
        rest = 6564.61 * u.AA
        restq = q
        base = _best(lambda: (v.to(u.AA, equivalencies=u.doppler_relativistic(rest))
                              * (restq / rest)), number)
        rows.append((f"shift n={n}", "astropy doppler_relativistic", base,
                     _best(lambda: observed_position(restq, z=0.1, velocity=v,
                                                     convention="relativistic"), number),
                     float("nan")))
    print(f"{'case':<18} {'baseline':<32} {'base us':>10} {'zline us':>10} {'ratio':>7} "
          f"{'fast us':>9} {'ratio':>7}")
    for case, name, base, ours, fast in rows:
        print(f"{case:<18} {name:<32} {base * 1e6:10.1f} {ours * 1e6:10.1f} {base / ours:7.2f} "
              f"{fast * 1e6:9.1f} {base / fast:7.2f}")
    print("ratio = baseline time / zline time (>1: zline faster)")


if __name__ == "__main__":
    main()
