"""Benchmark of `measure_spectrum` with the whole galaxy-absorption set at a known trial z.

Speed (one process, best of REPEATS, the same spectrum for every call):

* ``measure_spectrum(spec, z, lines="galaxy-absorption")`` -- every line of the set (Balmer
  series, Ca II H and K, Ca I, Mg I b, Na I D, the Ca II triplet) found, fitted in groups and
  solved for z;
* baseline 1: ``measure_spectrum(spec, z, lines="galaxy-emission")`` on the same spectrum (the
  emission set, the usual use of the same pipeline);
* baseline 2: one ``fit_line`` of Na I D2 in a 60 A window (a single click's fit);
* the same galaxy-absorption call with the BLAS left at its default threads (one per core), as
  before `zline.physics._threads.one_blas_thread`: on a machine whose cores are busy the small
  least-squares solves wait for their threads, which this row shows.

Spectra: generated absorption-line galaxies (tests/synthetic_spectra.py, not zline): SDSS-like
log-linear vacuum grid (69 km/s per pixel, 3800-9200 A), velocity dispersion 100-280 km/s,
continuum S/N 15 per pixel.  The offset of the solved z from the true z is reported beside the
times (in units of its error), so a faster measurement that reads z differently shows here.
"""

import os
import sys
import time
import warnings

import astropy.units as u
import numpy as np
from astropy.nddata import StdDevUncertainty
from specutils import Spectrum

sys.path.insert(0, os.path.join(os.path.dirname(__file__), ".."))
sys.path.insert(0, os.path.dirname(__file__))
import synthetic_spectra as ss  # noqa: E402
from _timing import best_of  # noqa: E402

from zline.physics import _threads  # noqa: E402
from zline.physics.fitting import fit_line  # noqa: E402
from zline.physics.measure import measure_spectrum  # noqa: E402

__all__ = ["main"]

REPEATS = 3
Z_TRUE = 0.08
SNR = 15.0
SEEDS = (11, 12, 13, 14, 15)
C_KMS = 299792.458  # exact (SI definition)


def _spectrum(seed):
    lam, flux, err, truth = ss.make("absorption-galaxy", z=Z_TRUE, snr=SNR, seed=seed)
    spec = Spectrum(flux=flux * u.Jy, spectral_axis=lam * u.AA,
                    uncertainty=StdDevUncertainty(err))
    return spec, truth["z"]


def _best(fn):
    return best_of(fn, REPEATS)


def main():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        spec, z = _spectrum(SEEDS[0])
        measure_spectrum(spec, z=z, lines="galaxy-absorption")  # imports and caches warm
        t_abs, m_abs = _best(lambda: measure_spectrum(spec, z=z, lines="galaxy-absorption"))
        t_em, _ = _best(lambda: measure_spectrum(spec, z=z, lines="galaxy-emission"))
        centre = 5891.58 * (1 + z)  # Na I D2, vacuum (NIST ASD, from memory)
        t_one, _ = _best(lambda: fit_line(spec, centre * u.AA,
                                          window=[centre - 30, centre + 30] * u.AA,
                                          fwhm=8 * u.AA))
        pulls, times, many = [], [], []
        for seed in SEEDS:
            s, zt = _spectrum(seed)
            t0 = time.perf_counter()
            m = measure_spectrum(s, z=zt, lines="galaxy-absorption")
            times.append(time.perf_counter() - t0)
            pulls.append((m.z - zt) / m.z_err)
            _threads._state.active = True  # every one_blas_thread passes: default threads
            try:
                t0 = time.perf_counter()
                m_many = measure_spectrum(s, z=zt, lines="galaxy-absorption")
                many.append(time.perf_counter() - t0)
            finally:
                _threads._state.active = False
            assert m_many.z == m.z  # the thread setting changes the time, not the result
    print(f"generated absorption-line galaxy, z = {Z_TRUE}, S/N {SNR:g} per pixel, "
          f"{len(spec.flux)} px; best of {REPEATS}")
    print(f"{'call':<52}{'time':>10}{'ratio':>9}")
    print(f"{'baseline 1: measure, galaxy-emission set':<52}{t_em:>8.3f} s{1.0:>9.2f}")
    print(f"{'baseline 2: one fit_line (Na I D2)':<52}{t_one:>8.3f} s{t_one / t_em:>9.2f}")
    print(f"{'measure, galaxy-absorption set (whole)':<52}{t_abs:>8.3f} s{t_abs / t_em:>9.2f}")
    print(f"galaxy-absorption / one fit_line: {t_abs / t_one:.1f}; "
          f"{len(m_abs.lines)} lines fitted, {len(m_abs.locks)} locked")
    print(f"{len(SEEDS)} seeds, galaxy-absorption: one BLAS thread median {np.median(times):.3f} s"
          f", max {max(times):.3f} s; BLAS at default threads median {np.median(many):.3f} s, "
          f"max {max(many):.3f} s (total default / one thread {sum(many) / sum(times):.2f})")
    print("(z - z_true)/z_err: " + ", ".join(f"{p:+.2f}" for p in pulls))


if __name__ == "__main__":
    main()
