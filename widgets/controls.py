"""The control panels of the line identifier: shift, view and flux, locks, candidates, files.

Only widgets and their layout live here; `LineIdentifier` wires them to its state.
"""

import html

import astropy.units as u
import ipywidgets as W
import numpy as np
from ipyevents import Event

from zline.physics.catalog import LINE_SETS
from zline.physics import kinematics
from zline.physics.kinematics import CONVENTIONS
from zline.physics.tables import TABLE_FORMATS

from .state import MODES, SMOOTHING

__all__ = ["Controls", "KEYS", "ShiftControlsMixin", "help_html", "lock_rows"]

_KMS = u.km / u.s
_SLIDER_STEPS = 4000            # slider steps across the z span of the visible range

#: Keyboard shortcuts (pointer over the widget): key -> (action name, what it does).
KEYS = {
    ".": ("z_up", "z up one slider step"),
    ",": ("z_down", "z down one slider step"),
    ">": ("z_up10", "z up ten steps"),
    "<": ("z_down10", "z down ten steps"),
    "l": ("mode_lock", "lock mode"),
    "p": ("mode_pan", "pan/zoom mode"),
    "f": ("mode_y", "flux-only zoom mode"),
    "a": ("autoscale", "fit the flux axis to the view"),
    "w": ("whole", "whole spectrum"),
    "s": ("solve", "solve z"),
    "u": ("undo", "undo a lock change"),
    "r": ("redo", "redo it"),
    "x": ("drop_last", "remove the last lock"),
}


def help_html(tolerance_text):
    keys = " &nbsp; ".join(f"<kbd>{html.escape(k)}</kbd> {html.escape(what)}"
                           for k, (_, what) in KEYS.items())
    return (f'<div class="zline-help" style="font-size:11px;color:#444">Keys (pointer over the '
            f"widget): {keys}.<br>A click in lock mode locks the predicted line nearest the click "
            f"if it is within {html.escape(tolerance_text)}; otherwise nothing is locked and the "
            f"nearest lines are named.</div>")


class Controls:
    """Every control widget, grouped in boxes (``shift_box``, ``view_box``, ``lock_box`` ...)."""

    def __init__(self, width=960):
        self.slider = W.FloatSlider(value=0.0, min=-0.01, max=1.0, step=1e-4, description="z",
                                    readout=False, continuous_update=True,
                                    layout=W.Layout(width="460px"))
        self.slider.add_class("zline-z")
        self.z_text = W.Text(value="0", description="z =", continuous_update=False,
                             tooltip="type any redshift and press Enter; it is used exactly",
                             layout=W.Layout(width="220px"))
        self.z_text.add_class("zline-ztext")
        self.v_text = W.FloatText(value=0.0, description="v [km/s]", step=1.0, layout=W.Layout(width="190px"))
        self.conv = W.Dropdown(options=list(CONVENTIONS), value="optical", description="convention",
                               layout=W.Layout(width="220px"))
        self.set_menu = W.Dropdown(options=list(LINE_SETS), description="line set",
                                   layout=W.Layout(width="250px"))
        self.mode = W.ToggleButtons(options=list(MODES), value="pan/zoom", tooltips=list(MODES.values()),
                                    style={"button_width": "90px"})
        self.mode.add_class("zline-mode")
        self.jump = W.Dropdown(options=[], description="line", layout=W.Layout(width="210px"))
        self.jump_button = W.Button(description="zoom to line", layout=W.Layout(width="110px"))
        self.full_button = W.Button(description="whole spectrum", layout=W.Layout(width="120px"))
        self.rest_toggle = W.Checkbox(value=False, description="rest-frame axis", indent=False,
                                      layout=W.Layout(width="130px"))
        self.rest_toggle.add_class("zline-rest-axis")
        self.autoscale = W.Button(description="fit flux to view", layout=W.Layout(width="130px"))
        self.autoscale.add_class("zline-autoscale")
        self.y_in = W.Button(description="flux zoom in", layout=W.Layout(width="110px"))
        self.y_out = W.Button(description="flux zoom out", layout=W.Layout(width="110px"))
        self.log = W.Checkbox(value=False, description="log flux", indent=False, layout=W.Layout(width="90px"))
        self.smooth = W.Dropdown(options=list(SMOOTHING), value="none", description="smooth",
                                 layout=W.Layout(width="170px"))
        self.smooth_px = W.BoundedFloatText(value=3.0, min=1.0, max=200.0, step=1.0, description="px",
                                            layout=W.Layout(width="120px"))
        self.solve = W.Button(description="solve z", button_style="primary")
        self.undo = W.Button(description="undo", tooltip="undo the last lock change")
        self.undo.add_class("zline-undo")
        self.redo = W.Button(description="redo", tooltip="redo the lock change last undone")
        self.save_path = W.Text(value="zline-session.json", description="save as", layout=W.Layout(width="290px"))
        self.save_path.add_class("zline-save-path")
        self.save = W.Button(description="save")
        self.save.add_class("zline-save")
        self.upload = W.FileUpload(accept=".fits,.fit,.fts,.gz", multiple=False, description="open FITS")
        self.lock_table = W.VBox([W.HTML("<i>No locked lines yet.</i>")])
        self.lock_table.add_class("zline-results")
        self.scan_min = W.FloatText(value=0.0, description="scan z from", step=0.1, layout=W.Layout(width="200px"))
        self.scan_max = W.FloatText(value=3.0, description="to", step=0.1, layout=W.Layout(width="150px"))
        self.scan = W.Button(description="find candidates",
                             tooltip="search the z range for redshifts where the line set matches")
        self.scan_progress = W.IntProgress(value=0, min=0, max=3, layout=W.Layout(width="120px"))
        self.candidates = W.Select(options=[], rows=5, layout=W.Layout(width="560px"))
        self.candidates.add_class("zline-candidates")
        self.export_format = W.Dropdown(options=list(TABLE_FORMATS), value="ecsv", description="table",
                                        layout=W.Layout(width="200px"))
        self.export_path = W.Text(value="zline-lines.ecsv", description="file", layout=W.Layout(width="290px"))
        self.export = W.Button(description="write table")
        self.export.add_class("zline-export")
        self.help = W.HTML()
        self.status = W.HTML()
        self.status.add_class("zline-status")
        self.shift_box = W.VBox([
            W.HBox([self.slider, self.z_text, self.v_text]),
            W.HBox([self.conv, self.set_menu, self.rest_toggle]),
        ])
        self.view_box = W.VBox([
            W.HBox([self.mode, self.jump, self.jump_button, self.full_button]),
            W.HBox([self.autoscale, self.y_in, self.y_out, self.log, self.smooth, self.smooth_px]),
        ])
        self.lock_box = W.VBox([W.HBox([self.solve, self.undo, self.redo, self.save_path, self.save,
                                        self.upload]), self.lock_table])
        self.scan_box = W.VBox([W.HBox([self.scan_min, self.scan_max, self.scan, self.scan_progress]),
                                self.candidates])
        self.export_box = W.HBox([self.export_format, self.export_path, self.export])

    def watch_keys(self, widget, handler):
        """Call ``handler(action)`` for the shortcut keys pressed while the pointer is over ``widget``."""
        self._keys = Event(source=widget, watched_events=["keydown"])

        def on_key(event):
            action = KEYS.get(event.get("key", ""))
            if action is not None:
                handler(action[0])
        self._keys.on_dom_event(on_key)
        return self._keys


