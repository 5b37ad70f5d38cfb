"""The verification strip: one small panel in velocity per strong predicted line in range.

Each panel shows the data around the line's predicted position at the current shift, in km/s
relative to that position (so a right identification sits on the zero line), the line's fit
when it is locked with one, and the zero line.  The panels follow z live; a click in a panel
locks that panel's line near the clicked velocity.
"""

import html
import warnings

import astropy.units as u
import ipywidgets as W
import numpy as np

with warnings.catch_warnings():
    warnings.filterwarnings("ignore", category=DeprecationWarning, message="metadata")
    import bqplot as bq

from zline.physics.decimate import DecimationPyramid
from zline.physics.kinematics import observed_position, velocity_from

from ._marks import PALETTE, robust_limits, transparent_png

__all__ = ["VerificationStrip", "strip_half_width"]

_KMS = u.km / u.s
_C_KMS = 299792.458   # km/s, exact (SI definition)


def strip_half_width(pixel_kms, fwhm_kms=()):
    """Half-width N of the panels in km/s, chosen from the line widths.

    Three times the widest fitted FWHM when locks have fits, else 40 pixels; at least 300 and at
    most 5000 km/s, rounded up to 100 km/s.
    """
    fwhm = [f for f in fwhm_kms if np.isfinite(f) and f > 0]
    n = 3.0 * max(fwhm) if fwhm else 40.0 * abs(pixel_kms)
    return float(np.clip(np.ceil(n / 100.0) * 100.0, 300.0, 5000.0))


