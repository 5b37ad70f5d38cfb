"""Every notebook runs top to bottom the way `make demo` serves it, ends with a result and a figure,
and leaves the checkout clean.

The module copies the tracked Makefile, .gitignore and notebooks into a throw-away git repository,
runs `make demo-files` there (demo data in notebooks/demo-data, a working copy of each notebook in
notebooks/scratch/demo), executes each copy in a fresh python3 kernel from that folder (as
JupyterLab would; two at a time) and saves it back in place (as JupyterLab's autosave would).

A notebook passes when no cell raised, nothing was written to stderr (warnings included), its last
code cell prints the result named in `EXPECTED` (checked against the demo truth) and shows a widget
holding at least one bqplot Figure whose marks carry finite data, and `FIGURE_CHECKS` finds the
result in the figure's own data.  Afterwards `git status --porcelain` of the copy must be empty.
"""

import asyncio
import base64
import re
import shutil
import subprocess
import sys
from pathlib import Path

import astropy.units as u
import nbformat
import numpy as np
import pytest
from astropy.constants import c
from nbclient import NotebookClient

from zline.physics.catalog import line_set
from zline.physics.demo import DEMO_TRUTH

REPO = Path(__file__).resolve().parents[1]
NOTEBOOKS = sorted(p.name for p in (REPO / "notebooks").glob("*.ipynb"))
DEMO_DIR = Path("notebooks/scratch/demo")   # the Makefile's DEMO_DIR default

WIDGET_VIEW = "application/vnd.jupyter.widget-view+json"
WIDGET_STATE = "application/vnd.jupyter.widget-state+json"
C_KMS = c.to_value(u.km / u.s)

#: Notebook -> (pattern the text of its last code cell must match, with the measured value as
#: group 1; demo name whose truth it is compared with; truth key; tolerance).
#: A demo name of None: group 1 is a count that must be positive (no truth to compare with).
EXPECTED = {
    "galaxy_redshift.ipynb": (r"z = (\d\.\d+) ± \d\.\d+", "galaxy", "z", 2e-4),
    "paper_table.ipynb": (r"wrote (\d+) tables", None, None, None),
    "nebula_recombination.ipynb": (r"v = ([-+]?\d+\.\d+) km/s", "nebula", "velocity", 3.0),
    "radio_recombination.ipynb": (r"v = ([-+]?\d+\.\d+) km/s", "radio", "velocity", 1.5),
    "xray_hydrogenic.ipynb": (r"z = (\d\.\d+) ± \d\.\d+", "xray", "z", 2e-4),
    "scripting.ipynb": (r"CLI: \d+ lines detected; z = (\d\.\d+) ± \d\.\d+", "galaxy", "z", 2e-5),
}


def _check_galaxy(marks):
    # every locked line within 10 km/s of the solved z (the demo lines share one redshift)
    x, y = marks["residual"]
    assert len(y) >= 4 and np.all(np.abs(y) < 10), y


def _check_nebula(marks):
    # the fitted Hα profile peaks where the nebula's velocity puts Hα: air 6562.80 Å (NIST Atomic
    # Spectra Database, H I 3-2 multiplet; from memory) shifted by the demo truth
    x, y = marks["Hα fit"]
    truth = 6562.80 * (1 + DEMO_TRUTH["nebula"]["velocity"].to_value(u.km / u.s) / C_KMS)
    assert abs(x[np.argmax(y)] - truth) < 0.15, (x[np.argmax(y)], truth)
    for label in ("Hβ data", "Hγ data", "Hδ data", "observed", "dereddened"):
        assert label in marks, sorted(marks)


def _check_radio(marks):
    # the H guide sits at the measured velocity, He and C at their reduced-mass offsets below it
    v_h, v_he, v_c = (marks[f"{sp} guide"][0][0] for sp in ("H I", "He I", "C I"))
    assert abs(v_h - DEMO_TRUTH["radio"]["velocity"].to_value(u.km / u.s)) < 1.5
    # He I and C I against H I at n ~ 110: -122.2 and -149.6 km/s (common practice: the radio
    # recombination-line offsets fixed by the nuclear masses)
    assert abs(v_he - v_h + 122.2) < 0.5 and abs(v_c - v_h + 149.6) < 0.5, (v_h, v_he, v_c)
    assert len(marks["H109α data"][0]) > 50


