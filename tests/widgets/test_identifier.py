"""LineIdentifier without a browser: traits and controls, simulated frontend messages, locks,
tables, save/restore and error display."""

import os
from unittest import mock

import astropy.units as u
import numpy as np
import pytest
import traitlets
from astropy.tests.helper import assert_quantity_allclose
from ipywidgets.widgets.widget import _remove_buffers

from zline.physics import kinematics
from zline.widgets import LineIdentifier
from zline.widgets._marks import marker_arrays, stagger_labels, thin_labels

# the invented scenario of conftest.spectrum: four lines at z = 0.1
TRUE_Z = 0.1
REST = np.array([4862.7, 5008.2, 6564.6, 6585.3])
AMPLITUDE = np.array([1.0, 3.0, 5.0, 1.5])


def frontend_update(widget, **state):
    """A browser -> kernel 'update' message."""
    st, paths, bufs = _remove_buffers(state)
    widget._handle_msg({"content": {"data": {"method": "update", "state": st, "buffer_paths": paths}},
                        "buffers": bufs})


def frontend_custom(widget, content):
    """A browser -> kernel custom message (mark events)."""
    widget._handle_msg({"content": {"data": {"method": "custom", "content": content}}, "buffers": []})


def click(w, x):
    frontend_custom(w.plot.catcher, {"event": "element_click", "data": {"click_x": float(x), "click_y": 1.0}})


@pytest.fixture
def w(spectrum, lines):
    return LineIdentifier(spectrum, lines=lines, z=0.0995)


def marker_positions(w):
    """Observed positions drawn by every predicted-line mark, sorted (NaN separators dropped)."""
    xs = np.concatenate([np.asarray(g["guide"].x, float) for g in w.plot.groups])
    return np.unique(xs[np.isfinite(xs)])


# ------------------------------------------------------------------ traits and controls
def test_traits_follow_controls_and_back(w):
    frontend_update(w.ui.slider, value=0.0055)   # the slider moves z from its anchor (0.0995)
    assert w.z == pytest.approx(0.105)
    assert w.ui.z_text.value == w.format_z(w.z)
    assert w.ui.slider.value == 0.0055           # a drag is not recentred under the pointer
    frontend_update(w.ui.z_text, value="0.1012345")
    assert w.z == 0.1012345                      # typed: exactly, not rounded to a slider step
    assert w.ui.slider.value == 0.0 and w._anchor == 0.1012345
    w.velocity = 250.0
    assert w.ui.v_text.value == 250.0
    frontend_update(w.ui.v_text, value=-80.0)
    assert w.velocity == -80.0
    frontend_update(w.ui.conv, index=list(w.ui.conv.options).index("relativistic"))
    assert w.convention == "relativistic"
    w.z = 3.7                                   # any z from code: the slider recentres on it
    assert w.ui.slider.value == 0.0 and w._anchor == 3.7 and w.ui.slider.min < 0 < w.ui.slider.max


def test_observer_fires_once_per_change(w):
    seen = mock.Mock()
    w.observe(seen, names="z")
    frontend_update(w.ui.slider, value=0.02)
    seen.assert_called_once()
    assert seen.call_args[0][0]["new"] == pytest.approx(0.1195)
    frontend_update(w.ui.slider, value=0.02)     # same value again: no new event
    seen.assert_called_once()


def test_bad_convention_and_bare_numbers_are_refused(w, spectrum, lines):
    with pytest.raises(traitlets.TraitError, match="'convention' must be one of"):
        w.convention = "sideways"
    with pytest.raises(u.UnitTypeError, match="'velocity' must be a Quantity"):
        LineIdentifier(spectrum, lines=lines, velocity=100.0)
    with pytest.raises(u.UnitTypeError, match="'near' must be a Quantity"):
        w.lock(near=7220.0)


def test_slider_step_follows_the_visible_range(w):
    w.z = 0.1
    coarse = w.ui.slider.step
    # dragging across the whole slider moves a line across the whole view (5000 A here)
    assert 6564.6 * (w.ui.slider.max - w.ui.slider.min) / 1.1 == pytest.approx(5000.0, rel=0.05)
    frontend_update(w.plot.xs, min=7200.0, max=7240.0)     # zoom onto one line
    fine = w.ui.slider.step
    assert fine < coarse / 50
    # one step moves a line by a small fraction of a spectrum pixel (0.25 A here)
    assert 6564.6 * fine < 0.1 * 0.25
    assert w.ui.slider.value == 0.0 and w._anchor == w.z == 0.1


def test_a_typed_z_far_away_lands_exactly(w):
    frontend_update(w.plot.xs, min=7200.0, max=7240.0)     # narrow slider window
    for text in ("0.5", "0.0733985", "2.3456789012"):
        frontend_update(w.ui.z_text, value=text)
        assert w.z == float(text) and w._anchor == w.z and w.ui.slider.value == 0.0
    frontend_update(w.ui.z_text, value="not a number")
    assert w.z == 2.3456789012 and "Problem" in w.status
    assert w.ui.z_text.value == w.format_z(w.z)


