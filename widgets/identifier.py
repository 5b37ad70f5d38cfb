"""Interactive line identification on a 1D spectrum: overlay predicted lines, lock, solve, save.

The widget holds state and draws; every number with physics in it (reading files, line lists,
redshifting, fitting, solving, saving) comes from `zline.physics`.
"""

import dataclasses
import html
import importlib
import os
import re
import warnings

import astropy.units as u
import ipywidgets as W
import numpy as np
import traitlets as T

with warnings.catch_warnings():
    # bqplot 0.13 / bqscales set trait metadata the pre-4.1 way (a DeprecationWarning at import)
    warnings.filterwarnings("ignore", category=DeprecationWarning, message="metadata")
    import bqplot as bq
from astropy.nddata import StdDevUncertainty
from astropy.table import QTable

from ._marks import PALETTE, marker_arrays, stagger_labels, transparent_png

__all__ = ["LineIdentifier", "MODES"]

#: Mouse modes of the plot: what a click or drag on the plot area does.
MODES = {
    "pan/zoom": "drag to pan, wheel to zoom",
    "identify": "click near a feature to lock the nearest predicted line",
}

_KMS = u.km / u.s
_FALLBACK_CONVENTIONS = ("optical", "radio", "relativistic")
_RECULL_TOLERANCE = 0.03     # re-thin labels when the on-screen line spacing changes by more than 3 %
_FIG_HEIGHT = 440            # figure height in pixels
_MARGIN = dict(top=20, bottom=45, left=70, right=20)
_MARGIN_TOP_REST = 55        # top margin while the rest-frame axis is shown
_CHAR_PX = 7.0               # rough width of one label character at 12 px, for the row pitch
_SCAN_STEPS = 3              # steps of the scan progress bar


def _physics(module):
    """Import ``zline.physics.<module>``, with a plain error if that part is not installed."""
    try:
        return importlib.import_module(f"zline.physics.{module}")
    except ImportError as exc:
        raise RuntimeError(f"zline.physics.{module} is not available ({exc}); the widget needs it "
                           f"for this action") from exc


def _conventions():
    try:
        return tuple(_physics("kinematics").CONVENTIONS)
    except (RuntimeError, AttributeError):
        return _FALLBACK_CONVENTIONS


def _is_spectrum(obj):
    return hasattr(obj, "spectral_axis") and hasattr(obj, "flux")


@dataclasses.dataclass
class _Entry:
    """One locked identification: the physics `Lock` plus what the widget knows about it."""

    lock: object
    strength: float
    fit_message: str = ""
    fit_record: dict = None   # a restored fit (plain dict of values and unit strings)


@dataclasses.dataclass
class _Group:
    """Predicted lines drawn in one style: one NaN-separated Lines mark and one Label mark."""

    key: tuple
    index: np.ndarray        # rows of the line set in this group
    rest: np.ndarray         # rest positions, spectrum unit
    rest_vertices: np.ndarray
    marker: object
    label: object


