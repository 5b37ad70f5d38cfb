"""The rooms of the widget package: safe clicks, undo/redo, per-row removal, clean state on new data,
the flux axis, display smoothing, the verification strip, keys, and the package's own shape."""

import ast
import hashlib
import json
from pathlib import Path

import astropy.units as u
import numpy as np
import pytest
from ipywidgets.widgets.widget import _remove_buffers

from zline.physics import kinematics
from zline.widgets import LineIdentifier
from zline.widgets._marks import display_smooth, place_labels, robust_limits
from zline.widgets.state import LockBook

TRUE_Z = 0.1     # the invented scenario of conftest.spectrum
REST = np.array([4862.7, 5008.2, 6564.6, 6585.3])
WIDGETS = Path(__file__).resolve().parents[2] / "widgets"


def frontend_update(widget, **state):
    st, paths, bufs = _remove_buffers(state)
    widget._handle_msg({"content": {"data": {"method": "update", "state": st, "buffer_paths": paths}},
                        "buffers": bufs})


def click(catcher, x):
    catcher._handle_msg({"content": {"data": {"method": "custom", "content": {
        "event": "element_click", "data": {"click_x": float(x), "click_y": 0.5}}}}, "buffers": []})


@pytest.fixture
def w(spectrum, lines):
    w = LineIdentifier(spectrum, lines=lines, z=0.0995)
    w.mode = "lock"
    return w


# ------------------------------------------------------------------ safe clicks, undo, removal
def test_a_click_on_empty_continuum_locks_nothing_and_names_the_nearest_lines(w):
    click(w.plot.catcher, 8250.0)
    assert w.locks == ()
    assert "nothing locked" in w.status and "L6585" in w.status
    tol = w.click_tolerance()
    assert tol == pytest.approx(max(4 * 0.25, 6 * 5000.0 / w.plot.plot_px), rel=1e-2)
    predicted = 4862.7 * 1.0995                          # no other line within 150 A
    click(w.plot.catcher, predicted - 1.2 * tol)         # just outside the tolerance
    assert w.locks == ()
    click(w.plot.catcher, predicted + 0.3 * tol)         # inside: locked, at the fitted centre
    assert [k.label for k in w.locks] == ["L4863"]
    assert abs(w.locks[0].observed.to_value(u.AA) - 4862.7 * 1.1) < 0.5
    assert str(round(tol, 1))[:3] in w.ui.help.value or "screen pixels" in w.ui.help.value


def test_undo_redo_and_per_row_removal(w):
    w.lock(near=7221 * u.AA)
    w.lock(near=5509 * u.AA)
    assert [k.label for k in w.locks] == ["L6565", "L5008"]
    rows = [c for c in w.ui.lock_table.children if hasattr(c, "children")]
    assert len(rows) == 2
    rows[0].children[0].click()                          # the remove button of the first row
    assert [k.label for k in w.locks] == ["L5008"]
    assert np.asarray(w.plot.locked_marks.x).size == 1
    assert w.undo() and [k.label for k in w.locks] == ["L6565", "L5008"]
    assert w.undo() and [k.label for k in w.locks] == ["L6565"]
    assert w.redo() and [k.label for k in w.locks] == ["L6565", "L5008"]
    w.ui.undo.click()
    w.lock(near=4862.7 * 1.0995 * u.AA)                  # a new change drops the redo branch
    assert not w.redo() and "nothing to redo" in w.status
    assert w.ui.redo.disabled and not w.ui.undo.disabled
    w.annotate("L4863", "blend?")
    assert w.undo() and w.locks[-1].note == ""


def test_lock_book_history_walks_whole_states():
    book = LockBook()

    class L:
        def __init__(self, label):
            self.label = label

    class E:
        def __init__(self, label):
            self.lock = L(label)
    for name in "abc":
        book.add(E(name))
    book.remove("b")
    assert [e.lock.label for e in book] == ["a", "c"]
    book.clear()
    assert len(book) == 0 and book.undo() and [e.lock.label for e in book] == ["a", "c"]
    while book.undo():
        pass
    assert len(book) == 0 and not book.can_undo and book.can_redo


