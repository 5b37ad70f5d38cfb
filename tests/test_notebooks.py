"""Every notebook in notebooks/ runs top to bottom in a fresh python3 kernel and ends with a result.

Each notebook runs in a temporary copy of the notebooks folder, so the demo spectra it writes
never land in the repository.  A notebook passes when no cell raised, nothing was written to
stderr (warnings included) and its last code cell shows the result named in `EXPECTED`.
"""

import re
import shutil
from pathlib import Path

import astropy.units as u
import nbformat
import pytest
from nbclient import NotebookClient

from zline.physics.demo import DEMO_TRUTH

NOTEBOOKS_DIR = Path(__file__).resolve().parents[1] / "notebooks"
NOTEBOOKS = sorted(p.name for p in NOTEBOOKS_DIR.glob("*.ipynb"))

WIDGET_MIME = "application/vnd.jupyter.widget-view+json"

#: Notebook -> (pattern the text of its last code cell must match, with the measured value as
#: group 1; demo name whose truth it is compared with; truth key; tolerance).  None: a widget view.
#: A demo name of None: group 1 is a count that must be positive (no truth to compare with).
EXPECTED = {
    "galaxy_redshift.ipynb": (r"z = (\d\.\d+) ± \d\.\d+", "galaxy", "z", 2e-4),
    "paper_table.ipynb": (r"wrote (\d+) tables", None, None, None),
    "nebula_recombination.ipynb": (r"v = ([-+]?\d+\.\d+) km/s", "nebula", "velocity", 3.0),
    "radio_recombination.ipynb": (r"v = ([-+]?\d+\.\d+) km/s", "radio", "velocity", 1.5),
    "xray_hydrogenic.ipynb": (r"z = (\d\.\d+) ± \d\.\d+", "xray", "z", 2e-4),
    "scripting.ipynb": (r"CLI: \d+ lines detected; z = (\d\.\d+) ± \d\.\d+", "galaxy", "z", 2e-5),
}


def _text(output):
    if output["output_type"] == "stream":
        return output["text"]
    return output.get("data", {}).get("text/plain", "")


def test_every_notebook_has_an_expectation():
    assert NOTEBOOKS, f"no notebooks found in {NOTEBOOKS_DIR}"
    assert sorted(EXPECTED) == NOTEBOOKS


@pytest.fixture(scope="module")
def workdir(tmp_path_factory):
    """A copy of the notebooks folder (without demo data written by earlier runs)."""
    dest = tmp_path_factory.mktemp("nb") / "notebooks"
    shutil.copytree(NOTEBOOKS_DIR, dest, ignore=shutil.ignore_patterns("demo-data", ".ipynb_checkpoints"))
    return dest


@pytest.mark.parametrize("name", NOTEBOOKS)
def test_notebook_runs_and_ends_with_a_result(name, workdir):
    nb = nbformat.read(workdir / name, as_version=4)
    assert nb.metadata["kernelspec"]["name"] == "python3"
    client = NotebookClient(nb, timeout=300, kernel_name="python3",
                            resources={"metadata": {"path": str(workdir)}})
    client.execute()

    code = [c for c in nb.cells if c.cell_type == "code"]
    for i, cell in enumerate(code):
        for out in cell.outputs:
            assert out["output_type"] != "error", f"{name} code cell {i}: {out.get('ename')}"
            assert not (out["output_type"] == "stream" and out["name"] == "stderr"), \
                f"{name} code cell {i} wrote to stderr: {out['text'][:500]}"

    last = code[-1].outputs
    pattern = EXPECTED[name]
    if pattern is None:
        assert any(WIDGET_MIME in o.get("data", {}) for o in last), f"{name}: no widget shown"
    else:
        regex, demo, key, tol = pattern
        text = "".join(_text(o) for o in last)
        match = re.search(regex, text)
        assert match, f"{name}: last cell printed {text[-300:]!r}"
        if demo is None:
            assert int(match.group(1)) > 0, f"{name}: {match.group(0)}"
        else:
            truth = DEMO_TRUTH[demo][key]
            truth = truth.to_value(u.km / u.s) if key == "velocity" else truth
            assert abs(float(match.group(1)) - truth) < tol, \
                f"{name}: {match.group(0)} vs truth {truth}"
    assert (workdir / "demo-data").is_dir()
