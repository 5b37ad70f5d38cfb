"""Benchmark of the blind redshift search: speed of every kind at once, and its right-rates.

Speed (one process, best of REPEATS):

* ``scan_redshift(spec)`` -- every kind (emission/absorption galaxy, quasar, star), 0 <= z <= 7;
* baseline 1: ``scan_redshift(spec, lines="galaxy-emission")`` -- one line set, the same range
  (the single-set search);
* baseline 2: `specutils.analysis.template_correlate` (``method="fft"``) of the same spectrum
  with a rest-frame template made of the same emission lines, as a user would call it.

Spectra: one generated SDSS-like spectrum (~4,600 pixels) and one of 50,000 pixels
(3600-10400 A, 0.136 A per pixel), both from tests/synthetic_spectra.py (not zline).

Rates (``main(rates=True)``, the default): synthetic spectra of every kind at S/N 3, 10 and 30
(N_RATE of each), the share ranked first within 0.003 (1 + z) (stars: within 30 km/s;
sky fibres and noise: saying ``no_redshift``), the mean velocity offset of the right readings,
and the calibration of the confidence (share right among readings with confidence >= 0.9).
Real spectra of ../shared/realdata are added when present (SDSS and LAMOST pipeline redshifts).
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

from zline.physics.scan import CONFIDENCE_COEFFS, scan_redshift  # noqa: E402

__all__ = ["main"]

REPEATS = 5
N_RATE = 30
REALDATA = os.path.join(os.path.dirname(__file__), "..", "..", "..", "shared", "realdata")


def _spectrum(lam, flux, err):
    return Spectrum(flux=flux * u.Jy, spectral_axis=lam * u.AA,
                    uncertainty=StdDevUncertainty(err))


def _big(n=50_000, z=1.234, seed=3):
    """A 50k-pixel emission-line spectrum (linear wavelength grid)."""
    lam0, flux0, err0, _ = ss.make("emission-galaxy", z=z, snr=10, seed=seed)
    lam = np.linspace(3600.0, 10400.0, n)
    flux = np.interp(lam, lam0, flux0)
    err = np.interp(lam, lam0, err0)
    return _spectrum(lam, flux, err)


def _best(fn, repeats=REPEATS):
    return best_of(fn, repeats, clock=time.process_time)


def _template():
    rest = np.arange(900.0, 10000.0, 0.5)
    flux = np.ones(rest.size)
    for r, s in ss.EMISSION:
        flux += s * np.exp(-0.5 * ((rest - r) / 1.5) ** 2)
    return Spectrum(flux=flux * u.Jy, spectral_axis=rest * u.AA)


def speed():
    from specutils.analysis import template_correlate

    lam, f, e, _ = ss.make("emission-galaxy", z=0.4321, snr=10, seed=11)
    cases = [("SDSS-like, %d px" % lam.size, _spectrum(lam, f, e)), ("50,000 px", _big())]
    tmpl = _template()
    print("CPU time per call (time.process_time, best of repeats; the machine is shared)")
    print(f"{'spectrum':<18} {'all kinds [ms]':>15} {'one set [ms]':>13} {'ratio':>6} "
          f"{'template_correlate [ms]':>24} {'ratio':>6}")
    for name, spec in cases:
        t_all, res = _best(lambda: scan_redshift(spec))
        t_one, _ = _best(lambda: scan_redshift(spec, lines="galaxy-emission"))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            t_tc, _ = _best(lambda: template_correlate(spec, tmpl, method="fft",
                                                       lag_units=u.dimensionless_unscaled), 2)
        print(f"{name:<18} {t_all * 1e3:>15.1f} {t_one * 1e3:>13.1f} {t_all / t_one:>6.2f} "
              f"{t_tc * 1e3:>24.1f} {t_all / t_tc:>6.2f}   best z {res.candidates[0].z:.4f}")


def _truth_z(kind, rng):
    return {"emission-galaxy": rng.uniform(0.0, 1.2), "absorption-galaxy": rng.uniform(0.0, 0.8),
            "quasar": rng.uniform(0.1, 4.5)}.get(kind, 0.0)


def rates(n=N_RATE):
    rows = []
    for kind in ss.KINDS:
        for snr in (3, 10, 30):
            for i in range(n):
                rng = np.random.default_rng(9000 + 37 * i + int(snr))
                z, v = _truth_z(kind, rng), rng.uniform(-300, 300)
                lam, f, e, truth = ss.make(kind, z=z, snr=snr, seed=9000 + 37 * i + int(snr),
                                           velocity_kms=v)
                res = scan_redshift(_spectrum(lam, f, e))
                rows.append(_judge(kind, snr, truth["z"], res))
    _real(rows)
    print(f"{'kind':<20} {'S/N':>4} {'n':>4} {'right':>6} {'mean dv':>8} {'sd dv':>7} "
          f"{'no-z said':>9}")
    keys = sorted({(r[0], r[1]) for r in rows}, key=lambda k: (k[0], k[1]))
    for kind, snr in keys:
        sel = [r for r in rows if r[0] == kind and r[1] == snr]
        dv = np.array([r[3] for r in sel if r[2] and r[3] is not None])
        print(f"{kind:<20} {snr!s:>4} {len(sel):>4} {np.mean([r[2] for r in sel]):>6.0%} "
              f"{dv.mean() if dv.size else np.nan:>8.1f} {dv.std() if dv.size else np.nan:>7.1f} "
              f"{np.mean([r[5] for r in sel]):>9.0%}")
    conf = np.array([r[4] for r in rows])
    # the first candidate of a sky fibre or of noise is wrong by definition
    right = np.array([r[2] and r[0] not in ("sky", "noise") for r in rows], bool)
    for lo, hi in ((0.0, 0.1), (0.1, 0.5), (0.5, 0.9), (0.9, 1.01)):
        sel = (conf >= lo) & (conf < hi)
        print(f"confidence {lo:.1f}-{min(hi, 1):.1f}: {sel.sum():>4} readings, "
              f"{right[sel].mean() if sel.any() else np.nan:.0%} right")
    s1 = np.array([max(r[6], 1e-3) for r in rows])
    s2 = np.array([min(max(r[7], 0.1), max(r[6], 1e-3)) for r in rows])
    coef = _logistic(np.c_[np.ones(s1.size), np.log(s1), np.log(s1 / s2)], right)
    print("refitted confidence coefficients (a, b, c) on these readings: "
          + ", ".join(f"{c:.3f}" for c in coef) + " (zline uses "
          + ", ".join(f"{c:.3f}" for c in CONFIDENCE_COEFFS) + ")")


def _logistic(x, y, iterations=60):
    """Maximum-likelihood logistic regression by iteratively reweighted least squares."""
    b = np.zeros(x.shape[1])
    for _ in range(iterations):
        p = 1.0 / (1.0 + np.exp(-(x @ b)))
        w = p * (1 - p) + 1e-9
        b += np.linalg.solve(x.T @ (x * w[:, None]) + 1e-6 * np.eye(b.size), x.T @ (y - p))
    return b


def _judge(kind, snr, z_true, res):
    c = res.candidates[0]
    s2 = res.candidates[1].score if len(res.candidates) > 1 else 0.0
    if kind in ("sky", "noise"):
        return (kind, snr, bool(res.no_redshift), None, res.confidence, res.no_redshift,
                c.score, s2)
    if kind in ("star", "star_real"):
        dv = (c.z - z_true) * ss.C_KMS
        ok = abs(dv) < 30.0
    else:
        dv = (c.z - z_true) / (1 + z_true) * ss.C_KMS
        ok = abs(c.z - z_true) < 0.003 * (1 + z_true)
    return (kind, snr, bool(ok), dv, res.confidence, res.no_redshift, c.score, s2)


def _real(rows):
    path = os.path.join(REALDATA, "manifest.ecsv")
    if not os.path.exists(path):
        print("(../shared/realdata absent: real spectra skipped)")
        return
    from astropy.table import Table

    from zline.physics.spectra import read_spectrum

    for row in Table.read(path, format="ascii.ecsv"):
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                spec = read_spectrum(os.path.join(REALDATA, row["file"]))
                res = scan_redshift(spec)
        except ValueError as exc:
            print(f"  {row['file']}: not read ({str(exc)[:60]}...)")
            continue
        kind = "star_real" if row["kind"] == "star" else row["kind"] + "_real"
        # the survey pipeline's published redshift (SDSS or LAMOST pipeline redshift)
        rows.append(_judge(kind, "real", float(row["z_published"]), res))


def main(rate=True):
    speed()
    if rate:
        rates()


if __name__ == "__main__":
    main()
