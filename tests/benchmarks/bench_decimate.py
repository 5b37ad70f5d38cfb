"""Display pyramid on a 10-million-pixel spectrum: build time and per-view cost.

Baselines measured in the same run: (a) sending every sample of the window (slice + copy),
(b) reading the whole flux array from a FITS file with astropy.io.fits (what a reload per view
would cost).
"""

import os
import sys
import tempfile
from pathlib import Path

import numpy as np
from astropy.io import fits

from zline.physics.decimate import DecimationPyramid

sys.path.insert(0, os.path.dirname(__file__))
from _timing import best_of  # noqa: E402

N = 10_000_000
N_PIXELS = 1200
N_WINDOWS = 200


def _best(fn, repeat=3):
    return best_of(fn, repeat)[0]


def main():
    rng = np.random.default_rng(7)
    x = np.linspace(3000.0, 10000.0, N)
    y = (1.0 + rng.normal(0, 0.05, N)).astype(np.float32).astype(np.float64)
    y[rng.integers(0, N, 2000)] = np.nan

    t_build = _best(lambda: DecimationPyramid(x, y), repeat=1)
    pyr = DecimationPyramid(x, y)

    spans = np.geomspace(1.0, 7000.0, N_WINDOWS)
    starts = rng.uniform(3000.0, 10000.0 - spans)
    wins = list(zip(starts, starts + spans))

    def views():
        total = 0
        for lo, hi in wins:
            total += pyr.window(lo, hi, N_PIXELS)[0].size
        return total

    def slices():
        total = 0
        for lo, hi in wins:
            i0, i1 = np.searchsorted(x, [lo, hi])
            total += x[i0:i1].copy().size + y[i0:i1].copy().size
        return total

    t_view = _best(views) / N_WINDOWS
    t_slice = _best(slices) / N_WINDOWS
    shown = views() / N_WINDOWS
    sent = slices() / (2 * N_WINDOWS)

    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "big.fits"
        fits.PrimaryHDU(y.astype(np.float32)).writeto(path)

        def read():
            with fits.open(path, memmap=False) as hdul:
                return hdul[0].data.sum()

        t_read = _best(read)

    print(f"spectrum: {N:,} samples, views: {N_WINDOWS} random windows (1 A .. 7000 A), "
          f"{N_PIXELS} px")
    print(f"{'measure':<44}{'time':>12}{'points':>12}")
    print(f"{'pyramid build (once)':<44}{t_build * 1e3:>10.0f} ms")
    print(f"{'pyramid window, mean per view':<44}{t_view * 1e3:>10.3f} ms{shown:>12.0f}")
    print(f"{'baseline (a): slice + copy all in window':<44}{t_slice * 1e3:>10.3f} ms{sent:>12.0f}")
    print(f"{'baseline (b): astropy.io.fits full read':<44}{t_read * 1e3:>10.1f} ms{N:>12}")
    print(f"ratio (a)/pyramid time: {t_slice / t_view:8.1f}   points sent (a)/pyramid: "
          f"{sent / shown:8.0f}")
    print(f"ratio (b)/pyramid time: {t_read / t_view:8.1f}")
    print(f"build / one FITS read: {t_build / t_read:8.1f}")


if __name__ == "__main__":
    main()