def test_medium_is_required_when_the_spectrum_does_not_say(spectrum, lines):
    spectrum.meta["zline"].pop("medium")
    with pytest.raises(ValueError, match="medium='air' or medium='vacuum'"):
        LineIdentifier(spectrum, lines=lines)
    w = LineIdentifier(spectrum, lines=lines, medium="air")
    assert "air" in w.plot.xaxis.label and "Å" in w.plot.xaxis.label


# ------------------------------------------------------------------ overlay
def test_markers_sit_at_the_physics_positions(w):
    for z, v, conv in [(0.098, 0.0, "optical"), (0.31, 1500.0, "relativistic"), (0.0, -300.0, "radio")]:
        with w.hold_trait_notifications():
            w.z, w.velocity, w.convention = z, v, conv
        expected = kinematics.observed_position(REST * u.AA, z=z, velocity=v * u.km / u.s, convention=conv)
        np.testing.assert_allclose(marker_positions(w), np.sort(expected.to_value(u.AA)), rtol=1e-12)
        assert_quantity_allclose(np.sort(w.observed_positions()), np.sort(expected), rtol=1e-12)


def strip_ids(w):
    ids = set()
    for p in w.strip.panels:
        for key in ("fig", "vs", "ys", "data", "fit", "catcher"):
            ids.add(p[key].comm.comm_id)
        ids.add(p["fig"].layout.comm.comm_id)
    return ids | {w.strip.title.comm.comm_id}


def test_z_change_sends_only_x_of_the_line_marks(sent, spectrum, lines):
    w = LineIdentifier(spectrum, lines=lines, z=0.098)
    allowed = {g[k].comm.comm_id for g in w.plot.groups for k in ("guide", "tick", "label")}
    sent.clear()
    w.z = 0.0985                                # small move: labels keep their rows
    updates = [(cid, d) for cid, kind, d, _ in sent if d and d.get("method") == "update"]
    assert updates, "a z change must reach the frontend"
    for cid, d in updates:
        if cid in allowed:
            assert set(d["state"]) == {"x"}, d["state"].keys()
    assert {cid for cid, _ in updates if cid in allowed} == allowed
    # the only other widgets allowed to change are the z controls and the verification strip
    ctrl = {w.ui.slider.comm.comm_id, w.ui.z_text.comm.comm_id} | strip_ids(w)
    other = [(cid, d["state"].keys()) for cid, d in updates if cid not in allowed | ctrl]
    assert not other, other


def test_one_nan_separated_mark_per_style_group(w):
    keys = [g["key"] for g in w.plot.groups]
    assert sorted(keys) == [("computed", False), ("computed", True), ("tabulated", False), ("tabulated", True)]
    style = {g["key"]: g["guide"].line_style for g in w.plot.groups}
    assert style[("computed", True)] == "solid" and style[("computed", False)] == "dashed"
    colours = {g["key"][0]: tuple(g["guide"].colors) for g in w.plot.groups}
    assert colours["computed"] != colours["tabulated"]
    for g in w.plot.groups:
        x = np.asarray(g["guide"].x)
        assert x.ndim == 1 and np.isnan(x[2::3]).all() and x.size == 3 * g["index"].size


def test_the_data_are_drawn_on_top_of_thin_translucent_guides(w):
    marks = list(w.figure.marks)
    top = marks.index(w.plot.line)
    for g in w.plot.groups:
        assert marks.index(g["guide"]) < top              # guides beneath the spectrum
        assert g["guide"].stroke_width <= 1.0 and g["guide"].opacities[0] <= 0.5
        assert g["label"] in w.plot.band_figure.marks     # labels in their own band, not over the data
        assert g["label"] not in marks
    assert marks.index(w.plot.band) < top and w.plot.band.fill_opacities[0] >= 0.5
    assert "locked" in w.plot.key.value and "computed" in w.plot.key.value


def test_labels_thin_out_and_keep_the_strongest():
    pixels = np.array([100.0, 105.0, 130.0, 131.0, np.nan, 300.0])
    strength = np.array([0.2, 0.9, 0.5, 0.1, 1.0, 0.05])
    show = thin_labels(pixels, strength, 14.0)
    assert show.tolist() == [False, True, True, False, False, True]
    kept = np.sort(pixels[show])
    assert np.diff(kept).min() >= 14.0


def test_marker_arrays_are_vertical_segments():
    x, y = marker_arrays([1.0, 2.0], 0.0, 5.0)
    np.testing.assert_array_equal(x[[0, 1, 3, 4]], [1, 1, 2, 2])
    np.testing.assert_array_equal(y[[0, 1, 3, 4]], [0, 5, 0, 5])
    assert np.isnan(x[[2, 5]]).all() and np.isnan(y[[2, 5]]).all()


