"""Benchmark: fit 20 lines (with flux errors) in one synthetic spectrum.

zline: `zline.physics.fitting.fit_line` (Gaussian + linear continuum, covariance errors).
Baseline: `specutils.fitting.fit_lines` with Gaussian1D + Linear1D on the same 20 windows,
weights from the same uncertainties, run in the same process.
"""

import time
import warnings

import astropy.units as u
import numpy as np
from astropy.modeling import models
from astropy.nddata import StdDevUncertainty
from specutils import SpectralRegion, Spectrum
from specutils.fitting import fit_lines

from zline.physics.fitting import fit_line

__all__ = ["main"]

N_LINES = 20
REPEATS = 3


def make_case(seed=20261201):
    rng = np.random.default_rng(seed)
    x = np.linspace(4000.0, 9000.0, 20001)  # 0.25 A pixels
    centers = np.linspace(4200.0, 8800.0, N_LINES) + rng.uniform(-5, 5, N_LINES)
    sigmas = rng.uniform(1.0, 3.0, N_LINES)
    fluxes = rng.uniform(20.0, 80.0, N_LINES)
    cont = 5.0 + 1e-4 * (x - 6500.0)
    y = cont.copy()
    for mu, s, f in zip(centers, sigmas, fluxes):
        y += f * np.exp(-0.5 * ((x - mu) / s) ** 2) / (s * np.sqrt(2 * np.pi))
    noise = 0.3
    y += rng.normal(0, noise, x.size)
    spec = Spectrum(flux=y * u.Jy, spectral_axis=x * u.AA,
                    uncertainty=StdDevUncertainty(np.full(x.size, noise)))
    return spec, centers, sigmas, fluxes


def run_zline(spec, guesses, half):
    out = []
    for g in guesses:
        f = fit_line(spec, g * u.AA, window=[g - half, g + half] * u.AA, fwhm=4 * u.AA)
        out.append((f.center.value, f.center_err.value, f.flux.value, f.flux_err.value))
    return np.array(out)


def run_specutils(spec, guesses, half):
    out = []
    for g in guesses:
        sub = spec[(g - half) * u.AA:(g + half) * u.AA]
        peak = float(np.max(sub.flux.value) - np.median(sub.flux.value))
        init = (models.Gaussian1D(amplitude=peak * u.Jy, mean=g * u.AA, stddev=1.7 * u.AA)
                + models.Linear1D(slope=0 * u.Jy / u.AA, intercept=5 * u.Jy))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            fitted = fit_lines(spec, init, window=SpectralRegion((g - half) * u.AA,
                                                                 (g + half) * u.AA),
                               weights="unc")
        gauss = fitted[0]
        flux = gauss.amplitude.value * gauss.stddev.value * np.sqrt(2 * np.pi)
        out.append((gauss.mean.value, flux))
    return np.array(out)


def best_time(fn, *args):
    best, result = np.inf, None
    for _ in range(REPEATS):
        t0 = time.perf_counter()
        result = fn(*args)
        best = min(best, time.perf_counter() - t0)
    return best, result


def main():
    spec, centers, sigmas, fluxes = make_case()
    guesses = np.round(centers + 1.0, 1)  # a click a little off the line
    half = 25.0
    t_z, rz = best_time(run_zline, spec, guesses, half)
    t_s, rs = best_time(run_specutils, spec, guesses, half)
    pull_c = (rz[:, 0] - centers) / rz[:, 1]
    pull_f = (rz[:, 2] - fluxes) / rz[:, 3]
    print(f"{N_LINES} Gaussian lines, 20001-pixel spectrum, window +-{half} A, best of {REPEATS}")
    print(f"{'method':<34}{'total s':>10}{'ms/line':>10}{'max |dmu| A':>13}{'max |dF|/F':>12}")
    print(f"{'zline fit_line (with errors)':<34}{t_z:>10.3f}{1e3 * t_z / N_LINES:>10.2f}"
          f"{np.max(np.abs(rz[:, 0] - centers)):>13.4f}"
          f"{np.max(np.abs(rz[:, 2] - fluxes) / fluxes):>12.4f}")
    print(f"{'baseline specutils fit_lines':<34}{t_s:>10.3f}{1e3 * t_s / N_LINES:>10.2f}"
          f"{np.max(np.abs(rs[:, 0] - centers)):>13.4f}"
          f"{np.max(np.abs(rs[:, 1] - fluxes) / fluxes):>12.4f}")
    print(f"ratio zline/specutils time: {t_z / t_s:.2f} (below 1 = zline faster)")
    print(f"zline pulls over the 20 lines: centre mean {pull_c.mean():+.2f} std {pull_c.std():.2f}; "
          f"flux mean {pull_f.mean():+.2f} std {pull_f.std():.2f}")


if __name__ == "__main__":
    main()
