"""The galaxy notebook in a real JupyterLab + headless Chromium: Run All keeps the solved z exactly,
the slider drags and an exact z typed lands, a click on a line locks it and a click on empty
continuum does not, undo, a refused overwrite; screenshots of the main view and of the
verification strip go to tests/artifacts/ (the main one also to docs/widget.png)."""

import json
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

# every predicted-line guide is a Lines mark named "lines-<origin>-<strong|weak>"
ALL_GUIDES = """(fig) => [...document.querySelectorAll(fig + ' svg.svg-figure g.curve')]
    .filter(g => (g.querySelector('text.curve_label')?.textContent || '').startsWith('lines-'))
    .map(g => g.querySelector('path.line').getAttribute('d') || '').join('|')"""

# page coordinates of a data x in the plot area (the x scale's min/max map onto its width)
PAGE_X = """([fig, x, lo, hi]) => {
  const r = document.querySelector(fig + ' rect.plotarea_background').getBoundingClientRect();
  return {x: r.left + (x - lo) / (hi - lo) * r.width, y: r.top + 0.8 * r.height};
}"""


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
    """Evaluate an expression in the notebook's kernel through its connection file (repr text)."""
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


def kernel_json(server, expression):
    return json.loads(eval(kernel_eval(server, f"__import__('json').dumps({expression})")))  # noqa: S307


def wait_kernel(server, expression, what, timeout=60):
    end = time.monotonic() + timeout
    while kernel_eval(server, expression) != "True":
        assert time.monotonic() < end, what
        time.sleep(0.3)


def click_at_data_x(page, server, x):
    page.locator(FIG).scroll_into_view_if_needed()
    lo, hi = kernel_json(server, "w.plot.view_range()")
    point = page.evaluate(PAGE_X, [FIG, x, lo, hi])
    page.mouse.click(point["x"], point["y"])


def test_widget_in_jupyterlab(lab_server, page):
    page.goto(f"{lab_server.url}/lab/tree/{NOTEBOOK.name}?token={lab_server.token}")
    page.locator(".jp-StatusBar-TextItem", has_text=re.compile(r"ipykernel\) \| Idle")).wait_for(timeout=120_000)
    page.evaluate("() => window.jupyterapp.commands.execute('notebook:run-all-cells')")
    shown = page.locator(f"{FIG} svg.svg-figure g.curve path.line, "
                         ".jp-OutputArea-output[data-mime-type='application/vnd.jupyter.stderr']")
    shown.first.wait_for(state="attached", timeout=120_000)
    errors = page.locator(".jp-OutputArea-output[data-mime-type='application/vnd.jupyter.stderr']")
    assert errors.count() == 0, errors.first.inner_text()[-2000:]
    page.wait_for_function(f"() => ({ALL_GUIDES})({FIG!r}).length > 40", timeout=120_000)
    wait_kernel(lab_server, "w._solution is not None", "the notebook never solved z", timeout=120)

    # --- Run All keeps the solved z: every control has rendered and had its chance to echo
    page.locator(".zline-z .noUi-handle").wait_for(timeout=60_000)
    time.sleep(3.0)
    z_solved = float(kernel_eval(lab_server, "w._solution.z"))
    assert abs(float(kernel_eval(lab_server, "w.z")) - z_solved) < 1e-9
    readout = kernel_eval(lab_server, "w.format_z(w.z)").strip("'")
    page.wait_for_function("(t) => document.querySelector('.zline-ztext input')?.value === t", arg=readout)

    # --- screenshots at the solved z: the whole view and the verification strip
    ARTIFACTS.mkdir(exist_ok=True)
    page.locator(".zline-view").scroll_into_view_if_needed()
    page.wait_for_function("() => document.querySelectorAll('.zline-strip .zline-panel svg path.line').length >= 6")
    time.sleep(1.0)
    page.locator(".zline-view").screenshot(path=str(ARTIFACTS / "widget.png"))
    page.locator(".zline-strip").screenshot(path=str(ARTIFACTS / "strip.png"))
    shutil.copy(ARTIFACTS / "widget.png", REPO / "docs" / "widget.png")

    # --- drag the slider: z and the drawn guides move
    before = page.evaluate(ALL_GUIDES, FIG)
    page.locator(".zline-z .noUi-handle").scroll_into_view_if_needed()  # it must be on screen to drag
    handle = page.locator(".zline-z .noUi-handle").bounding_box()
    page.mouse.move(handle["x"] + handle["width"] / 2, handle["y"] + handle["height"] / 2)
    page.mouse.down()
    page.mouse.move(handle["x"] + handle["width"] / 2 + 60, handle["y"] + handle["height"] / 2, steps=8)
    page.mouse.up()
    page.wait_for_function(f"(old) => ({ALL_GUIDES})({FIG!r}) !== old", arg=before, timeout=60_000)
    wait_kernel(lab_server, f"w.z > {z_solved!r} + 1e-5", "dragging the slider never raised z")

    # --- type an exact z: it lands exactly, and the readout shows it
    box = page.locator(".zline-ztext input")
    box.click()
    box.fill("0.0733985")
    box.press("Enter")
    box.blur()                     # the value is sent when the box commits its text
    wait_kernel(lab_server, "w.z == 0.0733985", "the typed z never arrived exactly")
    time.sleep(1.0)
    assert kernel_eval(lab_server, "w.z") == "0.0733985"          # no slider echo rounded it
    assert box.input_value() == "0.0733985"

    # --- lock mode: a click on Hα locks it, a click on empty continuum does not
    page.locator(".zline-mode button", has_text=re.compile(r"^\s*lock\s*$")).click()
    wait_kernel(lab_server, "w.mode == 'lock'", "lock mode never reached the kernel")
    kernel_eval(lab_server, "[w.unlock(0) for _ in range(len(w.locks))]")   # the notebook's own locks
    assert int(kernel_eval(lab_server, "len(w.locks)")) == 0
    halpha = kernel_json(lab_server, "float(w.observed_positions()[list(w._labels).index('Hα')].value)")
    click_at_data_x(page, lab_server, halpha + 1.0)
    wait_kernel(lab_server, "[k.label for k in w.locks] == ['Hα']", "a click on Hα did not lock it")
    page.wait_for_function(
        """(fig) => [...document.querySelectorAll(fig + ' g.curve')]
             .some(g => g.querySelector('text.curve_label')?.textContent === 'locked'
                        && /M\\s*[\\d.]/.test(g.querySelector('path.line').getAttribute('d') || ''))""",
        arg=FIG, timeout=60_000)
    click_at_data_x(page, lab_server, 8250.0)                       # continuum, no predicted line near
    page.locator(".zline-status", has_text="nothing locked").wait_for(timeout=60_000)
    assert int(kernel_eval(lab_server, "len(w.locks)")) == 1

    # --- undo takes the lock back
    page.locator(".zline-undo button, button.zline-undo").first.click()
    wait_kernel(lab_server, "len(w.locks) == 0", "undo did not remove the lock")

    # --- a refused overwrite: the first press on an existing file writes nothing
    kernel_eval(lab_server, "open('taken.json', 'w').write('keep me')")
    path_box = page.locator(".zline-save-path input")
    path_box.fill("taken.json")
    path_box.press("Enter")
    wait_kernel(lab_server, "w.ui.save_path.value == 'taken.json'", "the file name never reached the kernel")
    page.locator("button.zline-save").click()
    page.locator(".zline-status", has_text="press 'save' again").wait_for(timeout=60_000)
    assert (lab_server.root / "taken.json").read_text() == "keep me"