def test_zoom_redecimates_and_shades_masked_pixels(w, spectrum):
    full = np.asarray(w.plot.line.x).size
    assert full <= 2 * w.plot.plot_px + 8           # decimated, not 20000 points
    frontend_update(w.plot.xs, min=5200.0, max=5300.0)
    x = np.asarray(w.plot.line.x)
    assert x.min() >= 5200.0 - 1 and x.max() <= 5300.0 + 1
    axis = spectrum.spectral_axis.value
    inside = (axis >= 5200.0) & (axis <= 5300.0)
    assert x.size == inside.sum()               # fewer pixels than screen columns: every pixel shown
    masked_x = axis[spectrum.mask]
    sx = np.asarray(w.plot.shade_masked.x)
    sy = np.asarray(w.plot.shade_masked.y)
    assert sx.min() < masked_x.min() and sx.max() > masked_x.max() and sy[1].max() == 1.0
    band = np.asarray(w.plot.band.y)
    assert band.shape[0] == 2 and np.nanmin(band[1] - band[0]) > 0
    assert w.plot.catcher.x.tolist() == [5200.0, 5300.0]


def test_zoom_to_line(w):
    w.zoom_to("L6565")
    centre = 6564.6 * kinematics.shift_factor(w.z, 0 * u.km / u.s, "optical")
    assert w.plot.xs.min < centre < w.plot.xs.max
    assert w.plot.xs.max - w.plot.xs.min < 100


# ------------------------------------------------------------------ locking
def test_click_in_lock_mode_locks_at_a_fitted_centroid(w):
    click(w, 7219.0)                            # pan/zoom mode: a click does nothing
    assert len(w.locks) == 0
    frontend_update(w.ui.mode, index=list(w.ui.mode.options).index("lock"))
    assert w.mode == "lock" and w.figure.interaction is None
    click(w, 7219.0)
    assert len(w.locks) == 1
    lock = w.locks[0]
    assert lock.label == "L6565"
    assert lock.fit is not None
    truth = 6564.6 * (1 + TRUE_Z)
    assert abs(lock.observed.to_value(u.AA) - truth) < 5 * lock.observed_err.to_value(u.AA) + 0.01
    assert abs(lock.observed.to_value(u.AA) - 7219.0) > 1.0   # snapped, not the raw click
    w.mode = "pan/zoom"
    assert w.figure.interaction is w.plot.panzoom
    w.mode = "y only"
    assert w.figure.interaction is w.plot.yzoom and list(w.plot.yzoom.scales) == ["y"]


def test_failed_fit_falls_back_with_a_warning(w):
    lock = w.lock(near=8500.0 * u.AA)           # flat continuum there: nothing to fit
    assert lock.fit is None
    assert lock.observed.to_value(u.AA) == pytest.approx(8500.0)
    assert "Warning" in w.status and "failed" in w.status


def test_locks_persist_when_z_moves(w):
    w.lock(near=7221 * u.AA)
    w.lock(near=5509 * u.AA)
    before = np.asarray(w.plot.locked_top.x).copy()
    markers_before = marker_positions(w)
    w.z = 0.5
    assert len(w.locks) == 2
    np.testing.assert_array_equal(np.asarray(w.plot.locked_top.x), before)
    after = marker_positions(w)                 # lines that left the view are not drawn
    assert after.size != markers_before.size or not np.allclose(after, markers_before)
    expected = REST * 1.5
    np.testing.assert_allclose(after, np.sort(expected[(expected >= 4000) & (expected <= 9000)]), rtol=1e-12)
    assert list(w.plot.locked_labels.text) == ["L6565", "L5008"]


def test_relock_replaces_unlock_and_annotate(w):
    w.lock(near=7221 * u.AA)
    w.lock(near=7222 * u.AA)
    assert [k.label for k in w.locks] == ["L6565"]
    w.lock(near=5350 * u.AA)
    w.annotate("L6565", "peak of the brightest line")
    assert w.locks[0].note == "peak of the brightest line"
    w.unlock("L6565")
    assert [k.label for k in w.locks] == ["L4863"]
    w.unlock(0)
    assert w.locks == ()
    with pytest.raises(KeyError, match="no locked line labelled"):
        w.unlock("nothing")


def test_solve_sets_z_and_shows_sigma(w):
    with pytest.raises(ValueError, match="lock at least one line"):
        w.solve()
    for x in (7221, 5509, 5349):
        w.lock(near=x * u.AA)
    z, z_err = w.solve()
    assert w.z == z
    assert abs(z - TRUE_Z) < 5 * z_err + 1e-6
    assert 0 < z_err < 1e-4
    shown = " ".join(c.value for c in w.ui.lock_table.children if hasattr(c, "value"))
    assert "&sigma;" in shown and "residual" in shown


def test_table_has_one_row_per_lock(w):
    for x in (7221, 5509):
        w.lock(near=x * u.AA)
    w.lock(near=8500 * u.AA, line="L6585")      # forced label, no fit there
    w.solve()
    t = w.table()
    assert len(t) == 3
    for name in ("label", "rest", "observed", "observed_err", "residual_kms", "fitted", "fit_flux",
                 "fit_flux_err", "fit_fwhm", "fit_ew", "fit_snr", "note", "species"):
        assert name in t.colnames
    assert t["rest"].unit == u.AA and t["residual_kms"].unit == u.km / u.s
    assert t["fitted"].tolist() == [True, True, False]
    assert np.isnan(t["fit_flux"][2].value) and t["fit_flux"][0].value > 0
    assert_quantity_allclose(t["rest"], [6564.6, 5008.2, 6585.3] * u.AA)
    # the residual of each lock is its velocity relative to the solved redshift
    expected = kinematics.velocity_from(t["observed"], t["rest"], convention="optical", z=w.z)
    assert_quantity_allclose(t["residual_kms"], expected)
    assert t.meta["z"] == w.z and "z_err" in t.meta