class LineIdentifier(W.VBox):
    """Overlay predicted lines on a spectrum at a trial redshift, lock identifications, solve z.

    Parameters
    ----------
    spectrum : str, path, bytes or `specutils.Spectrum`
        A FITS file (path or its bytes, read with `zline.physics.spectra.read_spectrum`) or a
        spectrum already read.
    lines : str or `~astropy.table.QTable`
        Name of a line set of `zline.physics.catalog.LINE_SETS`, or a table with columns
        ``label``, ``rest`` (spectral Quantity) and optionally ``species``, ``strength``, ``kind``.
    z : float
        Trial redshift.
    velocity : `~astropy.units.Quantity` ['speed']
        Trial velocity on top of ``z``.
    convention : str
        Velocity convention, one of `zline.physics.kinematics.CONVENTIONS`.
    medium : {"vacuum", "air"} or None
        Medium of the spectral axis; needed when the spectrum does not say
        (``spectrum.meta["zline"]["medium"]``). The spectrum's own statement wins.
    width : int
        Figure width in pixels (also the decimation resolution).
    label_spacing : float
        Labels of one row closer than this many pixels are not allowed; close neighbours go to a
        lower row, the strongest line keeps the top row, and what fits in no row is hidden.
    label_rows : int
        Number of label rows (heights) used for close neighbours.

    Attributes
    ----------
    figure : `bqplot.Figure`
        The plot (class ``zline-plot``).
    locks : tuple of `zline.physics.identify.Lock`
        The locked identifications, in locking order.
    """

    z = T.Float(0.0, help="trial redshift")
    velocity = T.Float(0.0, help="trial velocity on top of z, km/s")
    convention = T.Unicode("optical", help="velocity convention")
    mode = T.Unicode("pan/zoom", help=f"mouse mode of the plot, one of {sorted(MODES)}")
    rest_axis = T.Bool(False, help="show a rest-frame axis (at the current z and velocity) on top")

    def __init__(self, spectrum, lines="galaxy-emission", z=0.0, velocity=0.0 * _KMS,
                 convention="optical", medium=None, width=960, label_spacing=16.0, label_rows=3,
                 **kwargs):
        super().__init__(**kwargs)
        if not isinstance(velocity, u.Quantity) or not velocity.unit.is_equivalent(_KMS):
            raise u.UnitTypeError(f"LineIdentifier: 'velocity' must be a Quantity with a speed unit "
                                  f"(e.g. 120 * u.km / u.s); got {velocity!r}")
        conventions = _conventions()
        if convention not in conventions:
            raise ValueError(f"LineIdentifier: 'convention' must be one of {sorted(conventions)}; "
                             f"got {convention!r}")
        self._medium_arg = medium
        self._width = int(width)
        self._plot_px = max(self._width - 90, 100)
        self._label_spacing = float(label_spacing)
        if isinstance(label_rows, bool) or not isinstance(label_rows, (int, np.integer)) or label_rows < 1:
            raise ValueError(f"LineIdentifier: 'label_rows' must be an integer >= 1; got {label_rows!r}")
        self._label_rows = int(label_rows)
        self._row = np.zeros(0, dtype=int)
        self._locked_row = np.zeros(0, dtype=int)
        self._scan_result = None
        self._scan_kind = None
        self._entries = []
        self._groups = []
        self._solution = None
        self._cull_key = None
        self._syncing = False
        self._source_name = None
        self._rest = np.zeros(0)
        self._labels = np.zeros(0, dtype=object)
        self._species = np.zeros(0, dtype=object)
        self._strength = np.zeros(0)
        self._current_factor = 1.0
        self._ready = False

        self._build_figure()
        self._build_controls(conventions)
        self._set_spectrum(self._read(spectrum, medium), source=spectrum)
        self._set_lines(lines)
        with self.hold_trait_notifications():
            self.z = float(z)
            self.velocity = float(velocity.to_value(_KMS))
            self.convention = convention
        self._ready = True
        self._sync_controls()
        self._apply_shift(force_labels=True)
        self.children = [self._header, self.figure, self._controls_box, self._lock_box, self._scan_box,
                         self._export_box, self._status]

    # ------------------------------------------------------------------ building
    def _build_figure(self):
        self._xs = bq.LinearScale()
        self._ys = bq.LinearScale()
        sc = {"x": self._xs, "y": self._ys}
        self._xaxis = bq.Axis(scale=self._xs, label="", grid_lines="none")
        self._yaxis = bq.Axis(scale=self._ys, side="left", label="", grid_lines="none",
                              label_offset="50px")
        self._rest_xs = bq.LinearScale()
        self._rest_xaxis = bq.Axis(scale=self._rest_xs, side="top", label="", grid_lines="none",
                                   label_offset="32px")
        self._band = bq.Lines(x=[0.0, 1.0], y=[[0.0, 0.0], [0.0, 0.0]], scales=sc, fill="between",
                              fill_colors=[PALETTE["band"]], fill_opacities=[0.35], colors=[PALETTE["band"]],
                              stroke_width=0, labels=["uncertainty"])
        self._line = bq.Lines(x=[0.0, 1.0], y=[0.0, 0.0], scales=sc, colors=[PALETTE["spectrum"]],
                              stroke_width=1, labels=["spectrum"])
        self._masked = bq.Scatter(x=[], y=[], scales=sc, colors=[PALETTE["masked"]], marker="triangle-up",
                                  default_size=16, labels=["masked"])
        self._locked = bq.Lines(x=[np.nan], y=[np.nan], scales=sc, colors=[PALETTE["locked"]],
                                stroke_width=3, labels=["locked"])
        self._locked_labels = bq.Label(x=[], y=[], text=[], scales=sc, colors=[PALETTE["locked"]],
                                       default_size=13, font_weight="bolder", rotate_angle=-90,
                                       align="end", x_offset=-4, y_offset=0)
        self._catcher = bq.Image(image=W.Image(value=transparent_png(), format="png"), x=[0.0, 1.0],
                                 y=[0.0, 1.0], scales=sc)
        self._catcher.on_element_click(self._on_catcher_click)
        self._panzoom = bq.interacts.PanZoom(scales={"x": [self._xs], "y": [self._ys]})
        self.figure = bq.Figure(
            marks=[], axes=[self._xaxis, self._yaxis], interaction=self._panzoom,
            fig_margin=dict(_MARGIN), animation_duration=0, padding_y=0,
            layout=W.Layout(width=f"{self._width}px", height=f"{_FIG_HEIGHT}px"))
        self.figure.add_class("zline-plot")
        self._xs.observe(self._on_view, names=["min", "max"])
        self._ys.observe(self._on_yview, names=["min", "max"])

    def _build_controls(self, conventions):
        self._header = W.HTML()
        self._slider = W.FloatSlider(value=0.0, min=-0.01, max=2.0, step=0.001, description="z",
                                     readout_format=".5f", continuous_update=True,
                                     layout=W.Layout(width="520px"))
        self._slider.add_class("zline-z")
        self._fine = W.ToggleButton(value=False, description="fine", tooltip="narrow the slider around z")
        self._z_text = W.FloatText(value=0.0, description="exact z", step=1e-5, layout=W.Layout(width="210px"))
        self._v_text = W.FloatText(value=0.0, description="v [km/s]", step=1.0, layout=W.Layout(width="210px"))
        self._conv = W.Dropdown(options=list(conventions), value="optical", description="convention",
                                layout=W.Layout(width="230px"))
        self._set_menu = W.Dropdown(options=[], description="line set", layout=W.Layout(width="260px"))
        self._mode = W.ToggleButtons(options=list(MODES), value="pan/zoom",
                                     tooltips=[MODES[m] for m in MODES])
        self._mode.add_class("zline-mode")
        self._jump = W.Dropdown(options=[], description="line", layout=W.Layout(width="230px"))
        self._jump_button = W.Button(description="zoom to line")
        self._full_button = W.Button(description="whole spectrum")
        self._solve_button = W.Button(description="solve z", button_style="primary")
        self._undo_button = W.Button(description="drop last lock")
        self._save_path = W.Text(value="zline-session.json", description="save as",
                                 layout=W.Layout(width="300px"))
        self._save_button = W.Button(description="save")
        self._upload = W.FileUpload(accept=".fits,.fit,.fts", multiple=False, description="open FITS")
        self._rest_toggle = W.Checkbox(value=False, description="rest-frame axis", indent=False,
                                       layout=W.Layout(width="150px"))
        self._rest_toggle.add_class("zline-rest-axis")
        self._scan_min = W.FloatText(value=0.0, description="scan z from", step=0.1,
                                     layout=W.Layout(width="200px"))
        self._scan_max = W.FloatText(value=3.0, description="to", step=0.1, layout=W.Layout(width="150px"))
        self._scan_button = W.Button(description="find candidates", tooltip="search the z range for "
                                     "redshifts where the line set matches the spectrum")
        self._scan_progress = W.IntProgress(value=0, min=0, max=_SCAN_STEPS, description="",
                                            layout=W.Layout(width="120px"))
        self._candidates = W.Select(options=[], rows=5, description="", layout=W.Layout(width="520px"))
        self._candidates.add_class("zline-candidates")
        self._export_format = W.Dropdown(options=[], description="table", layout=W.Layout(width="200px"))
        self._export_path = W.Text(value="zline-lines.ecsv", description="file",
                                   layout=W.Layout(width="300px"))
        self._export_button = W.Button(description="write table")
        self._results = W.HTML(value="<i>No locked lines yet.</i>")
        self._results.add_class("zline-results")
        self._status = W.HTML()
        self._status.add_class("zline-status")
        self._controls_box = W.VBox([
            W.HBox([self._slider, self._fine, self._z_text]),
            W.HBox([self._v_text, self._conv, self._set_menu, self._rest_toggle]),
            W.HBox([self._mode, self._jump, self._jump_button, self._full_button]),
        ])
        self._scan_box = W.VBox([
            W.HBox([self._scan_min, self._scan_max, self._scan_button, self._scan_progress]),
            self._candidates,
        ])
        self._export_box = W.HBox([self._export_format, self._export_path, self._export_button])
        try:
            formats = list(_physics("tables").TABLE_FORMATS)
        except (RuntimeError, AttributeError):
            formats = []
        self._export_format.options = formats
        if "ecsv" in formats:
            self._export_format.value = "ecsv"
        self._lock_box = W.VBox([
            W.HBox([self._solve_button, self._undo_button, self._save_path, self._save_button, self._upload]),
            self._results,
        ])
        self._slider.observe(self._guard(self._on_slider), names="value")
        self._fine.observe(self._guard(self._on_fine), names="value")
        self._z_text.observe(self._guard(self._on_z_text), names="value")
        self._v_text.observe(self._guard(self._on_v_text), names="value")
        self._conv.observe(self._guard(self._on_conv), names="value")
        self._set_menu.observe(self._guard(self._on_set_menu), names="value")
        self._mode.observe(self._guard(self._on_mode_button), names="value")
        self._jump_button.on_click(self._guard(lambda _: self.zoom_to(self._jump.value)))
        self._full_button.on_click(self._guard(lambda _: self.zoom_to(None)))
        self._solve_button.on_click(self._guard(lambda _: self.solve()))
        self._undo_button.on_click(self._guard(lambda _: self.unlock(len(self._entries) - 1)
                                               if self._entries else self._say("Nothing to drop.")))
        self._save_button.on_click(self._guard(lambda _: self.save(self._save_path.value, overwrite=True)))
        self._upload.observe(self._guard(self._on_upload), names="value")
        self._rest_toggle.observe(self._guard(self._on_rest_toggle), names="value")
        self._scan_button.on_click(self._guard(lambda _: self.scan(self._scan_min.value, self._scan_max.value)))
        self._candidates.observe(self._guard(self._on_candidate), names="value")
        self._export_format.observe(self._guard(self._on_export_format), names="value")
        self._export_button.on_click(self._guard(self._on_export_button))

    def _guard(self, handler):
        """Wrap a UI callback so that any error lands in the status area in plain words."""
        def wrapped(*args):
            try:
                handler(*args)
            except Exception as exc:    # noqa: BLE001 - shown to the user, not swallowed
                self._say(f"{type(exc).__name__}: {exc}", level="error")
        return wrapped

    # ------------------------------------------------------------------ status
    def _say(self, message, level="info"):
        colour = {"info": "#000000", "warning": "#B35900", "error": "#B00020"}[level]
        word = {"info": "", "warning": "Warning: ", "error": "Problem: "}[level]
        self._status.value = (f'<div class="zline-{level}" style="color:{colour}">'
                              f"{html.escape(word + message)}</div>")

    @property
    def status(self):
        """Plain text of the status area (last message shown to the user)."""
        return html.unescape(re.sub(r"<[^>]+>", "", self._status.value))

    # ------------------------------------------------------------------ spectrum
    @staticmethod
    def _read(source, medium):
        if _is_spectrum(source):
            return source
        spectra = _physics("spectra")
        if isinstance(source, (bytes, bytearray, memoryview, str, os.PathLike)):
            return spectra.read_spectrum(source, medium=medium)
        raise TypeError(f"LineIdentifier: 'spectrum' must be a FITS path, FITS bytes or a specutils "
                        f"Spectrum; got {type(source).__name__}")

    def load(self, source, medium=None):
        """Replace the spectrum (path, FITS bytes or Spectrum); locks are cleared.

        A problem is shown in the status area and raised.
        """
        try:
            spectrum = self._read(source, medium if medium is not None else self._medium_arg)
            self._set_spectrum(spectrum, source=source)
        except Exception as exc:
            self._say(f"could not open {self._describe_source(source)}: {exc}", level="error")
            raise
        self._set_lines(self._lines_arg)
        self._apply_shift(force_labels=True)

    @staticmethod
    def _describe_source(source):
        if isinstance(source, (str, os.PathLike)):
            return f"file {os.fspath(source)!r}"
        if isinstance(source, (bytes, bytearray, memoryview)):
            return f"the uploaded data ({len(bytes(source))} bytes)"
        return "the spectrum"

    def _set_spectrum(self, spectrum, source=None):
        meta = dict(spectrum.meta.get("zline", {}) or {}) if hasattr(spectrum, "meta") else {}
        xunit = spectrum.spectral_axis.unit
        self._is_length = xunit.physical_type == "length"
        medium = meta.get("medium") or self._medium_arg
        if medium is None:
            if self._is_length:
                raise ValueError("LineIdentifier: the spectrum does not say whether its wavelengths are in "
                                 "air or vacuum; pass medium='air' or medium='vacuum'")
            medium = "vacuum"
        if medium not in ("air", "vacuum"):
            raise ValueError(f"LineIdentifier: 'medium' must be 'air' or 'vacuum'; got {medium!r}")
        x = np.asarray(spectrum.spectral_axis.value, dtype=float)
        flux = np.asarray(spectrum.flux.value, dtype=float)
        if flux.ndim != 1:
            raise ValueError(f"LineIdentifier: need a 1D spectrum; the flux has shape {flux.shape}")
        order = np.argsort(x, kind="stable")
        x, flux = x[order], flux[order]
        mask = np.zeros(x.shape, bool) if spectrum.mask is None else np.asarray(spectrum.mask, bool)[order]
        mask |= ~np.isfinite(flux)
        err = None
        if spectrum.uncertainty is not None:
            err = np.asarray(spectrum.uncertainty.represent_as(StdDevUncertainty).array, float)[order]
        decimate = _physics("decimate")
        shown = np.where(mask, np.nan, flux)
        self.spectrum = spectrum
        self._meta = meta
        self._medium = medium
        self._xunit = xunit
        self._x = x
        self._mask = mask
        self._pyramid = decimate.DecimationPyramid(x, shown)
        self._band_pyramids = None
        if err is not None:
            self._band_pyramids = (decimate.DecimationPyramid(x, shown - err),
                                   decimate.DecimationPyramid(x, shown + err))
        good = flux[~mask]
        if good.size == 0:
            raise ValueError("LineIdentifier: every pixel of the spectrum is masked or not finite")
        lo, hi = np.percentile(good, 0.5), np.max(good)     # keep emission peaks on screen
        span = (hi - lo) or abs(hi) or 1.0
        self._y0, self._y1 = lo - 0.08 * span, hi + 0.35 * span
        self._pixel = float(np.median(np.diff(x))) if x.size > 1 else 1.0
        self._entries = []
        self._solution = None
        self._source_name = os.fspath(source) if isinstance(source, (str, os.PathLike)) else meta.get("file")
        kind = next((name for name, unit in (("wavelength", u.m), ("frequency", u.Hz), ("energy", u.J),
                                             ("wavenumber", 1 / u.m)) if xunit.is_equivalent(unit)),
                    "position")
        where = f" in {medium}" if self._is_length else ""
        self._xaxis.label = f"observed {kind}{where} [{xunit.to_string('unicode')}]"
        funit = spectrum.flux.unit.to_string("unicode") if spectrum.flux.unit != u.dimensionless_unscaled else ""
        self._yaxis.label = f"flux [{funit}]" if funit else "flux"
        name = html.escape(os.path.basename(self._source_name)) if self._source_name else "spectrum"
        assumed = " (medium assumed: no keyword in the file)" if meta.get("medium_assumed") else ""
        medium_text = f", {medium}{html.escape(assumed)}" if self._is_length else ""
        self._header.value = (f"<b>{name}</b>: {x.size} pixels, {x[0]:.6g}-{x[-1]:.6g} "
                              f"{html.escape(xunit.to_string('unicode'))}{medium_text}")
        with self._xs.hold_trait_notifications(), self._ys.hold_trait_notifications():
            self._ys.min, self._ys.max = float(self._y0), float(self._y1)
            self._xs.min, self._xs.max = float(x[0]), float(x[-1])
        self._redraw_spectrum()
        self._redraw_locks()
        self._show_results()

    # ------------------------------------------------------------------ line set
    def _set_lines(self, lines):
        self._lines_arg = lines
        if isinstance(lines, str):
            catalog = _physics("catalog")
            names = list(catalog.LINE_SETS)
            if lines not in names:
                raise ValueError(f"LineIdentifier: 'lines' must be one of {sorted(names)} or a table; "
                                 f"got {lines!r}")
            table = catalog.line_set(lines, medium=self._medium, unit=self._xunit)
            self._set_name = lines
        elif hasattr(lines, "colnames"):
            missing = {"label", "rest"} - set(lines.colnames)
            if missing:
                raise ValueError(f"LineIdentifier: the 'lines' table lacks column(s) {sorted(missing)}; "
                                 f"it has {lines.colnames}")
            table = lines
            names = []
            self._set_name = "custom"
        else:
            raise TypeError(f"LineIdentifier: 'lines' must be a line-set name or a table; "
                            f"got {type(lines).__name__}")
        n = len(table)
        rest = table["rest"]
        if not isinstance(rest, u.Quantity):
            raise u.UnitTypeError("LineIdentifier: the 'rest' column of 'lines' must carry a spectral unit")
        self._rest = np.asarray(rest.to_value(self._xunit, equivalencies=u.spectral()), dtype=float)
        self._labels = np.array([str(s) for s in table["label"]], dtype=object)
        self._species = (np.array([str(s) for s in table["species"]], dtype=object)
                         if "species" in table.colnames else np.full(n, "", dtype=object))
        self._strength = (np.asarray(table["strength"], dtype=float) if "strength" in table.colnames
                          else np.ones(n))
        # drawn apart by origin (computed from levels / tabulated); older tables may only have "kind"
        column = "origin" if "origin" in table.colnames else "kind" if "kind" in table.colnames else None
        kinds = (np.array([str(s) for s in table[column]], dtype=object) if column
                 else np.full(n, "other", dtype=object))
        self._line_table = table
        # emphasis: the stronger half of the set (by expected strength) is drawn bold
        strong = self._strength >= (np.nanmedian(self._strength) if n else 0.0)
        self._groups = []
        sc = {"x": self._xs, "y": self._ys}
        for kind in sorted(set(kinds)):
            for is_strong in (True, False):
                index = np.flatnonzero((kinds == kind) & (strong == is_strong))
                if index.size == 0:
                    continue
                colour = PALETTE.get(kind, PALETTE["other"])
                tag = f"lines-{kind}-{'strong' if is_strong else 'weak'}"
                rx, ry = marker_arrays(self._rest[index], self._y0, self._y1)
                marker = bq.Lines(x=rx, y=ry, scales=sc, colors=[colour], labels=[tag],
                                  stroke_width=2.0 if is_strong else 1.0,
                                  opacities=[0.95 if is_strong else 0.6],
                                  line_style="solid" if is_strong else "dashed")
                label = bq.Label(x=self._rest[index], y=np.full(index.size, self._y1), scales=sc,
                                 text=[""] * index.size, colors=[colour], rotate_angle=-90, align="end",
                                 default_size=12 if is_strong else 10, x_offset=-3, y_offset=2,
                                 font_weight="bold" if is_strong else "normal")
                self._groups.append(_Group((kind, is_strong), index, self._rest[index], rx, marker, label))
        if self._set_name == "custom":
            try:
                names = list(_physics("catalog").LINE_SETS)
            except (RuntimeError, AttributeError):
                names = []
            names.append("custom")
        self._syncing = True
        try:
            if list(self._set_menu.options) != names:
                self._set_menu.options = names
            if self._set_menu.value != self._set_name:
                self._set_menu.value = self._set_name
        finally:
            self._syncing = False
        by_strength = np.argsort(-self._strength, kind="stable")
        self._jump.options = [(f"{self._labels[i]}", int(i)) for i in by_strength]
        if by_strength.size:
            self._jump.value = int(by_strength[0])
        self._cull_key = None
        self.figure.marks = ([self._band, self._line, self._masked]
                             + [g.marker for g in self._groups] + [g.label for g in self._groups]
                             + [self._locked, self._locked_labels, self._catcher])

    # ------------------------------------------------------------------ shifting
    def _factor(self):
        kinematics = _physics("kinematics")
        return float(kinematics.shift_factor(self.z, self.velocity * _KMS, self.convention))

    def _observed(self, rest, factor):
        return rest * factor if self._is_length else rest / factor

    def _apply_shift(self, force_labels=False):
        factor = self._factor()
        self._current_factor = factor
        for g in self._groups:
            with g.marker.hold_sync():
                g.marker.x = self._observed(g.rest_vertices, factor)
            with g.label.hold_sync():
                g.label.x = self._observed(g.rest, factor)
        self._cull_labels(factor, force=force_labels)
        self._update_rest_axis()

    def _cull_labels(self, factor, force=False):
        span = (self._xs.max - self._xs.min) if self._xs.max is not None else 1.0
        key = (factor if self._is_length else 1.0 / factor) / span
        if not force and self._cull_key is not None and abs(key / self._cull_key - 1) < _RECULL_TOLERANCE:
            return
        self._cull_key = key
        observed = self._observed(self._rest, factor)
        pixels = (observed - self._xs.min) / span * self._plot_px
        # a locked line is labelled by its lock; its predicted label would sit on top of it
        margin = self._label_spacing
        pixels = np.where((pixels >= -margin) & (pixels <= self._plot_px + margin), pixels, np.nan)
        locked = {e.lock.label for e in self._entries}
        if locked:
            pixels = np.where([lab in locked for lab in self._labels], np.nan, pixels)
        # locked labels first (strongest lines first), then the predicted ones around them
        lpx = np.array([(e.lock.observed.to_value(self._xunit, equivalencies=u.spectral()) - self._xs.min)
                        / span * self._plot_px for e in self._entries], dtype=float)
        self._locked_row = stagger_labels(lpx, [e.strength for e in self._entries], self._label_spacing,
                                          rows=self._label_rows)
        occupied = [lpx[self._locked_row == r] for r in range(self._label_rows)]
        self._row = stagger_labels(pixels, self._strength, self._label_spacing, rows=self._label_rows,
                                   occupied=occupied)
        text = [e.lock.label if r >= 0 else "" for e, r in zip(self._entries, self._locked_row)]
        if list(self._locked_labels.text) != text:
            self._locked_labels.text = text
        for g in self._groups:
            text = [self._labels[i] if self._row[i] >= 0 else "" for i in g.index]
            if list(g.label.text) != text:
                g.label.text = text
        self._place_label_rows()

    def _plot_height(self):
        margin = self.figure.fig_margin
        return max(_FIG_HEIGHT - margin["top"] - margin["bottom"], 50)

    def _row_pitch_px(self):
        """Vertical distance between label rows: the longest label, capped so all rows fit."""
        longest = max((len(s) for s in self._labels), default=4)
        return min(longest * _CHAR_PX + 8.0, 0.8 * self._plot_height() / self._label_rows)

    def _place_label_rows(self):
        """Put every label at the height of its row (rows hang down from the top of the plot)."""
        if self._ys.min is None or self._ys.max is None or len(self._row) != len(self._rest):
            return
        top, bottom = float(self._ys.max), float(self._ys.min)
        pitch = self._row_pitch_px() * (top - bottom) / self._plot_height()
        y_all = top - np.maximum(self._row, 0) * pitch
        y_locked = top - np.maximum(self._locked_row, 0) * pitch
        if len(y_locked) == len(self._locked_labels.x) and not np.array_equal(
                np.asarray(self._locked_labels.y, dtype=float), y_locked):
            self._locked_labels.y = y_locked
        for g in self._groups:
            y = y_all[g.index]
            if not np.array_equal(np.asarray(g.label.y, dtype=float), y):
                g.label.y = y

    def label_rows(self):
        """Row (0 = top) of each line's label as drawn now, -1 where the label is hidden."""
        return self._row.copy()

    def locked_label_rows(self):
        """Row (0 = top) of each lock's label as drawn now (order of `locks`), -1 where hidden."""
        return self._locked_row.copy()

    def label_pixels(self):
        """Horizontal screen position (pixels from the left of the plot area) of each line's label."""
        span = self._xs.max - self._xs.min
        return (self._observed(self._rest, self._current_factor) - self._xs.min) / span * self._plot_px

    def observed_positions(self):
        """Predicted observed positions of every line of the set at the current z and velocity."""
        return self._observed(self._rest, self._factor()) * self._xunit

    # ------------------------------------------------------------------ view
    def _on_view(self, change):
        if self._xs.min is None or self._xs.max is None or self._xs.max <= self._xs.min:
            return
        self._redraw_spectrum()
        self._cull_labels(self._current_factor)
        self._update_rest_axis()

    def _on_yview(self, change):
        self._sync_catcher()
        self._place_label_rows()

    def _sync_catcher(self):
        if None in (self._xs.min, self._xs.max, self._ys.min, self._ys.max):
            return
        with self._catcher.hold_sync():
            self._catcher.x = [float(self._xs.min), float(self._xs.max)]
            self._catcher.y = [float(self._ys.min), float(self._ys.max)]

    def _redraw_spectrum(self):
        xmin, xmax = float(self._xs.min), float(self._xs.max)
        x, y = self._pyramid.window(xmin, xmax, self._plot_px)
        with self._line.hold_sync():
            self._line.x, self._line.y = x, y
        if self._band_pyramids is not None:
            bx, blo = self._band_pyramids[0].window(xmin, xmax, self._plot_px)
            bx2, bhi = self._band_pyramids[1].window(xmin, xmax, self._plot_px)
            if bx2.shape != bx.shape or not np.array_equal(bx2, bx):
                bhi = np.interp(bx, bx2, bhi)
            with self._band.hold_sync():
                self._band.x = bx
                self._band.y = np.vstack([blo, bhi])
            self._band.visible = True
        else:
            self._band.visible = False
        inside = np.flatnonzero(self._mask & (self._x >= xmin) & (self._x <= xmax))
        stride = max(1, inside.size // (2 * self._plot_px))
        mx = self._x[inside[::stride]]
        with self._masked.hold_sync():
            self._masked.x = mx
            self._masked.y = np.full(mx.size, self._y0 + 0.02 * (self._y1 - self._y0))
        self._sync_catcher()

    def zoom_to(self, line):
        """Zoom the plot onto one line of the set (label or row index); None shows everything."""
        if line is None:
            self._xs.min, self._xs.max = float(self._x[0]), float(self._x[-1])
            return
        i = self._line_index(line)
        centre = float(self._observed(self._rest[i], self._factor()))
        half = 60 * abs(self._pixel)
        with self._xs.hold_trait_notifications():
            self._xs.min, self._xs.max = centre - half, centre + half
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

    # ------------------------------------------------------------------ rest-frame axis
    def _on_rest_toggle(self, change):
        if change["new"] != self.rest_axis:
            self.rest_axis = bool(change["new"])

    @T.observe("rest_axis")
    def _on_rest_axis(self, change):
        if self._rest_toggle.value != change["new"]:
            self._rest_toggle.value = change["new"]
        margin = dict(_MARGIN)
        if change["new"]:
            margin["top"] = _MARGIN_TOP_REST
            self.figure.axes = [self._xaxis, self._yaxis, self._rest_xaxis]
        else:
            self.figure.axes = [self._xaxis, self._yaxis]
        self.figure.fig_margin = margin
        self._update_rest_axis()
        self._place_label_rows()

    def rest_range(self):
        """Rest-frame span of the current view at the current z and velocity (Quantity, 2 values).

        The observed view limits are divided (wavelength-like axes) or multiplied (frequency-like
        axes) by `zline.physics.kinematics.shift_factor`.
        """
        factor = self._factor()
        lo, hi = float(self._xs.min), float(self._xs.max)
        limits = np.array([lo, hi]) / factor if self._is_length else np.array([lo, hi]) * factor
        return limits * self._xunit

    def _update_rest_axis(self):
        if not self.rest_axis or self._xs.min is None or self._xs.max is None:
            return
        lo, hi = self.rest_range().value
        with self._rest_xs.hold_trait_notifications():
            if self._rest_xs.min != lo or self._rest_xs.max != hi:
                self._rest_xs.min, self._rest_xs.max = float(lo), float(hi)
        kind = self._xaxis.label.replace("observed ", "rest ", 1)
        label = f"{kind} at z = {self.z:.5f}" + (f", v = {self.velocity:g} km/s" if self.velocity else "")
        if self._rest_xaxis.label != label:
            self._rest_xaxis.label = label

    # ------------------------------------------------------------------ candidate scan
    def scan(self, z_min=0.0, z_max=3.0, top=5, lines=None):
        """Search the spectrum for redshifts where the line set matches, and list the candidates.

        Uses `zline.physics.scan.scan_redshift`; a range within |z| <= 0.01 is searched as a
        velocity with `zline.physics.scan.scan_velocity` in the widget's convention.

        Parameters
        ----------
        z_min, z_max : float
            Redshift range searched.
        top : int
            Number of candidates.
        lines : str, optional
            Line set of `zline.physics.catalog.LINE_SETS`; default the widget's own set (a custom
            table cannot be scanned: name a set then).

        Returns
        -------
        `zline.physics.scan.ScanResult`
        """
        for name, val in (("z_min", z_min), ("z_max", z_max)):
            if isinstance(val, u.Quantity) or isinstance(val, bool) or not np.isscalar(val):
                raise TypeError(f"scan: '{name}' must be a plain redshift number; got {val!r}")
        name = lines if lines is not None else self._set_name
        if name == "custom":
            raise ValueError("scan: the widget shows a custom line table; pass lines=<one of "
                             f"{sorted(_physics('catalog').LINE_SETS)}>")
        scan_mod = _physics("scan")
        bar = self._scan_progress
        bar.bar_style = ""
        bar.value = 1
        velocity_scan = max(abs(z_min), abs(z_max)) <= 0.01
        self._say(f"searching {'velocities' if velocity_scan else 'redshifts'} {z_min:g} <= z <= "
                  f"{z_max:g} with line set {name!r} ...")
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                if velocity_scan:
                    kinematics = _physics("kinematics")
                    one = 1.0 * u.AA
                    v_lo, v_hi = (kinematics.velocity_from((1.0 + z) * one, one, convention=self.convention)
                                  for z in (z_min, z_max))
                    result = scan_mod.scan_velocity(self.spectrum, lines=name, v_min=v_lo.to(_KMS),
                                                    v_max=v_hi.to(_KMS), top=top, convention=self.convention)
                else:
                    result = scan_mod.scan_redshift(self.spectrum, lines=name, z_min=z_min, z_max=z_max,
                                                    top=top)
        except Exception:
            bar.value, bar.bar_style = 0, "danger"
            raise
        bar.value = 2
        self._scan_result = result
        self._scan_kind = "velocity" if velocity_scan else "redshift"
        options = []
        for i, c in enumerate(result.candidates):
            where = (f"v={c.velocity.to_value(_KMS):+.1f} km/s" if velocity_scan and c.velocity is not None
                     else f"z={c.z:.5f}")
            options.append((f"{i + 1}. {where}  score {c.score:.3g}  {c.n_matched} lines", i))
        self._syncing = True
        try:
            self._candidates.options = options
            self._candidates.value = None
        finally:
            self._syncing = False
        bar.value, bar.bar_style = _SCAN_STEPS, "success"
        if options:
            self._say(f"{len(options)} candidate(s); click one to move the overlay there")
        else:
            self._say("no candidate found in that range", level="warning")
        return result

    @property
    def candidates(self):
        """Candidates of the last `scan` (`zline.physics.scan.Candidate`), best first."""
        return tuple(self._scan_result.candidates) if self._scan_result is not None else ()

    def jump_to(self, i):
        """Move the overlay to candidate ``i`` (0 = best) of the last `scan`.

        Returns
        -------
        `zline.physics.scan.Candidate`
        """
        cands = self.candidates
        if not cands:
            raise ValueError("jump_to: no candidates yet; run scan() first")
        if isinstance(i, bool) or not isinstance(i, (int, np.integer)) or not 0 <= i < len(cands):
            raise IndexError(f"jump_to: candidate index must be 0..{len(cands) - 1}; got {i!r}")
        c = cands[int(i)]
        with self.hold_trait_notifications():
            if self._scan_kind == "velocity" and c.velocity is not None:
                self.z, self.velocity = 0.0, float(c.velocity.to_value(_KMS))
            else:
                self.z, self.velocity = float(c.z), 0.0
        self._syncing = True
        try:
            if self._candidates.value != int(i):
                self._candidates.value = int(i)
        finally:
            self._syncing = False
        lines = ", ".join(c.lines[:6]) + (" ..." if len(c.lines) > 6 else "")
        self._say(f"candidate {int(i) + 1}: z = {c.z:.5f} (score {c.score:.3g}; {c.n_matched} line(s)"
                  f"{': ' + lines if lines else ''})")
        return c

    def _on_candidate(self, change):
        if self._syncing or change["new"] is None:
            return
        self.jump_to(int(change["new"]))

    # ------------------------------------------------------------------ export
    def export(self, path, format="ecsv", overwrite=False):
        """Write the line table of the locks for a paper (`zline.physics.tables`).

        Parameters
        ----------
        path : str or path-like
            Target file.
        format : str
            One of `zline.physics.tables.TABLE_FORMATS` (ecsv, fits, csv, latex, aastex).
        overwrite : bool
            Replace an existing file; by default an existing file is left alone and
            FileExistsError is raised (and shown in the status area).

        Returns
        -------
        str
            The path written.
        """
        tables = _physics("tables")
        if format not in tables.TABLE_FORMATS:
            raise ValueError(f"export: unknown format {format!r}; options: {sorted(tables.TABLE_FORMATS)}")
        if not self._entries:
            raise ValueError("export: lock at least one line first; the table has one row per lock")
        target = os.fspath(path)
        if os.path.exists(target) and not overwrite:
            self._say(f"{target} exists already; nothing was written. Choose another file name "
                      f"(or pass overwrite=True).", level="error")
            raise FileExistsError(f"export: {target!r} exists; pass overwrite=True to replace it")
        table = tables.line_table_for_paper(list(self.locks), solution=self._solution, spectrum=self.spectrum,
                                            settings={"medium": self._medium, "convention": self.convention})
        table.meta.setdefault("line_set", self._set_name)
        written = tables.write_table(table, target, format=format, overwrite=overwrite)
        self._say(f"wrote {len(table)} line(s) as {format} to {written}")
        return written

    def _on_export_format(self, change):
        stem, ext = os.path.splitext(self._export_path.value)
        new = {"latex": ".tex", "aastex": ".tex"}.get(change["new"], "." + str(change["new"]))
        if ext.lower() in (".ecsv", ".fits", ".csv", ".tex"):
            self._export_path.value = stem + new

    def _on_export_button(self, _):
        try:
            self.export(self._export_path.value, format=self._export_format.value)
        except FileExistsError:
            pass    # export() already said so in plain words

    # ------------------------------------------------------------------ controls <-> traits
    def _sync_controls(self):
        """Push trait values into the controls (compare before assign; one message per control)."""
        self._syncing = True
        try:
            self._place_slider(self.z)
            if self._z_text.value != self.z:
                self._z_text.value = self.z
            if self._v_text.value != self.velocity:
                self._v_text.value = self.velocity
            if self._conv.value != self.convention:
                self._conv.value = self.convention
            mode = self.mode
            if self._mode.value != mode:
                self._mode.value = mode
        finally:
            self._syncing = False

    def _slider_range(self, z):
        if self._fine.value:
            half = 0.005 * (1 + abs(z))
            return z - half, z + half, 1e-5
        hi = 2.0
        while hi < z:
            hi *= 2
        return min(-0.01, z), hi, 0.001

    def _place_slider(self, z, recentre=False):
        s = self._slider
        lo, hi, step = self._slider_range(z)
        if not recentre and s.min <= z <= s.max and s.step == step:
            lo, hi = s.min, s.max
        with s.hold_sync():
            # widen first, then set the value, then narrow: the slider clamps its value to [min, max]
            if s.max < hi:
                s.max = hi
            if s.min > lo:
                s.min = lo
            if s.value != z:
                s.value = z
            if s.max != hi:
                s.max = hi
            if s.min != lo:
                s.min = lo
            if s.step != step:
                s.step = step
            fmt = ".6f" if step < 1e-4 else ".4f"
            if s.readout_format != fmt:
                s.readout_format = fmt

    def _on_slider(self, change):
        if self._syncing:
            return
        # the browser slider snaps a value set from here (an exact z, a solution, a candidate) to
        # its step and sends that back; such an echo within half a step must not round z
        if abs(change["new"] - self.z) <= 0.5 * self._slider.step * (1 + 1e-9):
            return
        if change["new"] != self.z:
            self.z = float(change["new"])

    def _on_fine(self, change):
        self._syncing = True
        try:
            self._place_slider(self.z, recentre=True)
        finally:
            self._syncing = False

    def _on_z_text(self, change):
        if not self._syncing and change["new"] != self.z:
            self.z = float(change["new"])

    def _on_v_text(self, change):
        if not self._syncing and change["new"] != self.velocity:
            self.velocity = float(change["new"])

    def _on_conv(self, change):
        if not self._syncing and change["new"] != self.convention:
            self.convention = change["new"]

    def _on_mode_button(self, change):
        if not self._syncing and change["new"] != self.mode:
            self.mode = change["new"]

    def _on_set_menu(self, change):
        if self._syncing or change["new"] in (None, "custom") or change["new"] == self._set_name:
            return
        self._set_lines(change["new"])
        self._apply_shift(force_labels=True)

    @T.validate("convention")
    def _valid_convention(self, proposal):
        conventions = _conventions()
        if proposal["value"] not in conventions:
            raise T.TraitError(f"'convention' must be one of {sorted(conventions)}; got {proposal['value']!r}")
        return proposal["value"]

    @T.validate("mode")
    def _valid_mode(self, proposal):
        if proposal["value"] not in MODES:
            raise T.TraitError(f"'mode' must be one of {sorted(MODES)}; got {proposal['value']!r}")
        return proposal["value"]

    @T.observe("z", "velocity", "convention")
    def _on_shift_traits(self, change):
        if not self._ready:
            return
        self._sync_controls()
        self._apply_shift()

    @T.observe("mode")
    def _on_mode(self, change):
        self.figure.interaction = None if change["new"] == "identify" else self._panzoom
        self._sync_controls()

    # ------------------------------------------------------------------ locking
    @property
    def locks(self):
        """The locked identifications (`zline.physics.identify.Lock`), in locking order."""
        return tuple(e.lock for e in self._entries)

    def _on_catcher_click(self, mark, content):
        try:
            if self.mode != "identify":
                return
            data = content.get("data") or {}
            x = data.get("click_x")
            if x is None:
                return
            self.lock(near=float(x) * self._xunit)
        except Exception as exc:    # noqa: BLE001 - shown to the user
            self._say(f"{type(exc).__name__}: {exc}", level="error")

    def lock(self, near, line=None, note=""):
        """Lock the predicted line nearest an observed position, at a fitted centroid.

        Parameters
        ----------
        near : `~astropy.units.Quantity` [spectral]
            Observed position of the feature (e.g. where the user clicked).
        line : str or int, optional
            Label or row of the line to lock; default: the predicted line nearest ``near``.
        note : str
            Free text kept with the lock.

        Returns
        -------
        `zline.physics.identify.Lock`
        """
        if not isinstance(near, u.Quantity):
            raise u.UnitTypeError(f"lock: 'near' must be a Quantity in a spectral unit "
                                  f"(e.g. 6600 * u.AA); got {near!r}")
        value = float(near.to_value(self._xunit, equivalencies=u.spectral()))
        if len(self._rest) == 0:
            raise ValueError("lock: the line set is empty")
        predicted = self._observed(self._rest, self._factor())
        i = self._line_index(line) if line is not None else int(np.nanargmin(np.abs(predicted - value)))
        identify = _physics("identify")
        fit, message = None, ""
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                fit = identify.fit_line(self.spectrum, value * self._xunit, label=str(self._labels[i]))
            centre = fit.center.to(self._xunit, equivalencies=u.spectral())
            centre_err = fit.center_err.to(self._xunit, equivalencies=u.spectral())
            low, high = sorted(fit.window.to_value(self._xunit, equivalencies=u.spectral()))
            if not fit.success:
                raise ValueError(f"the optimizer did not converge ({fit.message})")
            if not (np.isfinite(centre.value) and np.isfinite(centre_err.value) and centre_err.value > 0):
                raise ValueError(f"the fitted centre {centre:.7g} +/- {centre_err:.2g} is not usable")
            if not low <= centre.value <= high:
                raise ValueError(f"the fitted centre {centre:.7g} left the fit window")
            # emission or absorption: the size of the S/N decides
            if not (np.isfinite(fit.snr) and abs(fit.snr) >= _physics("fitting").DETECTION_SNR):
                raise ValueError(f"no line detected there (S/N {fit.snr:.2g})")
        except Exception as exc:    # noqa: BLE001 - fall back to the position, and say so
            fit = None
            message = (f"the line fit near {value:.7g} {self._xunit} failed: {exc}. Locked at that "
                       f"position, with one pixel ({abs(self._pixel):.3g} {self._xunit}) as its error")
            centre = value * self._xunit
            centre_err = abs(self._pixel) * self._xunit
        lock = identify.Lock(label=str(self._labels[i]), rest=self._rest[i] * self._xunit, observed=centre,
                             observed_err=centre_err, species=str(self._species[i]), note=str(note),
                             medium=self._medium, fit=fit)
        self._entries = [e for e in self._entries if e.lock.label != lock.label]
        self._entries.append(_Entry(lock, float(self._strength[i]), message))
        self._solution = None
        self._redraw_locks()
        self._show_results()
        if message:
            self._say(f"{lock.label}: {message}", level="warning")
        else:
            self._say(f"locked {lock.label} at {centre.value:.7g} +/- {centre_err.value:.2g} {self._xunit}")
        return lock

    def _entry_index(self, label_or_index):
        if isinstance(label_or_index, (int, np.integer)) and not isinstance(label_or_index, bool):
            if not -len(self._entries) <= label_or_index < len(self._entries):
                raise IndexError(f"lock index {label_or_index} is out of range; there are "
                                 f"{len(self._entries)} locks")
            return int(label_or_index) % len(self._entries)
        for k, e in enumerate(self._entries):
            if e.lock.label == label_or_index:
                return k
        raise KeyError(f"no locked line labelled {label_or_index!r}; locked: "
                       f"{[e.lock.label for e in self._entries]}")

    def unlock(self, label_or_index):
        """Remove a lock, by its label or its position in `locks`."""
        k = self._entry_index(label_or_index)
        gone = self._entries.pop(k)
        self._solution = None
        self._redraw_locks()
        self._show_results()
        self._say(f"dropped the lock on {gone.lock.label}")

    def annotate(self, label, note):
        """Attach a free-text note to a lock (label or index)."""
        k = self._entry_index(label)
        old = self._entries[k].lock
        self._entries[k].lock = dataclasses.replace(old, note=str(note))
        self._show_results()

    def _redraw_locks(self):
        obs = np.array([e.lock.observed.to_value(self._xunit, equivalencies=u.spectral())
                        for e in self._entries], dtype=float)
        if obs.size:
            x, y = marker_arrays(obs, self._y0, self._y1)
        else:
            x, y = np.array([np.nan]), np.array([np.nan])
        with self._locked.hold_sync():
            self._locked.x, self._locked.y = x, y
        with self._locked_labels.hold_sync():
            self._locked_labels.x = obs
            self._locked_labels.y = np.full(obs.size, self._y1)
            self._locked_labels.text = [e.lock.label for e in self._entries]
        if self._ready:
            self._cull_labels(self._current_factor, force=True)

    # ------------------------------------------------------------------ solving and tables
    def solve(self):
        """Solve the redshift from the locks and move the overlay there.

        Returns
        -------
        z, z_err : float
        """
        if not self._entries:
            raise ValueError("solve: lock at least one line first (identify mode: click a feature)")
        identify = _physics("identify")
        sol = identify.solve_redshift(list(self.locks), convention=self.convention)
        z, z_err = float(sol.z), float(sol.z_err)
        self._solution = sol
        with self.hold_trait_notifications():
            self.velocity = 0.0
            self.z = z
        self._show_results()
        self._say(f"solved z = {z:.7f} +/- {z_err:.2g} from {len(self._entries)} line(s)")
        return z, z_err

    def _residuals(self):
        if not self._entries:
            return np.zeros(0) * _KMS
        kinematics = _physics("kinematics")
        observed = u.Quantity([e.lock.observed.to(self._xunit, equivalencies=u.spectral())
                               for e in self._entries])
        rest = u.Quantity([e.lock.rest.to(self._xunit, equivalencies=u.spectral()) for e in self._entries])
        v = kinematics.velocity_from(observed, rest, convention=self.convention, z=self.z)
        return (v - self.velocity * _KMS).to(_KMS)

    _FIT_COLUMNS = ("flux", "fwhm", "fwhm_kms", "ew", "snr")

    def table(self):
        """One row per lock: ``label, species, rest, observed, observed_err, residual_kms, note`` and
        the line fit (``fit_flux``, ``fit_flux_err``, ``fit_fwhm``, ... ``fit_snr``; NaN where no fit).

        Returns
        -------
        `~astropy.table.QTable`
            meta holds z, velocity, convention, medium, line set and file.
        """
        t = QTable()
        xu = self._xunit
        n = len(self._entries)
        t["label"] = [e.lock.label for e in self._entries] if n else np.zeros(0, dtype=str)
        t["species"] = [e.lock.species for e in self._entries] if n else np.zeros(0, dtype=str)
        for name in ("rest", "observed", "observed_err"):
            t[name] = u.Quantity([getattr(e.lock, name).to(xu, equivalencies=u.spectral())
                                  for e in self._entries]) if n else np.zeros(0) * xu
        t["residual_kms"] = self._residuals()
        t["fitted"] = np.array([self._has_fit(e) for e in self._entries], dtype=bool)
        for name in self._FIT_COLUMNS:
            for suffix in ("", "_err"):
                attr = name + suffix
                values = [self._fit_value(e, attr) for e in self._entries]
                unit = next((v.unit for v in values if isinstance(v, u.Quantity)), None)
                if all(v is None for v in values) and name == "snr" and suffix:
                    continue
                col = [np.nan if v is None else (v.to_value(unit) if isinstance(v, u.Quantity) else float(v))
                       for v in values]
                t["fit_" + attr] = np.array(col, dtype=float) * (unit if unit is not None else 1)
        t["note"] = [e.lock.note for e in self._entries] if n else np.zeros(0, dtype=str)
        t.meta.update(z=self.z, velocity=self.velocity * _KMS, convention=self.convention,
                      medium=self._medium, line_set=self._set_name, file=self._source_name)
        if self._solution is not None:
            t.meta.update(z_err=float(self._solution.z_err), chi2_dof=float(self._solution.chi2_dof))
        return t

    @staticmethod
    def _has_fit(entry):
        return entry.lock.fit is not None or bool(entry.fit_record)

    @staticmethod
    def _fit_value(entry, attr):
        if entry.lock.fit is not None:
            return getattr(entry.lock.fit, attr, None)
        item = (entry.fit_record or {}).get(attr)
        if isinstance(item, dict) and "value" in item and "unit" in item:
            return u.Quantity(item["value"], u.Unit(item["unit"]))
        return item if isinstance(item, (int, float)) else None

    def _show_results(self):
        if not self._entries:
            self._results.value = "<i>No locked lines yet.</i>"
            return
        try:
            res = self._residuals().to_value(_KMS)
        except RuntimeError:
            res = np.full(len(self._entries), np.nan)
        outliers = np.zeros(len(self._entries), bool)
        head = ""
        if self._solution is not None:
            sol = self._solution
            outliers = np.asarray(sol.outliers, bool)
            head = (f"<p><b>z = {sol.z:.7f} &plusmn; {sol.z_err:.2g}</b> (1&sigma;), "
                    f"&chi;&sup2;/dof = {sol.chi2_dof:.3g}, {sol.n_used} of {len(self._entries)} "
                    f"line(s) used</p>")
        rows = []
        for e, r, bad in zip(self._entries, res, outliers):
            lk = e.lock
            fitted = "fit" if self._has_fit(e) else "position only"
            rows.append(f"<tr><td>{html.escape(lk.label)}</td><td>{lk.rest.value:.7g}</td>"
                        f"<td>{lk.observed.value:.7g} &plusmn; {lk.observed_err.value:.2g}</td>"
                        f"<td>{r:+.1f}</td><td>{fitted}{' (outlier)' if bad else ''}</td>"
                        f"<td>{html.escape(lk.note)}</td></tr>")
        unit = html.escape(self._xunit.to_string("unicode"))
        self._results.value = (head + f"<table><tr><th>line</th><th>rest [{unit}]</th>"
                               f"<th>observed [{unit}]</th><th>residual [km/s]</th><th>centre from</th>"
                               f"<th>note</th></tr>{''.join(rows)}</table>")

    # ------------------------------------------------------------------ upload, save, restore
    def _on_upload(self, change):
        files = change["new"]
        if not files:
            return
        f = files[0]
        try:
            self.load(bytes(f["content"]))
        except Exception:    # noqa: BLE001 - load() already put the reason in the status area
            return
        self._source_name = f.get("name", "upload")
        self._say(f"opened {self._source_name}")

    def save(self, path, overwrite=False):
        """Save the session (locks with their fits, z or the solution, settings, spectrum path).

        Parameters
        ----------
        path : str or path-like
            Session file to write (JSON).
        overwrite : bool
            Replace an existing file.

        Returns
        -------
        pathlib.Path
        """
        session = _physics("session")
        fits = [e.lock.fit if e.lock.fit is not None else e.fit_record for e in self._entries]
        settings = {"z": self.z, "velocity": self.velocity * _KMS, "convention": self.convention,
                    "medium": self._medium, "line_set": self._set_name, "mode": self.mode,
                    "view": [float(self._xs.min), float(self._xs.max)] * self._xunit}
        source = self._source_name
        if source is not None and os.path.exists(source):
            source = os.path.abspath(source)
        try:
            written = session.save_session(path, {"locks": list(self.locks), "fits": fits,
                                                  "z": self._solution if self._solution is not None
                                                  else self.z,
                                                  "settings": settings, "spectrum": source},
                                           overwrite=overwrite)
        except FileExistsError:
            self._say(f"{os.fspath(path)} exists already; pass overwrite=True to replace it",
                      level="error")
            raise
        self._say(f"saved {len(self._entries)} lock(s) to {written}")
        return written

    @classmethod
    def restore(cls, path, spectrum=None, lines=None, **kwargs):
        """Re-open a session saved with `save`.

        Parameters
        ----------
        path : str or path-like
            Session file.
        spectrum : optional
            Spectrum to use instead of the file named in the session (needed when the session
            came from an upload).
        lines : optional
            Line set instead of the saved one (needed when the session used a custom table).
        **kwargs
            Passed to `LineIdentifier`.
        """
        session = _physics("session")
        doc = session.load_session(path)
        settings = doc.get("settings") or {}
        source = spectrum if spectrum is not None else doc.get("spectrum")
        if source is None:
            raise ValueError(f"restore: the session {os.fspath(path)!r} names no spectrum file; "
                             f"pass spectrum=...")
        line_set = lines if lines is not None else settings.get("line_set", "galaxy-emission")
        if isinstance(line_set, str) and line_set == "custom":
            raise ValueError(f"restore: the session {os.fspath(path)!r} used a custom line table; "
                             f"pass lines=<that table>")
        velocity = settings.get("velocity", 0.0 * _KMS)
        kwargs.setdefault("medium", settings.get("medium"))
        w = cls(source, lines=line_set, z=float(settings.get("z", 0.0)), velocity=velocity,
                convention=settings.get("convention", "optical"), **kwargs)
        fits = doc.get("fits") or []
        if isinstance(fits, dict):
            fits = [fits.get(lock.label) for lock in doc["locks"]]
        for k, lock in enumerate(doc["locks"]):
            hits = np.flatnonzero(w._labels == lock.label)
            strength = float(w._strength[hits[0]]) if hits.size else 0.0
            record = fits[k] if k < len(fits) and isinstance(fits[k], dict) else None
            w._entries.append(_Entry(lock, strength, "", record))
        view = settings.get("view")
        if isinstance(view, u.Quantity) and view.size == 2:
            lo, hi = view.to_value(w._xunit, equivalencies=u.spectral())
            with w._xs.hold_trait_notifications():
                w._xs.min, w._xs.max = float(lo), float(hi)
        if settings.get("mode") in MODES:
            w.mode = settings["mode"]
        w._redraw_locks()
        w._show_results()
        w._say(f"restored {len(w._entries)} lock(s) from {os.fspath(path)}")
        return w

    # ------------------------------------------------------------ survey catalogue round trip

    @classmethod
    def from_catalog(cls, catalog, row, lines=None, **kwargs):
        """Open one spectrum of a ``zline batch`` catalogue at its catalogue redshift.

        Parameters
        ----------
        catalog : str or path-like
            ECSV catalogue written by ``zline batch`` / `zline.physics.batch.measure_survey`.
        row : int or str
            Row index, or the spectrum's file (absolute path or unique base name).
        lines : str, optional
            Line set; default: the one the batch used.
        **kwargs
            Passed to `LineIdentifier`.
        """
        batch = _physics("batch")
        entry = batch.catalog_row(catalog, row)
        z = entry.get("z_checked")
        if z is None or not np.isfinite(z):
            z = entry["z"]
        if not np.isfinite(z):
            z = 0.0  # a row without a candidate (e.g. a bad file): open at rest
        if lines is None:
            from astropy.table import Table  # noqa: PLC0415

            meta = Table.read(os.fspath(catalog), format="ascii.ecsv").meta.get("zline_batch", {})
            lines = meta.get("lines", "galaxy-emission")
        w = cls(entry["file"], lines=lines, z=float(z), **kwargs)
        w._catalog = (os.fspath(catalog), entry["file"])
        w._say(f"opened row {entry['row']} of {os.path.basename(os.fspath(catalog))} at z = {z:.6f}")
        return w

    def write_to_catalog(self, catalog=None, who=None, note=""):
        """Write this spectrum's solved redshift back to its survey catalogue row.

        The catalogue's blind ``z`` is kept; the checked value, who and when go beside it (see
        `zline.physics.batch.record_correction`).  Solve first (`solve`): without a solution the
        current ``z`` of the overlay is written with no error.

        Returns
        -------
        dict
            The correction recorded.
        """
        opened = getattr(self, "_catalog", None)
        if catalog is None and opened is None:
            raise ValueError("write_to_catalog: this widget was not opened with from_catalog; "
                             "pass catalog=<path of the ECSV catalogue>")
        catalog = os.fspath(catalog) if catalog is not None else opened[0]
        file = opened[1] if opened is not None else self._source_name
        z, z_err = float(self.z), None
        if self._solution is not None and np.isclose(float(self._solution.z), z, rtol=0, atol=1e-12):
            z_err = float(self._solution.z_err)
        batch = _physics("batch")
        try:
            done = batch.record_correction(catalog, file, z, z_err, who=who, note=note)
        except (ValueError, KeyError, IndexError, OSError) as exc:
            self._say(f"could not write to the catalogue: {exc}", level="error")
            raise
        self._say(f"wrote z = {z:.6f} to {os.path.basename(catalog)} (by {done['who']})")
        return done
