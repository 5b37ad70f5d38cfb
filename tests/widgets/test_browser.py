"""The galaxy notebook in a real JupyterLab + headless Chromium: the slider moves the predicted lines,
a click in identify mode locks a line, the rest-frame axis shows, a picked scan candidate moves z
(checked in the kernel itself)."""

import re
import shutil
import time
from pathlib import Path

import pytest

pytestmark = pytest.mark.browser

REPO = Path(__file__).resolve().parents[2]
NOTEBOOK = REPO / "notebooks" / "galaxy_redshift.ipynb"
ARTIFACTS = REPO / "tests" / "artifacts"
FIG = ".bqplot.figure.zline-plot"

# every predicted-line mark is a Lines mark named "lines-<origin>-<strong|weak>"
ALL_MARKERS = """(fig) => [...document.querySelectorAll(fig + ' svg.svg-figure g.curve')]
    .filter(g => (g.querySelector('text.curve_label')?.textContent || '').startsWith('lines-'))
    .map(g => g.querySelector('path.line').getAttribute('d') || '').join('|')"""


@pytest.fixture
def lab_root(tmp_path):
    """The served folder: the notebook and its demo data (written here so the notebook skips it)."""
    from zline.physics.demo import write_demo_spectra
    root = tmp_path / "root"
    root.mkdir()
    shutil.copy(NOTEBOOK, root / NOTEBOOK.name)
    write_demo_spectra(root / "demo-data")
    return root


def kernel_eval(server, expression, timeout=60):
    """Evaluate an expression in the notebook's kernel through its connection file."""
    from jupyter_client import BlockingKernelClient
    end = time.monotonic() + timeout
    files = []
    while not files:
        files = sorted(server.runtime.glob("kernel-*.json"))
        assert files or time.monotonic() < end, f"no kernel connection file in {server.runtime}"
        time.sleep(0.2)
    client = BlockingKernelClient(connection_file=str(files[0]))
    client.load_connection_file()
    client.start_channels()
    try:
        client.wait_for_ready(timeout=timeout)
        reply = client.execute_interactive("", user_expressions={"value": expression}, timeout=timeout,
                                           output_hook=lambda msg: None)
        result = reply["content"]["user_expressions"]["value"]
        assert result["status"] == "ok", result
        return result["data"]["text/plain"]
    finally:
        client.stop_channels()


# vertex of the marker path nearest the middle of the plot area, in page (client) coordinates
PICK_VERTEX = """(fig) => {
  const area = document.querySelector(fig + ' rect.plotarea_background').getBoundingClientRect();
  let best = null;
  for (const g of document.querySelectorAll(fig + ' svg.svg-figure g.curve')) {
    if (!(g.querySelector('text.curve_label')?.textContent || '').startsWith('lines-')) continue;
    const path = g.querySelector('path.line');
    const m = path.getScreenCTM();
    for (const p of (path.getAttribute('d') || '').matchAll(/M\\s*([-\\d.eE+]+)[ ,]([-\\d.eE+]+)/g)) {
      const q = new DOMPoint(parseFloat(p[1]), parseFloat(p[2])).matrixTransform(m);
      if (q.x < area.left + 20 || q.x > area.right - 20) continue;
      const score = Math.abs(q.x - (area.left + area.right) / 2);
      if (best === null || score < best.score) best = {x: q.x, score: score};
    }
  }
  return best && {x: best.x, y: area.top + 0.6 * area.height};
}"""