# ------------------------------------------------------------------ errors in the widget
def test_upload_of_bytes_that_are_not_fits_shows_a_plain_error(w):
    frontend_update(w.ui.upload, value=[{"name": "notes.fits", "type": "application/fits", "size": 20,
                                       "content": memoryview(b"this is not a FITS file"),
                                       "last_modified": 1764633600000}])
    assert "Problem" in w.status and "could not open" in w.status
    assert "Traceback" not in w.status
    assert np.asarray(w.plot.line.x).size > 0       # the old spectrum stays on screen


# ------------------------------------------------------------------ files, line sets, sessions
def test_opens_a_fits_path_with_a_named_line_set(spectrum_file):
    from zline.physics import catalog
    w = LineIdentifier(spectrum_file, lines="galaxy-emission", z=0.1)
    table = catalog.line_set("galaxy-emission", medium="vacuum", unit=u.AA)
    assert sum(g["index"].size for g in w.plot.groups) == len(table)
    assert {g["key"][0] for g in w.plot.groups} <= set(table["origin"])
    assert "vacuum" in w.plot.xaxis.label
    frontend_update(w.ui.set_menu, index=list(w.ui.set_menu.options).index("hydrogen"))
    assert sum(g["index"].size for g in w.plot.groups) == len(catalog.line_set("hydrogen"))
    assert all(g["guide"] in w.figure.marks for g in w.plot.groups)


def test_upload_of_a_good_fits_replaces_the_spectrum(w, spectrum_file):
    w.lock(near=7221 * u.AA)
    data = spectrum_file.read_bytes()
    frontend_update(w.ui.upload, value=[{"name": "new.fits", "type": "application/fits", "size": len(data),
                                       "content": memoryview(data), "last_modified": 1764633600000}])
    assert "opened new.fits" in w.status
    assert w.locks == ()                        # locks belonged to the previous spectrum


def test_save_and_restore_round_trip(tmp_path, spectrum_file, lines):
    w = LineIdentifier(spectrum_file, lines=lines, z=0.0995)
    for x in (7221, 5509):
        w.lock(near=x * u.AA)
    w.lock(near=8500 * u.AA, line="L6585", note="no line here")
    w.solve()
    w.zoom_to("L6565")
    path = w.save(tmp_path / "session.json")
    with pytest.raises(FileExistsError):
        w.save(tmp_path / "session.json")
    assert "exists already" in w.status
    with pytest.raises(ValueError, match="custom line table"):
        LineIdentifier.restore(path)
    r = LineIdentifier.restore(path, lines=lines)
    assert r.z == w.z and r.convention == w.convention
    assert [k.label for k in r.locks] == [k.label for k in w.locks]
    for a, b in zip(r.locks, w.locks):
        assert_quantity_allclose(a.observed, b.observed)
        assert_quantity_allclose(a.observed_err, b.observed_err)
        assert a.note == b.note
    t0, t1 = w.table(), r.table()
    assert t0.colnames == t1.colnames
    for name in ("observed", "residual_kms", "fit_flux", "fit_fwhm", "fit_ew"):
        assert_quantity_allclose(t1[name], t0[name], equal_nan=True)
    assert t1["fitted"].tolist() == [True, True, False]
    assert (r.plot.xs.min, r.plot.xs.max) == pytest.approx((w.plot.xs.min, w.plot.xs.max))
    np.testing.assert_array_equal(np.asarray(r.plot.locked_top.x), np.asarray(w.plot.locked_top.x))


def test_frequency_axis_divides_by_the_shift_and_absorption_locks_fit():
    from astropy.table import QTable
    from specutils import Spectrum
    rng = np.random.default_rng(3)
    nu = np.linspace(4.0, 6.0, 8000)                      # invented radio band, GHz, no medium
    rest = np.array([5.2, 5.5]) * u.GHz
    z = 0.02
    flux = 1.0 + rng.normal(0.0, 0.01, nu.size)
    for r in rest.value:                                  # absorption dips
        flux -= 0.5 * np.exp(-0.5 * ((nu - r / (1 + z)) / 0.003) ** 2)
    sp = Spectrum(spectral_axis=nu * u.GHz, flux=flux * u.mJy)
    lines = QTable({"label": ["A", "B"], "rest": rest, "strength": [1.0, 0.5]})
    w = LineIdentifier(sp, lines=lines, z=z, velocity=40 * u.km / u.s, convention="radio")
    assert w.plot.xaxis.label.startswith("observed frequency") and "vacuum" not in w.plot.xaxis.label
    expected = kinematics.observed_position(rest, z=z, velocity=40 * u.km / u.s, convention="radio")
    np.testing.assert_allclose(marker_positions(w), np.sort(expected.to_value(u.GHz)), rtol=1e-12)
    w.velocity = 0.0
    lock = w.lock(near=(5.2 / (1 + z) + 0.002) * u.GHz)
    assert lock.label == "A" and lock.fit is not None
    assert abs(lock.observed.to_value(u.GHz) - 5.2 / (1 + z)) < 5 * lock.observed_err.to_value(u.GHz) + 1e-5