def test_keys_drive_the_widget(w):
    z0, step = w.z, w.ui.slider.step
    w._on_key("z_up")
    assert w.z == pytest.approx(z0 + step)
    step1 = w.ui.slider.step                   # the step follows z (and the view)
    w._on_key("z_down10")
    assert w.z == pytest.approx(z0 + step - 10 * step1)
    w._on_key("mode_pan")
    assert w.mode == "pan/zoom"
    w._on_key("mode_lock")
    w.lock(near=7221 * u.AA)
    w._on_key("drop_last")
    assert w.locks == ()
    w._on_key("undo")
    assert len(w.locks) == 1
    w._on_key("solve")
    assert w._solution is not None and w.z == w._solution.z
    assert "<kbd>u</kbd>" in w.ui.help.value


# ------------------------------------------------------------------ new data, clean state
def test_loading_a_spectrum_starts_clean_and_picks_the_line_set(spectrum, spectrum_file):
    from specutils import Spectrum
    w = LineIdentifier(spectrum, lines="galaxy-emission", z=0.0995)
    w.scan(z_min=0.05, z_max=0.2, top=2)
    w.lock(near=7221 * u.AA)
    w.solve()
    w.load(spectrum_file)
    assert w.locks == () and w._solution is None and w.candidates == () and w.ui.candidates.options == ()
    assert not w._book.can_undo
    assert "invented.fits" in w._header.value and "opened invented.fits" in w.status
    nu = np.linspace(4.0, 6.0, 4000)
    radio = Spectrum(spectral_axis=nu * u.GHz, flux=np.ones(nu.size) * u.mJy)
    w.load(radio)
    assert w._set_name == "radio" and "frequency" in w.status
    assert w.observed_positions().unit == u.GHz


def test_an_upload_keeps_its_name_and_sha256_into_the_session(w, spectrum_file, tmp_path):
    data = spectrum_file.read_bytes()
    frontend_update(w.ui.upload, value=[{"name": "night3.fits", "type": "application/fits", "size": len(data),
                                         "content": memoryview(data), "last_modified": 1764633600000}])
    assert w._source_name == "night3.fits" and "night3.fits" in w._header.value
    assert w._source_sha256 == hashlib.sha256(data).hexdigest()
    w.lock(near=7221 * u.AA)
    path = w.save(tmp_path / "s.json")
    settings = json.loads(path.read_text())["settings"]
    assert settings["source_name"] == "night3.fits"
    assert settings["source_sha256"] == hashlib.sha256(data).hexdigest()
    r = LineIdentifier.restore(path, spectrum=data, lines="galaxy-emission")
    assert r._source_sha256 == w._source_sha256 and r.locks[0].label == "Hα"


# ------------------------------------------------------------------ flux axis
def test_autoscale_ignores_one_spike_but_keeps_a_line():
    rng = np.random.default_rng(1)
    y = 1.0 + rng.normal(0, 0.01, 500)
    y[100:105] += np.array([0.5, 2.0, 3.0, 2.0, 0.5])    # a resolved line
    y[300] = 1000.0                                       # a one-pixel spike
    lo, hi = robust_limits(y)
    assert 3.0 < hi < 10.0 and lo < 1.0
    lo, hi = robust_limits(y, log=True)
    assert 0 < lo < 1.0 and 4.0 < hi < 100.0


def test_flux_axis_zoom_log_and_autoscale_follow_the_view(w):
    frontend_update(w.plot.xs, min=7150.0, max=7300.0)
    w.ui.autoscale.click()
    assert w.plot.ys.max == pytest.approx(1 + 5.0, rel=0.2)      # Hα peaks at 1 + 5 here
    span = w.plot.ys.max - w.plot.ys.min
    w.ui.y_in.click()
    assert w.plot.ys.max - w.plot.ys.min == pytest.approx(span / 2)
    w.ui.log.value = True
    assert w.log_flux and w.plot.ys is w.plot.log_ys and w.plot.line.scales["y"] is w.plot.log_ys
    assert w.plot.yaxis.scale is w.plot.log_ys and w.plot.ys.min > 0
    w.log_flux = False
    assert w.plot.line.scales["y"] is w.plot.lin_ys and not w.ui.log.value


