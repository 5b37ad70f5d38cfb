"""Browser round trip of the overlay: a slider key press until the predicted lines are repainted.

Workload (invented): `LineIdentifier` on a 1 000 000-pixel spectrum with 2000 predicted lines, in
JupyterLab driven by Debian's chromium (headless, software rendering).  Measured in the page: the
time from the slider's keydown event to the first animation frame after the guides' SVG path
changed (median of REPEATS presses, one at a time).  Baseline, same page and run: a plain
FloatSlider moving one marker on a 1000-point bqplot curve (the comm round trip and one repaint,
with no zline work).  Also timed in the kernel: one ``w.z`` change (what the kernel does per event).
"""

import json
import os
import re
import shutil
import statistics
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "widgets"))
from labserver import CHROMIUM_ARGS as ARGS, TOKEN, start_lab, stop_lab  # noqa: E402

__all__ = ["main"]

REPEATS = 15
GOAL_MS = 50.0
CHROMIUM = os.environ.get("CHROMIUM", "/usr/bin/chromium")

APP = r'''
import numpy as np, astropy.units as u, ipywidgets as W, bqplot as bq
from astropy.nddata import StdDevUncertainty
from astropy.table import QTable
from specutils import Spectrum
from zline.widgets import LineIdentifier
rng = np.random.default_rng(7)
x = np.linspace(3500.0, 10000.0, 1_000_000)
sp = Spectrum(spectral_axis=x * u.AA, flux=(1.0 + rng.normal(0, 0.05, x.size)) * u.Jy,
              uncertainty=StdDevUncertainty(np.full(x.size, 0.05)), meta={"zline": {"medium": "vacuum"}})
rest = np.sort(rng.uniform(1000.0, 9000.0, 2000))
lines = QTable({"label": [f"L{i}" for i in range(2000)], "rest": rest * u.AA,
                "strength": rng.uniform(0, 1, 2000), "origin": rng.choice(["computed", "tabulated"], 2000)})
w = LineIdentifier(sp, lines=lines, z=0.2)
bx = np.linspace(0, 10, 1000)
sx, sy = bq.LinearScale(min=0, max=10), bq.LinearScale(min=-1.5, max=1.5)
curve = bq.Lines(x=bx, y=np.sin(bx), scales={"x": sx, "y": sy})
marker = bq.Lines(x=[2.0, 2.0], y=[-1.5, 1.5], scales={"x": sx, "y": sy}, labels=["marker"])
base_fig = bq.Figure(marks=[curve, marker], layout=W.Layout(width="500px", height="250px"), animation_duration=0)
base_fig.add_class("base-fig")
base_slider = W.FloatSlider(value=2.0, min=0, max=10, step=0.01)
base_slider.add_class("base-slider")
base_slider.observe(lambda c: setattr(marker, "x", [c["new"]] * 2), names="value")
W.VBox([w, base_fig, base_slider])
'''

INSTALL = """([fig, label]) => {
  window.__t0 = 0; window.__t1 = 0;
  document.addEventListener('keydown', () => { window.__t0 = performance.now(); window.__t1 = 0; }, true);
  const pick = () => [...document.querySelectorAll(fig + ' g.curve')]
      .find(g => (g.querySelector('text.curve_label')?.textContent || '').startsWith(label));
  let old = pick().querySelector('path.line').getAttribute('d');
  new MutationObserver(() => {
    const d = pick().querySelector('path.line').getAttribute('d');
    if (d !== old && window.__t0 && !window.__t1) {
      old = d;
      requestAnimationFrame(() => { window.__t1 = performance.now(); });
    }
  }).observe(document.querySelector(fig), {attributes: true, subtree: true, attributeFilter: ['d']});
}"""


def _start_lab(base):
    import nbformat
    root = base / "root"
    root.mkdir()
    nb = nbformat.v4.new_notebook()
    nb.cells = [nbformat.v4.new_code_cell(APP)]
    nb.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3 (ipykernel)", "language": "python"}
    nbformat.write(nb, str(root / "bench.ipynb"))
    return start_lab(root, base)


def _kernel_times(runtime, n, setup=""):
    from jupyter_client import BlockingKernelClient
    client = BlockingKernelClient(connection_file=str(sorted(runtime.glob("kernel-*.json"))[0]))
    client.load_connection_file()
    client.start_channels()
    try:
        client.wait_for_ready(timeout=60)
        code = (setup + "\nimport time as _t, json as _j\n_ts = []\nfor _k in range(%d):\n"
                "    _a = _t.perf_counter(); w.z = w.z + 1e-5; _ts.append(_t.perf_counter() - _a)\n" % n)
        client.execute_interactive(code, timeout=120, output_hook=lambda msg: None)
        reply = client.execute_interactive("", user_expressions={"v": "_j.dumps(_ts)"}, timeout=60,
                                           output_hook=lambda msg: None)
        return json.loads(eval(reply["content"]["user_expressions"]["v"]["data"]["text/plain"]))  # noqa: S307
    finally:
        client.stop_channels()