def lock_rows(entries, residuals, outliers, unit, on_remove, on_note=None):
    """One row widget per lock: a remove button and the lock's numbers."""
    head = W.HTML(f"<b>line | rest [{html.escape(unit)}] | observed [{html.escape(unit)}] | "
                  f"residual [km/s] | centre from | note</b>")
    rows = [head]
    for k, (e, r, bad) in enumerate(zip(entries, residuals, outliers)):
        lk = e.lock
        fitted = "fit" if (lk.fit is not None or e.fit_record) else "position only"
        button = W.Button(description="✕", tooltip=f"remove the lock on {lk.label}",
                          layout=W.Layout(width="32px", height="24px"))
        button.add_class("zline-remove")
        button.on_click(lambda _, label=lk.label: on_remove(label))
        text = W.HTML(f"{html.escape(lk.label)} | {lk.rest.value:.7g} | {lk.observed.value:.7g} "
                      f"&plusmn; {lk.observed_err.value:.2g} | {r:+.1f} | {fitted}"
                      f"{' (outlier)' if bad else ''} | {html.escape(lk.note)}")
        rows.append(W.HBox([button, text]))
    return rows


class ShiftControlsMixin:
    """The shift, view and flux controls of `LineIdentifier` kept in step with its state."""

    def _factor(self):
        return float(kinematics.shift_factor(self.z, self.velocity * _KMS, self.convention))

    def _observed(self, rest, factor):
        return rest * factor if self._is_length else rest / factor

    def _apply_shift(self):
        self._factor_now = self._factor()
        self.plot.move_lines()
        self._update_rest_axis()
        self._update_strip()

    def _update_strip(self):
        fits = {}
        for e in self._book:
            hits = np.flatnonzero(self._labels == e.lock.label)
            if hits.size and e.lock.fit is not None:
                fits[int(hits[0])] = e.lock.fit
        self.strip.update(self.z, self.velocity, self.convention, fits)

    @staticmethod
    def format_z(z):
        """The one readout format of z (enough digits to give the value back exactly to 1e-10)."""
        return f"{z:.10f}".rstrip("0").rstrip(".") if abs(z) < 100 else f"{z:.10g}"

    def _slider_span(self, z):
        """Slider span and step in z: the change that moves a line across the visible range."""
        lo, hi = self.plot.view_range()
        span = abs(hi - lo) / (0.5 * abs(hi + lo)) * (1.0 + z)
        span = float(np.clip(span, 1e-6, 10.0))
        return span, span / _SLIDER_STEPS

    def _sync_controls(self, recentre=True):
        """Push the state into the controls (compare before assign; one message per control).

        The slider moves z relative to an anchor: it shows the offset ``z - anchor`` over the
        span of the visible range.  Whenever z changes from anywhere but the slider, the anchor
        becomes z and the slider goes back to 0, which lies exactly on its step grid: an echo of
        the browser slider can then only ever say "z = anchor", never a rounded z.
        """
        ui, z = self.ui, self.z
        self._syncing = True
        try:
            s = ui.slider
            if recentre:
                span, step = self._slider_span(z)
                self._anchor = z
                with s.hold_sync():
                    # widen first, then set the value, then narrow: the slider clamps to [min, max]
                    s.max, s.min = max(s.max, span / 2), min(s.min, -span / 2)
                    s.value = 0.0
                    s.min, s.max, s.step = -span / 2, span / 2, step
                self._slider_pushed = 0.0
            text = self.format_z(z)
            if ui.z_text.value != text:
                ui.z_text.value = text
            for control, value in ((ui.v_text, self.velocity), (ui.conv, self.convention),
                                   (ui.mode, self.mode), (ui.rest_toggle, self.rest_axis),
                                   (ui.log, self.log_flux), (ui.smooth, self.smoothing),
                                   (ui.smooth_px, self.smoothing_px)):
                if control.value != value:
                    control.value = value
        finally:
            self._syncing = False

    def _on_slider(self, change):
        if self._syncing:
            return
        # an echo of what was pushed (0, or a value snapped to the step) must never change z
        if abs(change["new"] - self._slider_pushed) <= 0.5 * self.ui.slider.step * (1 + 1e-9):
            return
        self._slider_pushed = float(change["new"])
        self._from_slider = True
        try:
            self.z = self._anchor + float(change["new"])
        finally:
            self._from_slider = False

    def _on_z_text(self, change):
        if self._syncing:
            return
        try:
            z = float(change["new"].strip())
            if not np.isfinite(z) or z <= -1:
                raise ValueError
        except ValueError:
            self._say(f"z must be a number above -1; got {change['new']!r}", level="error")
            self._sync_controls(recentre=False)
            return
        self.z = z
        self._sync_controls()

    def _on_shift_traits(self, change):
        if self._ready:
            self._sync_controls(recentre=not getattr(self, "_from_slider", False))
            self._apply_shift()
            if self._book.entries:
                self._show_results()

    def _on_display_traits(self, change):
        if not self._ready:
            return
        name = change["name"]
        if name == "mode":
            self.plot.set_mode(change["new"])
        elif name == "rest_axis":
            self._update_rest_axis()
        elif name == "log_flux":
            self.plot.set_log(change["new"])
        else:
            self.plot.set_smoothing(self.smoothing, self.smoothing_px)
        self._sync_controls(recentre=False)

    def _on_view(self):
        self._update_rest_axis()
        if self._ready:
            self._sync_controls()

    def zoom_to(self, line):
        """Zoom the plot onto one line of the set (label or row index); None shows everything."""
        if line is None:
            self.plot.xs.min, self.plot.xs.max = float(self._x[0]), float(self._x[-1])
            return
        i = self._line_index(line)
        centre = float(self._observed(self._rest[i], self._factor()))
        half = 60 * abs(self.plot.pixel)
        with self.plot.xs.hold_trait_notifications():
            self.plot.xs.min, self.plot.xs.max = centre - half, centre + half
        self.plot.autoscale_y()
        if not self._x[0] - half <= centre <= self._x[-1] + half:
            self._say(f"{self._labels[i]} falls outside the spectrum at this redshift", level="warning")

    def _line_index(self, line):
        if isinstance(line, (int, np.integer)) and not isinstance(line, bool):
            if not 0 <= line < len(self._rest):
                raise IndexError(f"line index {line} is out of range 0..{len(self._rest) - 1}")
            return int(line)
        hits = np.flatnonzero(self._labels == line)
        if hits.size == 0:
            raise KeyError(f"no line labelled {line!r} in line set {self._set_name!r}")
        return int(hits[0])

    def observed_positions(self):
        """Predicted observed positions of every line of the set at the current z and velocity."""
        return self._observed(self._rest, self._factor()) * self._xunit

    def rest_range(self):
        """Rest-frame span of the current view at the current z and velocity (Quantity, 2 values)."""
        factor = self._factor()
        limits = np.array(self.plot.view_range())
        return (limits / factor if self._is_length else limits * factor) * self._xunit

    def _update_rest_axis(self):
        if not self.rest_axis:
            self.plot.show_rest_axis(False)
            return
        kind = self.plot.xaxis.label.replace("observed ", "rest ", 1)
        label = f"{kind} at z = {self.format_z(self.z)}" + (f", v = {self.velocity:g} km/s" if self.velocity else "")
        self.plot.show_rest_axis(True, self.rest_range().value, label)