def _check_xray(marks):
    # the Fe XXVI Lyα1 guide where the demo truth z puts that line
    rest = line_set("xray", unit=u.keV)
    e_rest = rest["rest"][rest["label"] == "Fe XXVI Lyα1"][0].to_value(u.keV)
    x = marks["Fe XXVI Lyα1 guide"][0][0]
    assert abs(x - e_rest / (1 + DEMO_TRUTH["xray"]["z"])) < 2e-4 * e_rest, x
    assert any(k.endswith(" data") and len(v[0]) > 3000 for k, v in marks.items())


def _check_paper(marks):
    x, y = marks["detected"]
    assert len(x) >= 20 and np.all(y > 0)


def _check_scripting(marks):
    assert len(marks["galaxy data"][0]) == 6201   # every pixel of the demo galaxy
    assert sum(k.endswith(" fit") for k in marks) >= 10


#: Notebook -> check of the marks of the figures its last cell shows ({label: (x, y)}).
FIGURE_CHECKS = {
    "galaxy_redshift.ipynb": _check_galaxy,
    "nebula_recombination.ipynb": _check_nebula,
    "radio_recombination.ipynb": _check_radio,
    "xray_hydrogenic.ipynb": _check_xray,
    "paper_table.ipynb": _check_paper,
    "scripting.ipynb": _check_scripting,
}


def _text(output):
    if output["output_type"] == "stream":
        return output["text"]
    return output.get("data", {}).get("text/plain", "")


def _git(root, *args):
    return subprocess.run(["git", "-c", "user.name=zline tests", "-c", "user.email=tests@invalid",
                           "-c", "commit.gpgsign=false", "-c", "init.defaultBranch=main",
                           *args], cwd=root, check=True, capture_output=True, text=True).stdout


def _make_demo_files(root):
    out = subprocess.run(["make", "--no-print-directory", "demo-files",
                          f"BIN={Path(sys.executable).parent}"],
                         cwd=root, check=True, capture_output=True, text=True)
    return out.stdout


def test_every_notebook_has_an_expectation():
    assert NOTEBOOKS, f"no notebooks found in {REPO / 'notebooks'}"
    assert sorted(EXPECTED) == NOTEBOOKS == sorted(FIGURE_CHECKS)


@pytest.fixture(scope="module")
def checkout(tmp_path_factory):
    """A git repository holding the tracked Makefile, .gitignore and notebooks, after `make demo-files`."""
    root = tmp_path_factory.mktemp("checkout")
    tracked = ["Makefile", ".gitignore", *(f"notebooks/{n}" for n in NOTEBOOKS)]
    for rel in tracked:
        (root / rel).parent.mkdir(parents=True, exist_ok=True)
        shutil.copy2(REPO / rel, root / rel)
    _git(root, "init", "-q")
    _git(root, "add", *tracked)
    _git(root, "commit", "-q", "-m", "notebooks")
    _make_demo_files(root)
    return root


#: Notebooks executed at the same time (each kernel is mostly busy on one core; CI has two).
PARALLEL = 2


@pytest.fixture(scope="module")
def executed(checkout):
    """{name: executed notebook} for the demo copies, two kernels at a time; each is saved back in
    place, as JupyterLab's autosave does to an open notebook."""

    async def one(name, slots):
        path = checkout / DEMO_DIR / name
        nb = nbformat.read(path, as_version=4)
        assert nb.metadata["kernelspec"]["name"] == "python3"
        async with slots:
            await NotebookClient(nb, timeout=300, kernel_name="python3",
                                 resources={"metadata": {"path": str(path.parent)}}).async_execute()
        nbformat.write(nb, path)
        return nb

    async def every():
        slots = asyncio.Semaphore(PARALLEL)
        return await asyncio.gather(*(one(name, slots) for name in NOTEBOOKS), return_exceptions=True)

    return dict(zip(NOTEBOOKS, asyncio.run(every())))


def _decode(model, key):
    """A bqplot array trait of a stored widget model, from its base64 buffer."""
    spec = model["state"].get(key)
    if not isinstance(spec, dict):
        return np.asarray(spec if spec is not None else [], dtype=float)
    for buf in model.get("buffers", []):
        if list(buf["path"]) == [key, "value"]:
            data = np.frombuffer(base64.b64decode(buf["data"]), dtype=spec["dtype"])
            return data.reshape(spec["shape"]).astype(float)
    raise AssertionError(f"no buffer for {key!r} in {model['model_name']}")