def test_demo_notebook_runs_and_leaves_a_widget(tmp_path):
    import shutil
    from pathlib import Path

    import nbformat
    from nbclient import NotebookClient
    source = Path(__file__).resolve().parents[2] / "notebooks" / "galaxy_redshift.ipynb"
    shutil.copy(source, tmp_path / source.name)
    nb = nbformat.read(tmp_path / source.name, as_version=4)
    assert nb.metadata["kernelspec"]["name"] == "python3"
    client = NotebookClient(nb, timeout=120, kernel_name="python3", resources={"metadata": {"path": str(tmp_path)}})
    client.execute()
    out = nb.cells[0].outputs
    assert [o["output_type"] for o in out] == ["execute_result"]
    assert "application/vnd.jupyter.widget-view+json" in out[0]["data"]
    assert (tmp_path / "demo-data" / "galaxy.fits").exists()


# ------------------------------------------------------------------ label rows
def test_stagger_puts_close_neighbours_in_lower_rows_and_keeps_the_strongest():
    pixels = np.array([100.0, 105.0, 110.0, 112.0, np.nan, 300.0])
    strength = np.array([0.2, 0.9, 0.5, 0.1, 1.0, 0.05])
    rows = stagger_labels(pixels, strength, 14.0, rows=3)
    assert rows[1] == 0                      # the strongest of the cluster keeps the top row
    assert rows[4] == -1 and rows[5] == 0    # off screen hidden; a lone label stays on top
    assert sorted(rows[[0, 2]].tolist()) == [1, 2] and rows[3] == -1     # fourth fits in no row
    np.testing.assert_array_equal(stagger_labels(pixels, strength, 14.0, rows=1) >= 0,
                                  thin_labels(pixels, strength, 14.0))
    with pytest.raises(ValueError, match="rows"):
        stagger_labels(pixels, strength, 14.0, rows=0)


def label_extents(w):
    """(row, left, right) in screen pixels of every label shown in the band, locks included."""
    lo, hi = w.plot.view_range()
    scale = w.plot.plot_px / (hi - lo)
    out = []
    for g in w.plot.groups:
        for x, text, r in zip(g["label"].x, g["label"].text, w.plot.rows[g["shown"]]):
            if text:
                half = len(text) * 6.4 / 2
                out.append((r, (x - lo) * scale - half, (x - lo) * scale + half))
    for x, text, r in zip(w.plot.locked_labels.x, w.plot.locked_labels.text, w.plot.locked_rows):
        if text:
            half = len(text) * 6.4 / 2
            out.append((r, (x - lo) * scale - half, (x - lo) * scale + half))
    return out


def assert_no_overlap(extents):
    for r in {e[0] for e in extents}:
        row = sorted((a, b) for rr, a, b in extents if rr == r)
        for (a0, b0), (a1, b1) in zip(row, row[1:]):
            assert a1 >= b0, (r, a0, b0, a1, b1)


def test_labels_never_overlap_and_all_show_on_zoom(spectrum):
    w = LineIdentifier(spectrum, lines="galaxy-emission", z=0.072)
    for lo, hi in [(3600.0, 9800.0), (3900.0, 4500.0), (4000.0, 9000.0)]:
        frontend_update(w.plot.xs, min=lo, max=hi)
        extents = label_extents(w)
        assert len({e[0] for e in extents}) >= 2, "a crowded view must use more than one row"
        assert_no_overlap(extents)
        y = {r: set() for r in range(w.plot.label_rows)}
        for g in w.plot.groups:
            for yy, r in zip(np.asarray(g["label"].y, float), w.plot.rows[g["shown"]]):
                if r >= 0:
                    y[r].add(yy)
        assert all(len(v) <= 1 for v in y.values())        # one height per row
    # zoomed onto Hα and [N II]: every line in view is labelled
    frontend_update(w.plot.xs, min=7000.0, max=7080.0)
    inside = (w.observed_positions().to_value(u.AA) > 7000) & (w.observed_positions().to_value(u.AA) < 7080)
    assert inside.sum() >= 3 and (w.plot.rows[inside] >= 0).all()


def test_a_locked_line_loses_its_predicted_label(w):
    i = int(np.flatnonzero(w._labels == "L6565")[0])
    assert w.plot.rows[i] >= 0
    w.lock(near=REST[2] * (1 + TRUE_Z) * u.AA)
    assert w.plot.rows[i] == -1 and "L6565" in list(w.plot.locked_labels.text)
    w.unlock("L6565")
    assert w.plot.rows[i] >= 0


