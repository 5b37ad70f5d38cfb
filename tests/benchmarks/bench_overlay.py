"""Python-side cost of moving the predicted-line overlay of LineIdentifier when z changes.

Workload (invented): 2000 predicted lines over a 50 000-pixel spectrum.  Measured: one ``w.z = ...``
assignment, including serialising every outgoing widget message (recorded by a no-op comm).
Baseline, same run: converting the same 2000 lines one by one as astropy Quantities
(``(rest_i * factor).to(unit, equivalencies=u.spectral())``), the obvious per-line way.
"""

import statistics
import time

import astropy.units as u
import numpy as np

__all__ = ["main"]

N_LINES = 2000
N_PIXELS = 50_000
REPEATS = 60
BUDGET_MS = 5.0


def _recording_comm():
    """Replace comm.create_comm by a recorder; returns (sent sizes, function that undoes it)."""
    import comm
    from comm.base_comm import BaseComm

    original = comm.create_comm

    sent = []

    class Recording(BaseComm):
        def publish_msg(self, msg_type, data=None, metadata=None, buffers=None, **keys):
            sent.append(sum(memoryview(b).nbytes for b in buffers or ()))

    comm.create_comm = lambda *a, **k: Recording(*a, **k)

    def undo():
        comm.create_comm = original

    return sent, undo


def _workload():
    from astropy.nddata import StdDevUncertainty
    from astropy.table import QTable
    from specutils import Spectrum

    rng = np.random.default_rng(7)
    x = np.linspace(3500.0, 10_000.0, N_PIXELS)
    flux = 1.0 + rng.normal(0.0, 0.05, x.size)
    spectrum = Spectrum(spectral_axis=x * u.AA, flux=flux * u.Jy,
                        uncertainty=StdDevUncertainty(np.full(x.size, 0.05)),
                        meta={"zline": {"medium": "vacuum"}})
    rest = np.sort(rng.uniform(1000.0, 9000.0, N_LINES))
    lines = QTable({"label": [f"line {i}" for i in range(N_LINES)], "rest": rest * u.AA,
                    "strength": rng.uniform(0.0, 1.0, N_LINES),
                    "origin": rng.choice(["computed", "tabulated"], N_LINES)})
    return spectrum, lines


def _time(fn, repeats):
    out = []
    for k in range(repeats):
        t0 = time.perf_counter()
        fn(k)
        out.append(time.perf_counter() - t0)
    return statistics.median(out), max(out)


def main():
    sent, undo = _recording_comm()
    try:
        _run(sent)
    finally:
        undo()


def _run(sent):
    from zline.physics import kinematics
    from zline.widgets import LineIdentifier

    spectrum, lines = _workload()
    w = LineIdentifier(spectrum, lines=lines, z=0.2)
    zs = 0.2 + 1e-4 * np.arange(REPEATS + 1)

    sent.clear()

    def move(k):
        w.z = float(zs[k + 1])

    widget_med, widget_max = _time(move, REPEATS)
    messages = len(sent) / REPEATS
    kbytes = sum(sent) / REPEATS / 1e3

    spans = np.linspace(3000.0, 300.0, 20)

    def zoom(k):
        with w.plot.xs.hold_trait_notifications():
            w.plot.xs.min, w.plot.xs.max = 6000.0 - spans[k % 20] / 2, 6000.0 + spans[k % 20] / 2

    zoom_med, zoom_max = _time(zoom, 20)

    rest_q = [r for r in lines["rest"]]     # 2000 scalar Quantities

    def per_line(k):
        factor = kinematics.shift_factor(float(zs[k]), 0 * u.km / u.s, "optical")
        [(r * factor).to(u.AA, equivalencies=u.spectral()) for r in rest_q]

    base_med, base_max = _time(per_line, max(REPEATS // 6, 5))

    print(f"{N_LINES} predicted lines, {N_PIXELS} spectrum pixels, median of {REPEATS} z changes")
    print(f"{'method':<44} {'median [ms]':>12} {'max [ms]':>10}")
    print(f"{'LineIdentifier z change (incl. messages)':<44} {widget_med * 1e3:12.3f} {widget_max * 1e3:10.3f}")
    print(f"{'zoom (re-decimate, re-place labels)':<44} {zoom_med * 1e3:12.3f} {zoom_max * 1e3:10.3f}")
    print(f"{'baseline: per-line Quantity conversion':<44} {base_med * 1e3:12.3f} {base_max * 1e3:10.3f}")
    print(f"ratio baseline / widget: {base_med / widget_med:.1f}x faster")
    print(f"messages per z change: {messages:.1f}, binary payload {kbytes:.1f} kB")
    verdict = "within" if widget_med * 1e3 <= BUDGET_MS else "OVER"
    print(f"budget {BUDGET_MS:.0f} ms per z change: {verdict}")


if __name__ == "__main__":
    main()