def test_slider_moves_lines_and_click_locks(lab_server, page):
    page.goto(f"{lab_server.url}/lab/tree/{NOTEBOOK.name}?token={lab_server.token}")
    page.locator(".jp-StatusBar-TextItem", has_text=re.compile(r"ipykernel\) \| Idle")).wait_for(timeout=120_000)
    page.evaluate("() => window.jupyterapp.commands.execute('notebook:run-all-cells')")
    # the plot, or an error in the notebook output (then fail at once, showing it)
    shown = page.locator(f"{FIG} svg.svg-figure g.curve path.line, "
                         ".jp-OutputArea-output[data-mime-type='application/vnd.jupyter.stderr']")
    shown.first.wait_for(state="attached", timeout=120_000)
    errors = page.locator(".jp-OutputArea-output[data-mime-type='application/vnd.jupyter.stderr']")
    assert errors.count() == 0, errors.first.inner_text()[-2000:]
    page.wait_for_function(f"() => ({ALL_MARKERS})({FIG!r}).length > 40", timeout=120_000)
    before = page.evaluate(ALL_MARKERS, FIG)

    page.locator(".zline-z .noUi-handle").focus()
    for _ in range(8):
        page.keyboard.press("ArrowRight")
    page.wait_for_function(f"(old) => ({ALL_MARKERS})({FIG!r}) !== old", arg=before, timeout=60_000)
    assert page.evaluate(ALL_MARKERS, FIG) != before
    assert float(kernel_eval(lab_server, "w.z")) > 0.0

    page.locator(".zline-mode button", has_text=re.compile(r"^\s*identify\s*$")).click()
    end = time.monotonic() + 60
    while kernel_eval(lab_server, "w.mode") != "'identify'":
        assert time.monotonic() < end, "identify mode never reached the kernel"
        time.sleep(0.3)
    # the notebook's later cells lock lines from code: drop those locks so that only the click can
    # make one, and the drawn locked mark must come from it
    kernel_eval(lab_server, "[w.unlock(0) for _ in range(len(w.locks))]")
    assert int(kernel_eval(lab_server, "len(w.locks)")) == 0
    page.wait_for_function(
        """(fig) => ![...document.querySelectorAll(fig + ' g.curve')]
             .some(g => g.querySelector('text.curve_label')?.textContent === 'locked'
                        && /M\\s*[\\d.]/.test(g.querySelector('path.line').getAttribute('d') || ''))""",
        arg=FIG, timeout=60_000)
    point = page.evaluate(PICK_VERTEX, FIG)
    assert point is not None, "no predicted line inside the plot area"
    page.mouse.click(point["x"] + 2, point["y"])
    page.wait_for_function(
        """(fig) => [...document.querySelectorAll(fig + ' g.curve')]
             .some(g => g.querySelector('text.curve_label')?.textContent === 'locked'
                        && /M\\s*[\\d.]/.test(g.querySelector('path.line').getAttribute('d') || ''))""",
        arg=FIG, timeout=60_000)
    assert int(kernel_eval(lab_server, "len(w.locks)")) >= 1

    # the rest-frame axis appears on top when its box is ticked
    page.locator(".zline-rest-axis input[type=checkbox]").check()
    page.wait_for_function(
        """(fig) => [...document.querySelectorAll(fig + ' svg text')]
             .some(t => /^rest wavelength/.test(t.textContent || ''))""", arg=FIG, timeout=60_000)
    assert kernel_eval(lab_server, "w.rest_axis") == "True"

    # the candidate scan fills the list; picking an entry moves z there
    page.locator("button", has_text=re.compile(r"^\s*find candidates\s*$")).click()
    options = page.locator(".zline-candidates select option")
    options.first.wait_for(state="attached", timeout=60_000)
    assert "score" in options.first.inner_text()
    page.locator(".zline-candidates select").select_option(index=0)
    end = time.monotonic() + 60
    while kernel_eval(lab_server, "abs(w.z - w.candidates[0].z) < 1e-12") != "True":
        assert time.monotonic() < end, "picking a candidate never moved z in the kernel"
        time.sleep(0.3)
    ARTIFACTS.mkdir(exist_ok=True)
    page.locator(FIG).scroll_into_view_if_needed()
    page.screenshot(path=str(ARTIFACTS / "widget.png"), full_page=True)