# ------------------------------------------------------------------ rest-frame axis
def test_rest_axis_follows_z_and_zoom(w):
    assert w.plot.rest_xaxis not in w.figure.axes
    frontend_update(w.ui.rest_toggle, value=True)
    assert w.rest_axis and w.plot.rest_xaxis in w.figure.axes and w.plot.rest_xaxis.side == "top"
    for z in (0.0995, 0.25):
        w.z = z
        factor = kinematics.shift_factor(z, 0 * u.km / u.s, "optical")
        assert w.plot.rest_xs.min == pytest.approx(w.plot.xs.min / factor, rel=1e-12)
        assert w.plot.rest_xs.max == pytest.approx(w.plot.xs.max / factor, rel=1e-12)
    w.plot.xs.min, w.plot.xs.max = 5000.0, 5600.0                 # pan/zoom
    assert w.plot.rest_xs.min == pytest.approx(5000.0 / 1.25, rel=1e-12)
    assert w.plot.rest_xs.max == pytest.approx(5600.0 / 1.25, rel=1e-12)
    assert "rest" in w.plot.rest_xaxis.label
    w.rest_axis = False
    assert w.plot.rest_xaxis not in w.figure.axes and not w.ui.rest_toggle.value


def test_rest_axis_multiplies_on_a_frequency_axis():
    from astropy.table import QTable
    from specutils import Spectrum
    x = np.linspace(1.40e9, 1.43e9, 3000)
    sp = Spectrum(spectral_axis=x * u.Hz, flux=np.ones(x.size) * u.Jy, meta={"zline": {"medium": "vacuum"}})
    table = QTable({"label": ["L21"], "rest": [1.420405751e9] * u.Hz})
    w = LineIdentifier(sp, lines=table, velocity=300 * u.km / u.s, convention="radio")
    w.rest_axis = True
    factor = kinematics.shift_factor(0.0, 300 * u.km / u.s, "radio")
    assert w.plot.rest_xs.min == pytest.approx(x[0] * factor, rel=1e-12)
    assert w.plot.rest_xs.max == pytest.approx(x[-1] * factor, rel=1e-12)


# ------------------------------------------------------------------ candidate scan
def test_scan_lists_candidates_and_a_click_jumps(spectrum):
    from zline.physics import scan as scan_mod
    w = LineIdentifier(spectrum, lines="galaxy-absorption", z=0.0)
    result = w.scan(z_min=0.0, z_max=1.0, top=4)   # every kind by default
    direct = scan_mod.scan_redshift(spectrum, z_min=0.0, z_max=1.0, top=4)
    assert [c.z for c in result.candidates] == pytest.approx([c.z for c in direct.candidates])
    assert [c.klass for c in result.candidates] == [c.klass for c in direct.candidates]
    assert result.candidates[0].z == pytest.approx(TRUE_Z, abs=1e-3)
    assert result.candidates[0].klass == "emission-galaxy"
    options = w.ui.candidates.options
    assert len(options) == len(result.candidates)
    assert f"z={result.candidates[1].z:.5f}" in options[1][0] and "lines" in options[1][0]
    assert result.candidates[1].klass in options[1][0]
    assert "confidence" in w.status
    assert w.ui.scan_progress.value == w.ui.scan_progress.max
    frontend_update(w.ui.candidates, index=1)                 # a click on the second candidate
    assert w.z == pytest.approx(result.candidates[1].z)
    c = w.jump_to(0)
    assert w.z == pytest.approx(c.z) and w.velocity == 0.0 and w.ui.candidates.value == 0
    assert w._set_name == c.line_set == "galaxy-emission"    # the reading's kind is drawn
    with pytest.raises(IndexError):
        w.jump_to(len(result.candidates))


def test_scan_button_and_plain_errors(spectrum, lines):
    w = LineIdentifier(spectrum, lines="galaxy-emission", z=0.0)
    w.ui.scan_min.value, w.ui.scan_max.value = 0.05, 0.2
    w.ui.scan.click()
    assert w.candidates and w.candidates[0].z == pytest.approx(TRUE_Z, abs=1e-3)
    w.ui.scan_min.value, w.ui.scan_max.value = 0.5, 0.2
    w.ui.scan.click()
    assert "Problem" in w.status and "z_min" in w.status
    custom = LineIdentifier(spectrum, lines=lines)
    with pytest.raises(ValueError, match="no candidates"):
        custom.jump_to(0)
    with pytest.raises(ValueError, match="'lines' must be one of"):
        custom.scan(lines="custom")
    custom.scan(z_min=0.05, z_max=0.2)          # every kind, whatever table is drawn
    custom.jump_to(0)
    assert custom._set_name == "custom" and custom.z == pytest.approx(TRUE_Z, abs=1e-3)


