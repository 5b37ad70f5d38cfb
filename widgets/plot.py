"""The whole-spectrum view: a label band above the data, the data on top of thin guides beneath it.

Layout (two bqplot figures sharing one x scale):

* the **label band** (class ``zline-band``): one short tick per predicted line and the labels in
  a few rows, placed so that no two overlap (the strongest first; the rest appear on zoom);
  locked lines carry a green triangle and a bold green label;
* the **data view** (class ``zline-plot``): shaded masked pixels and telluric bands, thin
  translucent guides of the predicted lines on a 0..1 scale of their own, the error band, then
  the spectrum drawn last so nothing covers it, and a transparent click catcher.
"""

import html
import warnings

import ipywidgets as W
import numpy as np

with warnings.catch_warnings():
    # bqplot 0.13 / bqscales set trait metadata the pre-4.1 way (a DeprecationWarning at import)
    warnings.filterwarnings("ignore", category=DeprecationWarning, message="metadata")
    import bqplot as bq

from ._marks import (PALETTE, display_smooth, marker_arrays, place_labels, robust_limits,
                     run_edges, shade_arrays, transparent_png)

__all__ = ["SpectrumPlot", "KEY_HTML"]

FIG_HEIGHT = 400
BAND_HEIGHT = 92
MARGIN = dict(top=12, bottom=45, left=75, right=20)
MARGIN_TOP_REST = 50
_ROW_PX = 17.0                # label row pitch in the band
_CHAR_PX = 6.4                # width of one label character at 11 px
_GUIDE_OPACITY = (0.45, 0.25)  # strong, weak guides: translucent so the data stay readable

KEY_HTML = (
    '<div class="zline-key" style="font-size:11px;line-height:1.6">'
    '<span style="color:{computed}">&#9474; computed line (from levels)</span> &nbsp; '
    '<span style="color:{tabulated}">&#9474; tabulated line</span> &nbsp; '
    'solid: stronger half of the set, dashed: weaker &nbsp; '
    '<span style="color:{locked}">&#9660; <b>locked</b></span> &nbsp; '
    '<span style="background:{band};opacity:.7">&nbsp;&plusmn;1&sigma;&nbsp;</span> &nbsp; '
    '<span style="background:{masked};opacity:.5">&nbsp;masked&nbsp;</span> &nbsp; '
    '<span style="background:{telluric};opacity:.5">&nbsp;telluric&nbsp;</span>'
    '</div>').format(**PALETTE)