def _figures(states, model_id):
    """Every bqplot FigureModel under a widget (following box children)."""
    model = states[model_id]
    if model["model_name"] == "FigureModel":
        return [model]
    return [fig for child in model["state"].get("children", [])
            for fig in _figures(states, child.removeprefix("IPY_MODEL_"))]


def _marks(states, figure):
    """{label: (x, y)} of the figure's Lines/Scatter marks (first label of each)."""
    out = {}
    for ref in figure["state"]["marks"]:
        mark = states[ref.removeprefix("IPY_MODEL_")]
        if mark["model_name"] in ("LinesModel", "ScatterModel") and mark["state"].get("labels"):
            out[mark["state"]["labels"][0]] = (_decode(mark, "x"), _decode(mark, "y"))
    return out


@pytest.mark.parametrize("name", NOTEBOOKS)
def test_notebook_runs_and_ends_with_a_result_and_a_figure(name, executed):
    nb = executed[name]
    if isinstance(nb, BaseException):
        raise nb
    code = [cell for cell in nb.cells if cell.cell_type == "code"]
    for i, cell in enumerate(code):
        for out in cell.outputs:
            assert out["output_type"] != "error", f"{name} code cell {i}: {out.get('ename')}"
            assert not (out["output_type"] == "stream" and out["name"] == "stderr"), \
                f"{name} code cell {i} wrote to stderr: {out['text'][:500]}"

    last = code[-1].outputs
    regex, demo, key, tol = EXPECTED[name]
    text = "".join(_text(o) for o in last)
    match = re.search(regex, text)
    assert match, f"{name}: last cell printed {text[-300:]!r}"
    if demo is None:
        assert int(match.group(1)) > 0, f"{name}: {match.group(0)}"
    else:
        truth = DEMO_TRUTH[demo][key]
        truth = truth.to_value(u.km / u.s) if key == "velocity" else truth
        assert abs(float(match.group(1)) - truth) < tol, f"{name}: {match.group(0)} vs truth {truth}"

    views = [o["data"][WIDGET_VIEW]["model_id"] for o in last if WIDGET_VIEW in o.get("data", {})]
    assert views, f"{name}: the last cell shows no widget"
    states = nb.metadata["widgets"][WIDGET_STATE]["state"]
    figures = [fig for view in views for fig in _figures(states, view)]
    assert figures, f"{name}: the last cell's widget holds no bqplot Figure"
    marks = {}
    for fig in figures:
        assert len(fig["state"]["axes"]) >= 2, f"{name}: a figure without axes"
        fig_marks = _marks(states, fig)
        assert any(len(x) >= 2 and np.isfinite(y).sum() >= 2 for x, y in fig_marks.values()), \
            f"{name}: figure {fig['state'].get('title')!r} draws no data"
        marks.update(fig_marks)
    FIGURE_CHECKS[name](marks)


def test_demo_leaves_the_checkout_clean(checkout, executed):
    assert not [name for name, nb in executed.items() if isinstance(nb, BaseException)]
    status = _git(checkout, "status", "--porcelain", "--untracked-files=all")
    assert status == "", f"the demo dirtied the checkout:\n{status}"
    assert (checkout / "notebooks/demo-data/galaxy.fits").is_file()      # demo data stays there
    assert (checkout / DEMO_DIR / "scratch/galaxy_lines.ecsv").is_file()  # outputs in the scratch
    assert (checkout / DEMO_DIR / "scratch/paper-out/lines.ecsv").is_file()
    # a notebook run in place writes to notebooks/scratch, which git ignores as well
    _git(checkout, "check-ignore", "-q", "notebooks/scratch/galaxy_lines.ecsv")

    # preparing the demo again keeps a copy the user ran or edited, and says so when the tracked
    # notebook has moved on
    executed = (checkout / DEMO_DIR / "galaxy_redshift.ipynb").read_bytes()
    tracked = checkout / "notebooks/galaxy_redshift.ipynb"
    tracked.write_text(tracked.read_text().replace("\n}", "\n }", 1))
    said = _make_demo_files(checkout)
    assert (checkout / DEMO_DIR / "galaxy_redshift.ipynb").read_bytes() == executed
    assert "kept your changed" in said and "galaxy_redshift.ipynb" in said, said