def test_scan_near_zero_searches_velocity(spectrum):
    from specutils import Spectrum
    x = spectrum.spectral_axis.value
    v_true = 150.0                                    # km/s, invented
    y = np.ones(x.size)
    for r, amp in zip(REST, AMPLITUDE):
        y += amp * np.exp(-0.5 * ((x - r * (1 + v_true / 299792.458)) / 2.5) ** 2)
    near_rest = Spectrum(spectral_axis=x * u.AA, flux=y * u.Jy,
                         uncertainty=spectrum.uncertainty, meta={"zline": {"medium": "vacuum"}})
    w = LineIdentifier(near_rest, lines="galaxy-emission")
    w.scan(z_min=-0.002, z_max=0.002, top=2, lines="galaxy-emission")
    assert w._scan[1] == "velocity"
    best = w.candidates[0]
    assert best.velocity.to_value(u.km / u.s) == pytest.approx(v_true, abs=30.0)
    assert "km/s" in w.ui.candidates.options[0][0]
    w.jump_to(0)
    assert w.z == 0.0 and w.velocity == pytest.approx(best.velocity.to_value(u.km / u.s))


# ------------------------------------------------------------------ export
def test_export_writes_every_format_and_never_overwrites(w, tmp_path):
    from zline.physics import tables
    w.lock(near=REST[2] * (1 + TRUE_Z) * u.AA)
    w.lock(near=REST[1] * (1 + TRUE_Z) * u.AA)
    z, z_err = w.solve()
    path = w.export(tmp_path / "lines.ecsv")
    back = tables.read_table(path, format="ecsv")
    assert list(back["label"]) == ["L6565", "L5008"]
    assert back.meta["z"] == pytest.approx(z) and back.meta["z_err"] == pytest.approx(z_err)
    assert back.meta["medium"] == "vacuum"
    assert_quantity_allclose(back["observed"], u.Quantity([lk.observed for lk in w.locks]))
    before = (tmp_path / "lines.ecsv").read_bytes()
    with pytest.raises(FileExistsError):
        w.export(tmp_path / "lines.ecsv")
    assert (tmp_path / "lines.ecsv").read_bytes() == before
    assert "exists already" in w.status and "nothing was written" in w.status
    for fmt, name in [("fits", "l.fits"), ("csv", "l.csv"), ("latex", "l.tex"), ("aastex", "a.tex")]:
        w.export(tmp_path / name, format=fmt)
        assert (tmp_path / name).stat().st_size > 0
    assert "deluxetable" in (tmp_path / "a.tex").read_text()
    with pytest.raises(ValueError, match="ecsv"):
        w.export(tmp_path / "x.txt", format="txt")


def test_buttons_replace_a_file_only_on_a_second_press(w, tmp_path):
    w.lock(near=REST[2] * (1 + TRUE_Z) * u.AA)
    target = tmp_path / "t.csv"
    target.write_text("keep me")
    w.ui.export_format.value = "csv"
    w.ui.export_path.value = str(target)
    w.ui.export.click()
    assert target.read_text() == "keep me"
    assert "exists" in w.status and "press 'write table' again" in w.status and "Traceback" not in w.status
    w.ui.export_format.value = "ecsv"
    assert w.ui.export_path.value.endswith("t.ecsv")
    w.ui.export.click()
    assert (tmp_path / "t.ecsv").exists() and "wrote 1 line" in w.status
    first = (tmp_path / "t.ecsv").read_text()
    w.lock(near=REST[1] * (1 + TRUE_Z) * u.AA)
    w.ui.export.click()                                  # exists: first press only arms
    assert (tmp_path / "t.ecsv").read_text() == first
    w.ui.export.click()                                  # second press: replaced
    assert "wrote 2 line" in w.status and (tmp_path / "t.ecsv").read_text() != first
    # the same rule for the session file
    w.ui.save_path.value = str(tmp_path / "s.json")
    w.ui.save.click()
    saved = (tmp_path / "s.json").read_text()
    w.lock(near=REST[0] * (1 + TRUE_Z) * u.AA)
    w.ui.save.click()
    assert (tmp_path / "s.json").read_text() == saved and "press 'save' again" in w.status
    w.ui.save.click()
    assert (tmp_path / "s.json").read_text() != saved and "saved 3 lock" in w.status


def test_confirm_step_expires_and_is_per_file():
    from zline.widgets.glue import ConfirmStep
    now = [100.0]
    c = ConfirmStep(seconds=5.0, clock=lambda: now[0])
    assert not c.confirmed("a")
    now[0] += 4.0
    assert c.confirmed("a")                 # second press in time
    assert not c.confirmed("a")             # used up: arms again
    now[0] += 6.0
    assert not c.confirmed("a")             # too late: arms again
    assert not c.confirmed("b")             # another file does not confirm the first
    now[0] += 1.0
    assert not c.confirmed("a")

def test_locked_and_predicted_labels_share_the_rows_without_crowding(spectrum):
    w = LineIdentifier(spectrum, lines="galaxy-emission", z=0.1)
    for rest in REST:
        w.lock(near=rest * (1 + TRUE_Z) * u.AA)
    lrows = w.plot.locked_rows
    assert (lrows >= 0).sum() >= 3
    assert_no_overlap(label_extents(w))
    text = list(w.plot.locked_labels.text)
    assert [t != "" for t in text] == (lrows >= 0).tolist()
    assert np.asarray(w.plot.locked_marks.x).size == len(w.locks)