def _press_times(page, figure, label, handle, n):
    page.locator(handle).focus()
    page.evaluate(INSTALL, [figure, label])
    out = []
    for _ in range(n):
        page.keyboard.press("ArrowRight")
        page.wait_for_function("() => window.__t1 > window.__t0", timeout=60_000)
        out.append(page.evaluate("() => window.__t1 - window.__t0"))
        time.sleep(0.15)
    return out


def main():
    if not os.path.exists(CHROMIUM):
        print(f"SKIPPED: {CHROMIUM} missing (apt-get install chromium)")
        return
    from playwright.sync_api import sync_playwright
    base = Path(tempfile.mkdtemp(prefix="zline-bench-"))
    proc, log, url, runtime = _start_lab(base)
    try:
        with sync_playwright() as p:
            browser = p.chromium.launch(executable_path=CHROMIUM, headless=True, args=ARGS)
            page = browser.new_page(viewport={"width": 1400, "height": 1100})
            page.route(re.compile(r"^https?://(?!127\.0\.0\.1[:/]|localhost[:/])"), lambda r: r.abort())
            page.goto(f"{url}/lab/tree/bench.ipynb?token={TOKEN}")
            page.locator(".jp-StatusBar-TextItem", has_text=re.compile(r"ipykernel\) \| Idle")).wait_for(timeout=120_000)
            page.evaluate("() => window.jupyterapp.commands.execute('notebook:run-all-cells')")
            page.locator(".base-slider .noUi-handle").wait_for(timeout=180_000)
            page.locator(".zline-z .noUi-handle").wait_for(timeout=180_000)
            time.sleep(2.0)
            zline = _press_times(page, ".zline-plot", "lines-", ".zline-z .noUi-handle", REPEATS)
            kernel = [t * 1e3 for t in _kernel_times(runtime, REPEATS)]
            # the same without the verification strip's live update, to see what it costs
            kernel_bare = [t * 1e3 for t in _kernel_times(runtime, REPEATS, "w.strip.lines = None")]
            time.sleep(1.0)
            bare = _press_times(page, ".zline-plot", "lines-", ".zline-z .noUi-handle", REPEATS)
            page.locator(".base-slider").scroll_into_view_if_needed()
            base_ms = _press_times(page, ".base-fig", "marker", ".base-slider .noUi-handle", REPEATS)
            guides = page.evaluate("""() => [...document.querySelectorAll('.zline-plot g.curve')]
                .filter(g => (g.querySelector('text.curve_label')?.textContent || '').startsWith('lines-'))
                .reduce((n, g) => n + (g.querySelector('path.line').getAttribute('d') || '').split('M').length - 1, 0)""")
            texts = page.evaluate("() => document.querySelectorAll('.zline-band text').length")
            browser.close()
    finally:
        stop_lab(proc, log)
        shutil.rmtree(base, ignore_errors=True)
    med, base_med, k_med = statistics.median(zline), statistics.median(base_ms), statistics.median(kernel)
    print("LineIdentifier: 1 000 000 spectrum pixels, 2000 predicted lines; headless chromium, software rendering")
    print(f"{'measure':<58} {'median [ms]':>12} {'max [ms]':>10}")
    print(f"{'slider keydown -> overlay repainted (LineIdentifier)':<58} {med:12.1f} {max(zline):10.1f}")
    print(f"{'baseline: slider keydown -> 1 marker repainted (plain bqplot)':<58} {base_med:12.1f} {max(base_ms):10.1f}")
    print(f"{'kernel: one w.z change (all marks, strip, controls)':<58} {k_med:12.1f} {max(kernel):10.1f}")
    print(f"{'same round trip without the strip update':<58} {statistics.median(bare):12.1f} {max(bare):10.1f}")
    print(f"{'kernel: one w.z change without the strip update':<58} {statistics.median(kernel_bare):12.1f} "
          f"{max(kernel_bare):10.1f}")
    print(f"ratio LineIdentifier / baseline: {med / base_med:.2f}x; kernel share of the round trip: "
          f"{100 * k_med / med:.0f} %; browser (transport + render) {med - k_med:.1f} ms")
    print(f"guides drawn in view: {guides} vertical segments; band text elements: {texts}")
    print(f"goal {GOAL_MS:.0f} ms: {'met' if med <= GOAL_MS else 'NOT met'}")


if __name__ == "__main__":
    main()