class SpectrumPlot:
    """The two figures of the whole-spectrum view and their marks.

    The owner sets ``to_observed`` (rest positions -> observed positions at the current shift)
    and ``on_click`` (called with the data x of a click on the data view).
    """

    def __init__(self, width=960, label_rows=4):
        self.width = int(width)
        self.plot_px = max(self.width - MARGIN["left"] - MARGIN["right"], 100)
        self.label_rows = int(label_rows)
        self.to_observed = lambda rest: rest
        self.on_click = lambda x: None
        self.on_view = lambda: None
        self.xs = bq.LinearScale()
        self.unit_ys = bq.LinearScale(min=0.0, max=1.0)
        self.lin_ys, self.log_ys = bq.LinearScale(), bq.LogScale()
        self.ys = self.lin_ys
        self.rest_xs = bq.LinearScale()
        self.xaxis = bq.Axis(scale=self.xs, label="", grid_lines="none")
        self.yaxis = bq.Axis(scale=self.ys, orientation="vertical", side="left", label="",
                             grid_lines="none", label_offset="55px", tick_format=".3g")
        self.rest_xaxis = bq.Axis(scale=self.rest_xs, side="top", label="", grid_lines="none",
                                  label_offset="30px")
        fs, us = {"x": self.xs, "y": self.ys}, {"x": self.xs, "y": self.unit_ys}
        self.shade_masked = bq.Lines(x=[0.0, 1.0], y=np.zeros((2, 2)), scales=us, fill="between",
                                     fill_colors=[PALETTE["masked"]], fill_opacities=[0.3],
                                     stroke_width=0, colors=[PALETTE["masked"]], labels=["masked"])
        self.shade_telluric = bq.Lines(x=[0.0, 1.0], y=np.zeros((2, 2)), scales=us, fill="between",
                                       fill_colors=[PALETTE["telluric"]], fill_opacities=[0.18],
                                       stroke_width=0, colors=[PALETTE["telluric"]], labels=["telluric"])
        self.band = bq.Lines(x=[0.0, 1.0], y=np.zeros((2, 2)), scales=fs, fill="between",
                             fill_colors=[PALETTE["band"]], fill_opacities=[0.55], colors=[PALETTE["band"]],
                             stroke_width=0.5, opacities=[0.8], labels=["uncertainty"])
        self.line = bq.Lines(x=[0.0, 1.0], y=[0.0, 0.0], scales=fs, colors=[PALETTE["spectrum"]],
                             stroke_width=1.2, labels=["spectrum"])
        self.locked_top = bq.Lines(x=[np.nan], y=[np.nan], scales=us, colors=[PALETTE["locked"]],
                                   stroke_width=3, labels=["locked"])
        self.catcher = bq.Image(image=W.Image(value=transparent_png(), format="png"), x=[0.0, 1.0],
                                y=[0.0, 1.0], scales=us)
        self.catcher.on_element_click(self._on_catcher)
        self.panzoom = bq.interacts.PanZoom(scales={"x": [self.xs], "y": [self.ys]})
        self.yzoom = bq.interacts.PanZoom(scales={"y": [self.ys]})
        self.figure = bq.Figure(marks=[], axes=[self.xaxis, self.yaxis], interaction=self.panzoom,
                                fig_margin=dict(MARGIN), animation_duration=0, padding_y=0,
                                layout=W.Layout(width=f"{self.width}px", height=f"{FIG_HEIGHT}px"))
        self.figure.add_class("zline-plot")
        self.band_ys = bq.LinearScale(min=0.0, max=1.0)
        bs = {"x": self.xs, "y": self.band_ys}
        self.locked_marks = bq.Scatter(x=[], y=[], scales=bs, colors=[PALETTE["locked"]],
                                       marker="triangle-down", default_size=40, labels=["locked-band"])
        self.locked_labels = bq.Label(x=[], y=[], text=[], scales=bs, colors=[PALETTE["locked"]],
                                      default_size=11, font_weight="bold", align="middle")
        self.band_figure = bq.Figure(marks=[], axes=[], animation_duration=0, padding_y=0,
                                     fig_margin=dict(top=0, bottom=0, left=MARGIN["left"],
                                                     right=MARGIN["right"]),
                                     layout=W.Layout(width=f"{self.width}px", height=f"{BAND_HEIGHT}px"))
        self.band_figure.add_class("zline-band")
        self.key = W.HTML(KEY_HTML)
        self.groups = []
        self._rest = self._labels = self._strength = self._widths = np.zeros(0)
        self._locks = (np.zeros(0), [], np.zeros(0))
        self.rows = np.zeros(0, dtype=int)
        self.locked_rows = np.zeros(0, dtype=int)
        self._x = np.zeros(0)
        self._smooth = ("none", 3.0)
        self._rest_shown = False
        self.xs.observe(self._on_xs, names=["min", "max"])

    # ------------------------------------------------------------------ data
    def set_spectrum(self, x, flux, err, mask, xlabel, ylabel, telluric=()):
        """Show a new spectrum (increasing ``x``); the view goes to the whole of it."""
        from zline.physics.decimate import DecimationPyramid
        self._x, self._flux, self._err, self._mask = x, flux, err, mask
        self._pyramids = None
        self.pixel = float(np.median(np.diff(x))) if x.size > 1 else 1.0
        self.xaxis.label, self.yaxis.label = xlabel, ylabel
        self._DecimationPyramid = DecimationPyramid
        self._build_pyramids()
        runs = run_edges(mask)
        half = 0.5 * abs(self.pixel)
        spans = [(x[a] - half, x[b - 1] + half) for a, b in runs]
        mx, my = shade_arrays(spans, merge=abs(self.pixel))
        with self.shade_masked.hold_sync():
            self.shade_masked.x, self.shade_masked.y = mx, my
        tx, ty = shade_arrays([(a, b) for a, b in telluric if b > x[0] and a < x[-1]])
        with self.shade_telluric.hold_sync():
            self.shade_telluric.x, self.shade_telluric.y = tx, ty
        with self.xs.hold_trait_notifications():
            self.xs.min, self.xs.max = float(x[0]), float(x[-1])
        self.autoscale_y()

    def _build_pyramids(self):
        kind, width = self._smooth
        shown = np.where(self._mask, np.nan, self._flux)
        shown = display_smooth(shown, kind, width)
        self._shown = shown
        make = self._DecimationPyramid
        self._pyramid = make(self._x, shown)
        self._band_pyramids = None
        if self._err is not None:
            self._band_pyramids = (make(self._x, shown - self._err), make(self._x, shown + self._err))

    def set_smoothing(self, kind, width):
        """Smooth what is drawn (never what is measured) and redraw."""
        self._smooth = (kind, float(width))
        if self._x.size:
            self._build_pyramids()
            self.redraw()

    def view_range(self):
        return float(self.xs.min), float(self.xs.max)

    def redraw(self):
        """Re-decimate the spectrum and the error band for the current view."""
        lo, hi = self.view_range()
        x, y = self._pyramid.window(lo, hi, self.plot_px)
        with self.line.hold_sync():
            self.line.x, self.line.y = x, y
        if self._band_pyramids is not None:
            bx, blo = self._band_pyramids[0].window(lo, hi, self.plot_px)
            bx2, bhi = self._band_pyramids[1].window(lo, hi, self.plot_px)
            if bx2.shape != bx.shape or not np.array_equal(bx2, bx):
                bhi = np.interp(bx, bx2, bhi)
            with self.band.hold_sync():
                self.band.x, self.band.y = bx, np.vstack([blo, bhi])
        self.band.visible = self._band_pyramids is not None
        with self.catcher.hold_sync():
            self.catcher.x = [lo, hi]

    def autoscale_y(self):
        """Fit the flux axis to the data in view (a single-pixel spike is ignored)."""
        lo, hi = self.view_range()
        inside = (self._x >= lo) & (self._x <= hi)
        limits = robust_limits(self._shown[inside], log=self.ys is self.log_ys)
        if limits is not None:
            with self.ys.hold_trait_notifications():
                self.ys.min, self.ys.max = float(limits[0]), float(limits[1])

    def zoom_y(self, factor):
        """Zoom the flux axis about its middle (factor < 1 zooms in)."""
        lo, hi = float(self.ys.min), float(self.ys.max)
        if self.ys is self.log_ys:
            mid, half = np.sqrt(lo * hi), np.sqrt(hi / lo) ** factor
            self.ys.min, self.ys.max = mid / half, mid * half
        else:
            mid, half = 0.5 * (lo + hi), 0.5 * (hi - lo) * factor
            self.ys.min, self.ys.max = mid - half, mid + half

    def set_log(self, log):
        """Linear or logarithmic flux axis (non-positive fluxes leave gaps on a log axis)."""
        new = self.log_ys if log else self.lin_ys
        if new is self.ys:
            return
        self.ys = new
        for mark in (self.band, self.line):
            mark.scales = {"x": self.xs, "y": new}
        self.yaxis.scale = new
        self.panzoom = bq.interacts.PanZoom(scales={"x": [self.xs], "y": [new]})
        self.yzoom = bq.interacts.PanZoom(scales={"y": [new]})
        self.autoscale_y()

    def set_mode(self, mode):
        self.figure.interaction = {"pan/zoom": self.panzoom, "y only": self.yzoom}.get(mode)

    def _on_catcher(self, mark, content):
        x = (content.get("data") or {}).get("click_x")
        if x is not None:
            self.on_click(float(x))

    def _on_xs(self, change):
        if self.xs.min is None or self.xs.max is None or self.xs.max <= self.xs.min or not self._x.size:
            return
        self.redraw()
        self.move_lines()
        self.on_view()

    # ------------------------------------------------------------------ predicted lines
    def set_lines(self, rest, labels, strength, kinds, palette_of):
        """One guide mark (data view), one tick mark and one label mark (band) per style group."""
        self._rest, self._labels, self._strength = rest, labels, strength
        self._widths = np.array([len(t) * _CHAR_PX for t in labels], dtype=float)
        n = rest.size
        strong = strength >= (np.nanmedian(strength) if n else 0.0)
        self.groups = []
        us, bs = {"x": self.xs, "y": self.unit_ys}, {"x": self.xs, "y": self.band_ys}
        for kind in sorted(set(kinds)):
            for is_strong in (True, False):
                index = np.flatnonzero((kinds == kind) & (strong == is_strong))
                if index.size == 0:
                    continue
                colour = palette_of(kind)
                tag = f"{kind}-{'strong' if is_strong else 'weak'}"
                style = "solid" if is_strong else "dashed"
                gx, gy = marker_arrays(rest[index], 0.0, 1.0)
                guide = bq.Lines(x=gx, y=gy, scales=us, colors=[colour], labels=[f"lines-{tag}"],
                                 stroke_width=1.0, line_style=style,
                                 opacities=[_GUIDE_OPACITY[0 if is_strong else 1]])
                tx, ty = marker_arrays(rest[index], 0.0, 0.16)
                tick = bq.Lines(x=tx, y=ty, scales=bs, colors=[colour], labels=[f"ticks-{tag}"],
                                stroke_width=1.5 if is_strong else 1.0, line_style=style)
                label = bq.Label(x=[], y=[], scales=bs, text=[], colors=[colour], align="middle",
                                 default_size=11, font_weight="bold" if is_strong else "normal")
                self.groups.append(dict(key=(kind, is_strong), index=index, rest=rest[index],
                                        rest_vertices=gx, guide=guide, tick=tick, label=label,
                                        shown=np.zeros(0, dtype=int)))
        self.figure.marks = ([self.shade_telluric, self.shade_masked] + [g["guide"] for g in self.groups]
                             + [self.band, self.line, self.locked_top, self.catcher])
        self.band_figure.marks = ([g["tick"] for g in self.groups] + [g["label"] for g in self.groups]
                                  + [self.locked_marks, self.locked_labels])
        self.move_lines()

    def move_lines(self):
        """Put guides, ticks and labels at the observed positions.

        Only lines in view are drawn, at most one per half screen pixel (more could not be told
        apart); while that set keeps its size only x is sent.
        """
        lo, hi = self.view_range() if self.xs.min is not None else (-np.inf, np.inf)
        half_px = 2.0 * self.plot_px / (hi - lo) if np.isfinite(hi - lo) and hi > lo else 0.0
        for g in self.groups:
            obs = self.to_observed(g["rest"])
            keep = (obs >= lo) & (obs <= hi)
            if half_px and keep.sum() > self.plot_px:
                bins = np.round((obs - lo) * half_px)
                first = np.zeros(obs.size, bool)
                first[np.unique(np.where(keep, bins, -1), return_index=True)[1]] = True
                keep &= first
            gx, gy = marker_arrays(obs[keep], 0.0, 1.0)
            for mark, top in ((g["guide"], 1.0), (g["tick"], 0.16)):
                with mark.hold_sync():
                    if np.asarray(mark.x).size != gx.size:
                        mark.y = gy * top
                    mark.x = gx
        self.place_labels()

    def set_locks(self, observed, labels, strength):
        """Mark the locked lines: a green triangle and bold label in the band, a short top tick."""
        observed = np.asarray(observed, dtype=float)
        self._locks = (observed, list(labels), np.asarray(strength, dtype=float))
        x, y = marker_arrays(observed, 0.93, 1.0) if observed.size else ([np.nan], [np.nan])
        with self.locked_top.hold_sync():
            self.locked_top.x, self.locked_top.y = x, y
        with self.locked_marks.hold_sync():
            self.locked_marks.x, self.locked_marks.y = observed, np.full(observed.size, 0.08)
        with self.locked_labels.hold_sync():
            self.locked_labels.x = observed
            self.locked_labels.y = np.ones(observed.size)
            self.locked_labels.text = list(labels)
        self.place_labels()

    def _row_y(self, rows):
        return 1.0 - (np.maximum(rows, 0) + 1) * _ROW_PX / BAND_HEIGHT + 0.03

    def place_labels(self):
        """Choose rows for the labels in view: locks first, then predicted lines by strength."""
        if self.xs.min is None or self.xs.max is None or not self.groups and not self._locks[1]:
            return
        lo, hi = self.view_range()
        scale = self.plot_px / (hi - lo)
        lobs, ltext, lstrength = self._locks
        lpx = (lobs - lo) * scale
        lpx = np.where((lpx >= 0) & (lpx <= self.plot_px), lpx, np.nan)
        lwidth = np.array([len(t) * _CHAR_PX for t in ltext], dtype=float)
        self.locked_rows = place_labels(lpx, lwidth, lstrength, self.label_rows)
        occupied = [(lpx[self.locked_rows == r], lwidth[self.locked_rows == r])
                    for r in range(self.label_rows)]
        px = (self.to_observed(self._rest) - lo) * scale
        widths = self._widths
        # a label may reach into the figure's margins, never beyond them
        fits = (px >= 0) & (px <= self.plot_px) & (px - widths / 2 >= -MARGIN["left"]) \
            & (px + widths / 2 <= self.plot_px + MARGIN["right"])
        if ltext:
            fits &= ~np.isin(self._labels, ltext)        # a lock labels its own line
        # in a crowded view only the strongest few hundred can ever get a row: place those
        inside = np.flatnonzero(fits)
        cap = int(self.label_rows * self.plot_px / (3 * _CHAR_PX + 4))
        if inside.size > cap:
            inside = inside[np.argpartition(-self._strength[inside], cap)[:cap]]
        self.rows = np.full(self._rest.size, -1, dtype=int)
        self.rows[inside] = place_labels(px[inside], widths[inside], self._strength[inside], self.label_rows,
                                         occupied=occupied)
        text = [t if r >= 0 else "" for t, r in zip(ltext, self.locked_rows)]
        y = self._row_y(self.locked_rows)
        if list(self.locked_labels.text) != text or not np.array_equal(self.locked_labels.y, y):
            with self.locked_labels.hold_sync():
                self.locked_labels.text, self.locked_labels.y = text, y
        # each label mark carries only the labels shown: a z change then moves a few dozen texts
        for g in self.groups:
            shown = g["index"][self.rows[g["index"]] >= 0]
            x = self.to_observed(self._rest[shown])
            if np.array_equal(shown, g["shown"]):
                with g["label"].hold_sync():
                    g["label"].x = x
                continue
            g["shown"] = shown
            with g["label"].hold_sync():
                g["label"].x, g["label"].y = x, self._row_y(self.rows[shown])
                g["label"].text = [str(self._labels[i]) for i in shown]

    # ------------------------------------------------------------------ rest-frame axis
    def show_rest_axis(self, show, limits=None, label=""):
        if show != self._rest_shown:
            self._rest_shown = show
            margin = dict(MARGIN)
            if show:
                margin["top"] = MARGIN_TOP_REST
                self.figure.axes = [self.xaxis, self.yaxis, self.rest_xaxis]
            else:
                self.figure.axes = [self.xaxis, self.yaxis]
            self.figure.fig_margin = margin
        if show and limits is not None:
            lo, hi = (float(v) for v in limits)
            with self.rest_xs.hold_trait_notifications():
                if self.rest_xs.min != lo or self.rest_xs.max != hi:
                    self.rest_xs.min, self.rest_xs.max = lo, hi
            if self.rest_xaxis.label != label:
                self.rest_xaxis.label = label


def header_html(name, n, x0, x1, unit, medium_text, note=""):
    """The one-line header above the plot: file name, size, range, medium and a note."""
    extra = (f'<br><span class="zline-reader-note" style="color:#B35900">read with assumptions: '
             f'{html.escape(note)}</span>' if note else "")
    return (f"<b>{html.escape(name)}</b>: {n} pixels, {x0:.6g}-{x1:.6g} {html.escape(unit)}"
            f"{html.escape(medium_text)}{extra}")