def test_slider_echo_snapped_to_its_step_keeps_the_exact_z(w):
    w.z = 0.0733994
    s = w.ui.slider
    frontend_update(s, value=0.4 * s.step)       # what a browser slider may send back after snapping
    assert w.z == 0.0733994
    frontend_update(s, value=0.0)
    assert w.z == 0.0733994
    frontend_update(s, value=2 * s.step)          # a real move of two steps
    assert w.z == pytest.approx(0.0733994 + 2 * s.step)
    w.z = 0.0733985                               # a value from code: recentred, exact
    frontend_update(s, value=0.0)                 # a late echo of the old position
    assert w.z == 0.0733985


def test_session_of_an_upload_never_reopens_a_namesake(tmp_path, monkeypatch):
    """An upload named galaxy.fits is recorded by name and SHA-256, never as ./galaxy.fits; a
    restore on other data with that name is refused, on the same bytes it brings the locks back."""
    import astropy.units as u

    from zline.physics.demo import write_demo_spectra
    from zline.physics.session import SessionSourceError, load_session

    paths = write_demo_spectra(tmp_path / "demo")
    galaxy, other = os.fspath(paths["galaxy"]), os.fspath(paths["nebula"])
    data = open(galaxy, "rb").read()
    monkeypatch.chdir(tmp_path)
    with open(tmp_path / "galaxy.fits", "wb") as fh:  # a different file with the upload's name
        fh.write(open(other, "rb").read())
    w = LineIdentifier(galaxy)
    w.load(data, name="galaxy.fits")
    w.z = 0.0734
    w.lock(near=7045 * u.AA)
    saved = w.save(tmp_path / "s.json")
    doc = load_session(saved)
    assert doc["spectrum"] is None
    assert doc["settings"]["source_name"] == "galaxy.fits"
    with pytest.raises(ValueError, match="uploaded file 'galaxy.fits'"):
        LineIdentifier.restore(saved)
    with pytest.raises(SessionSourceError):
        LineIdentifier.restore(saved, spectrum=str(tmp_path / "galaxy.fits"))
    back = LineIdentifier.restore(saved, spectrum=data)
    assert [lock.label for lock in back.locks] == [lock.label for lock in w.locks]


def test_session_of_a_file_records_its_digest(tmp_path):
    """A session saved on a file records the file's SHA-256; a changed file is refused on restore."""
    import astropy.units as u

    from zline.physics.demo import write_demo_spectra
    from zline.physics.session import SessionSourceError

    galaxy = os.fspath(write_demo_spectra(tmp_path / "demo")["galaxy"])
    w = LineIdentifier(galaxy, z=0.0734)
    w.lock(near=7045 * u.AA)
    saved = w.save(tmp_path / "s.json")
    assert len(LineIdentifier.restore(saved).locks) == 1
    with open(galaxy, "ab") as fh:  # the file changes after the session was saved
        fh.write(b"\0" * 2880)
    with pytest.raises(SessionSourceError):
        LineIdentifier.restore(saved)


def test_reader_assumptions_are_shown_above_the_plot(tmp_path):
    """Every guess the reader made about the file is written in the widget's header line."""
    import html as _html

    from astropy.io import fits

    wave = np.linspace(4000.0, 7000.0, 1500)
    flux = 1.0 + np.exp(-0.5 * ((wave - 6563.0) / 3.0) ** 2)
    cols = [fits.Column(name="wave", format="D", array=wave),  # no TUNIT: the unit is a guess
            fits.Column(name="flux", format="D", array=flux)]
    path = tmp_path / "guessy.fits"
    fits.HDUList([fits.PrimaryHDU(), fits.BinTableHDU.from_columns(cols)]).writeto(path)
    w = LineIdentifier(str(path))
    said = [f["message"] for f in w.spectrum.meta["zline"]["flags"]]
    assert said, "the reader should have recorded at least one assumption for this file"
    shown = _html.unescape(w._header.value)
    assert "read with assumptions" in shown
    for message in said:
        assert message in shown


def test_a_file_zline_did_not_write_is_refused_with_its_reason(w, tmp_path):
    """Even with overwrite=True a file zline did not write is kept, and the status says why
    instead of offering overwrite=True."""
    from zline.physics._atomic import NotZlineFileError

    w.lock(near=w._x[int(np.argmax(w.spectrum.flux.value))] * w._xunit)
    theirs = tmp_path / "notes.json"
    theirs.write_text('{"mine": true}')
    with pytest.raises(NotZlineFileError):
        w.save(theirs, overwrite=True)
    assert theirs.read_text() == '{"mine": true}'
    assert "overwrite=True" not in w.status and "Problem" in w.status
    with pytest.raises(NotZlineFileError):
        w.export(theirs, format="ecsv", overwrite=True)
    assert theirs.read_text() == '{"mine": true}'
    assert "overwrite=True" not in w.status