def test_display_smoothing_never_changes_what_is_measured(w):
    frontend_update(w.plot.xs, min=7400.0, max=7600.0)   # every pixel drawn, none decimated
    raw = np.asarray(w.plot.line.y).copy()
    before = w.lock(near=7221 * u.AA)
    w.ui.smooth.value = "gaussian"
    w.ui.smooth_px.value = 9.0
    assert w.smoothing == "gaussian" and w.smoothing_px == 9.0
    smoothed = np.asarray(w.plot.line.y)
    assert np.nanstd(np.diff(smoothed)) < 0.5 * np.nanstd(np.diff(raw))
    after = w.lock(near=7221 * u.AA)
    assert after.observed == before.observed and after.observed_err == before.observed_err
    y = np.zeros(41)
    y[20] = 1.0
    assert display_smooth(y, "boxcar", 5).sum() == pytest.approx(1.0)
    g = display_smooth(y, "gaussian", 6.0)
    half = np.flatnonzero(g >= g.max() / 2)
    assert half.size in (5, 6, 7)                            # FWHM ~ 6 pixels


# ------------------------------------------------------------------ verification strip
def test_strip_panels_sit_on_the_predicted_lines_and_follow_z(w):
    shown = [i for i in w.strip.shown_lines() if i is not None]
    assert {w._labels[i] for i in shown} == {"L4863", "L5008", "L6565", "L6585"}
    panel = next(p for p in w.strip.panels if p["line"] is not None and w._labels[p["line"]] == "L6565")
    v = np.asarray(panel["data"].x)
    y = np.asarray(panel["data"].y)
    # Hα sits at z = 0.1 but the overlay at 0.0995: the peak is at c * 0.0005 / 1.0995 ~ +136 km/s
    expected = kinematics.velocity_from(6564.6 * 1.1 * u.AA, 6564.6 * 1.0995 * u.AA).to_value(u.km / u.s)
    assert v[np.nanargmax(y)] == pytest.approx(expected, abs=20.0)
    assert -1.31 * w.strip.half_width <= v.min() < -w.strip.half_width < w.strip.half_width < v.max() <= 1.31 * w.strip.half_width
    w.z = TRUE_Z
    v = np.asarray(panel["data"].x)
    assert abs(v[np.nanargmax(np.asarray(panel["data"].y))]) < 20.0
    assert panel["vs"].min == -w.strip.half_width


def test_a_click_in_a_panel_locks_its_line_and_shows_its_fit(w):
    panel = next(p for p in w.strip.panels if p["line"] is not None and w._labels[p["line"]] == "L5008")
    click(panel["catcher"], 130.0)
    assert [k.label for k in w.locks] == ["L5008"]
    fit = np.asarray(panel["fit"].y, dtype=float)
    assert np.isfinite(fit).sum() > 50 and np.nanmax(fit) > 3.0
    fwhm = w.locks[0].fit.fwhm_kms.to_value(u.km / u.s)
    assert w.strip.half_width == max(300.0, np.ceil(3 * fwhm / 100) * 100)


# ------------------------------------------------------------------ labels
def test_place_labels_respects_widths_and_strength():
    rows = place_labels([100.0, 120.0, 400.0], [60.0, 30.0, 30.0], [0.5, 1.0, 0.1], rows=2)
    assert rows.tolist() == [1, 0, 0]
    rows = place_labels([100.0, 120.0, 110.0], [60.0, 30.0, 30.0], [0.5, 1.0, 0.1], rows=2)
    assert rows.tolist() == [1, 0, -1]


# ------------------------------------------------------------------ the package itself
def test_the_package_has_small_rooms_and_plain_imports():
    for path in WIDGETS.glob("*.py"):
        text = path.read_text()
        assert len(text.splitlines()) <= 400, f"{path.name} has {len(text.splitlines())} lines"
        tree = ast.parse(text)
        names = {a.name for n in ast.walk(tree) if isinstance(n, (ast.Import, ast.ImportFrom))
                 for a in n.names} | {n.module for n in ast.walk(tree) if isinstance(n, ast.ImportFrom) and n.module}
        assert "importlib" not in names, path.name
    state = ast.parse((WIDGETS / "state.py").read_text())
    imported = {a.name.split(".")[0] for n in ast.walk(state) if isinstance(n, ast.Import) for a in n.names}
    imported |= {n.module.split(".")[0] for n in ast.walk(state) if isinstance(n, ast.ImportFrom) and n.module}
    assert not imported & {"bqplot", "ipywidgets"}