class VerificationStrip:
    """A row of ``n_panels`` small velocity panels (class ``zline-strip``)."""

    def __init__(self, n_panels=6, width=960, height=170):
        self.n_panels = int(n_panels)
        self.half_width = 500.0
        self.on_click = lambda line_index, v_kms: None
        self.panels = []
        pw = max(int(width / self.n_panels) - 2, 110)
        self._panel_px = pw - 48
        for k in range(self.n_panels):
            vs = bq.LinearScale(min=-500.0, max=500.0, allow_padding=False)
            ys, us = bq.LinearScale(), bq.LinearScale(min=0.0, max=1.0)
            data = bq.Lines(x=[0.0], y=[0.0], scales={"x": vs, "y": ys}, colors=[PALETTE["spectrum"]],
                            stroke_width=1.2, labels=["data"])
            fit = bq.Lines(x=[np.nan], y=[np.nan], scales={"x": vs, "y": ys}, colors=[PALETTE["tabulated"]],
                           stroke_width=1.5, labels=["fit"])
            zero = bq.Lines(x=[0.0, 0.0], y=[0.0, 1.0], scales={"x": vs, "y": us},
                            colors=[PALETTE["computed"]], stroke_width=1, line_style="dashed",
                            labels=["zero"])
            catcher = bq.Image(image=W.Image(value=transparent_png(), format="png"), x=[-500.0, 500.0],
                               y=[0.0, 1.0], scales={"x": vs, "y": us})
            catcher.on_element_click(self._click_handler(k))
            fig = bq.Figure(marks=[zero, data, fit, catcher], title="",
                            axes=[bq.Axis(scale=vs, tick_values=[-250.0, 0.0, 250.0], tick_format=".0f",
                                          grid_lines="none"),
                                  bq.Axis(scale=ys, orientation="vertical", num_ticks=3, tick_format=".2g",
                                          grid_lines="none")],
                            fig_margin=dict(top=24, bottom=28, left=42, right=6), animation_duration=0,
                            padding_y=0, title_style={"font-size": "11px"},
                            layout=W.Layout(width=f"{pw}px", height=f"{height}px"))
            fig.add_class("zline-panel")
            self.panels.append(dict(fig=fig, vs=vs, ys=ys, data=data, fit=fit, catcher=catcher, line=None))
        self.title = W.HTML()
        self.widget = W.VBox([self.title, W.HBox([p["fig"] for p in self.panels])])
        self.widget.add_class("zline-strip")
        self.lines = None
        self._fit_cache = {}

    def _click_handler(self, k):
        def handler(mark, content):
            v = (content.get("data") or {}).get("click_x")
            line = self.panels[k]["line"]
            if v is not None and line is not None:
                self.on_click(line, float(v))
        return handler

    def set_data(self, x, flux, mask, unit, pixel_kms):
        """The spectrum the panels cut from (increasing ``x`` in ``unit``; masked pixels hidden)."""
        self._x, self._y, self._unit = x, np.where(mask, np.nan, flux), unit
        self._pixel_kms = pixel_kms
        self._pyramid = DecimationPyramid(x, self._y)    # a panel never draws more than ~2 points/px

    def set_lines(self, rest, labels, strength):
        self.lines = (rest, labels, strength)

    def update(self, z, velocity, convention, fits=None):
        """Choose the panels' lines and redraw them at the shift (z, velocity km/s, convention).

        ``fits`` maps a line index to its `zline.physics.fitting.LineFit` (locked lines with a fit).
        """
        if self.lines is None:
            return
        fits = fits or {}
        rest, labels, strength = self.lines
        n = strip_half_width(self._pixel_kms, [float(f.fwhm_kms.to_value(_KMS)) for f in fits.values()
                                               if getattr(f, "fwhm_kms", None) is not None])
        self.half_width = n
        predicted = observed_position(rest * self._unit, z=z, velocity=velocity * _KMS,
                                      convention=convention).to_value(self._unit, equivalencies=u.spectral())
        lo, hi = self._x[0], self._x[-1]
        margin = (hi + lo) / 2 * n / _C_KMS
        inside = np.flatnonzero((predicted > lo + margin) & (predicted < hi - margin))
        chosen = inside[np.argsort(-strength[inside], kind="stable")][: self.n_panels]
        chosen = chosen[np.argsort(predicted[chosen])]
        jobs = []
        for k, p in enumerate(self.panels):
            if k >= chosen.size:
                p["line"] = None
                p["fig"].title = ""
                p["fig"].layout.visibility = "hidden"
                continue
            i = int(chosen[k])
            p["line"] = i
            p["fig"].layout.visibility = "visible"
            jobs.append(self._cut(p, i, predicted[i], n, fits.get(i)))
        if jobs:
            # one velocity conversion for every panel's data and fit
            xs = np.concatenate([np.concatenate([j["x"], j["fx"]]) for j in jobs])
            cs = np.concatenate([np.full(j["x"].size + j["fx"].size, j["centre"]) for j in jobs])
            v_all = velocity_from(xs * self._unit, cs * self._unit, convention=convention).to_value(_KMS)
            start = 0
            for j in jobs:
                m, f = j["x"].size, j["fx"].size
                self._draw_panel(j, n, v_all[start:start + m], v_all[start + m:start + m + f])
                start += m + f
        self.title.value = (f'<span style="font-size:12px"><b>Check</b>: the strongest predicted lines in '
                            f"range, &plusmn;{n:.0f} km/s about each predicted position "
                            f"(<span style='color:{PALETTE['computed']}'>dashed</span> = zero); "
                            f"a right identification sits on the zero line. Click a panel to lock "
                            f"its line.</span>")

    def _cut(self, p, i, centre, n, fit):
        """The data (decimated) and the fit model around one predicted position, in ``unit``."""
        span = centre * 1.3 * n / _C_KMS
        x, y = self._pyramid.window(centre - span, centre + span, self._panel_px)
        fx = fy = np.zeros(0)
        if fit is not None and x.size:
            w0, w1 = sorted(fit.window.to_value(self._unit, equivalencies=u.spectral()))
            lo, hi = max(w0, x[0]), min(w1, x[-1])       # the model holds only where it was fitted
            if hi > lo:
                key = (id(fit), lo, hi)
                if self._fit_cache.get(p["fig"].model_id, (None,))[0] != key:
                    fine = np.linspace(lo, hi, 200)
                    model = np.asarray(fit.model_flux(fine * self._unit).value, dtype=float)
                    self._fit_cache[p["fig"].model_id] = (key, fine, model)
                _, fx, fy = self._fit_cache[p["fig"].model_id]
        return dict(p=p, i=i, centre=centre, x=x, y=y, fx=fx, fy=fy)

    def _draw_panel(self, job, n, v, fv):
        p, rest_labels = job["p"], self.lines[1]
        title = f"{rest_labels[job['i']]}"
        if p["fig"].title != title:
            p["fig"].title = title
        with p["vs"].hold_trait_notifications():
            p["vs"].min, p["vs"].max = -n, n
        ticks = [-n / 2, 0.0, n / 2]
        if list(p["fig"].axes[0].tick_values) != ticks:
            p["fig"].axes[0].tick_values = ticks
        with p["catcher"].hold_sync():
            p["catcher"].x = [-n, n]
        y = job["y"]
        with p["data"].hold_sync():
            p["data"].x, p["data"].y = (v, y) if v.size else ([0.0], [np.nan])
        if fv.size:
            with p["fit"].hold_sync():
                p["fit"].x, p["fit"].y = fv, job["fy"]
            y = np.concatenate([y, job["fy"]])
        elif np.isfinite(np.asarray(p["fit"].x, dtype=float)).any():
            with p["fit"].hold_sync():
                p["fit"].x, p["fit"].y = [np.nan], [np.nan]
        limits = robust_limits(y)
        if limits is not None and self._rescale_needed(p["ys"], limits):
            with p["ys"].hold_trait_notifications():
                p["ys"].min, p["ys"].max = float(limits[0]), float(limits[1])

    @staticmethod
    def _rescale_needed(scale, limits):
        """Rescale a panel only when its data range changed by more than 15 % (each rescale
        redraws the panel's axes in the browser, the dearest part of a live update)."""
        if scale.min is None or scale.max is None:
            return True
        span = max(float(scale.max - scale.min), 1e-300)
        return max(abs(limits[0] - scale.min), abs(limits[1] - scale.max)) > 0.15 * span

    def shown_lines(self):
        """Line index shown in each panel (None for an empty panel)."""
        return [p["line"] for p in self.panels]

    def describe(self):
        """Plain text: which line is in which panel."""
        rest, labels, _ = self.lines if self.lines is not None else (None, [], None)
        return ", ".join(html.unescape(str(labels[i])) for i in self.shown_lines() if i is not None)
