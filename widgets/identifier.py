"""Interactive line identification on a 1D spectrum: overlay predicted lines, lock, solve, save.

`LineIdentifier` composes the rooms of this package: the state (`state`), the whole-spectrum
view (`plot`), the verification strip (`strip`), the controls (`controls`) and the session,
table, catalogue and scan glue (`glue`).  Every number with physics in it comes from
`zline.physics`.
"""

import hashlib
import html
import os
import re

import astropy.units as u
import ipywidgets as W
import numpy as np
from astropy.nddata import StdDevUncertainty

from zline.physics import catalog, kinematics
from zline.physics.spectra import read_spectrum

from . import glue
from .candidates import ScanMixin
from ._marks import PALETTE, TELLURIC_AA
from .controls import Controls, ShiftControlsMixin, help_html
from .locking import LockingMixin
from .plot import SpectrumPlot, header_html
from .state import MODES, IdentifierState, LockBook
from .strip import VerificationStrip

__all__ = ["LineIdentifier", "MODES"]

_KMS = u.km / u.s
_C_KMS = 299792.458             # km/s, exact (SI definition)


class LineIdentifier(LockingMixin, ShiftControlsMixin, ScanMixin, glue.SessionMixin, IdentifierState,
                     W.VBox):
    """Overlay predicted lines on a spectrum at a trial redshift, lock identifications, solve z.

    Parameters
    ----------
    spectrum : str, path, bytes or `specutils.Spectrum`
        A FITS file (path or its bytes, read with `zline.physics.spectra.read_spectrum`) or a
        spectrum already read.
    lines : str, `~astropy.table.QTable` or None
        A line set of `zline.physics.catalog.LINE_SETS`, or a table with columns ``label``,
        ``rest`` (spectral Quantity) and optionally ``species``, ``strength``, ``origin``/``kind``.
        None: the set that fits the spectral axis (`zline.physics.catalog.line_set_for_axis`).
    z : float
        Trial redshift.
    velocity : `~astropy.units.Quantity` ['speed']
        Trial velocity on top of ``z``.
    convention : str
        Velocity convention, one of `zline.physics.kinematics.CONVENTIONS`.
    medium : {"vacuum", "air"} or None
        Medium of the spectral axis when the spectrum does not say; the spectrum's own statement wins.
    width : int
        Figure width in pixels (also the decimation resolution).
    label_rows : int
        Rows of labels in the band above the data.

    Attributes
    ----------
    figure : `bqplot.Figure`
        The data view (class ``zline-plot``); ``plot.band_figure`` is the label band above it and
        ``strip`` the verification strip.
    """

    def __init__(self, spectrum, lines=None, z=0.0, velocity=0.0 * _KMS, convention="optical",
                 medium=None, width=960, label_rows=4, **kwargs):
        super().__init__(**kwargs)
        if not isinstance(velocity, u.Quantity) or not velocity.unit.is_equivalent(_KMS):
            raise u.UnitTypeError(f"LineIdentifier: 'velocity' must be a Quantity with a speed unit "
                                  f"(e.g. 120 * u.km / u.s); got {velocity!r}")
        if convention not in kinematics.CONVENTIONS:
            raise ValueError(f"LineIdentifier: 'convention' must be one of {sorted(kinematics.CONVENTIONS)}; "
                             f"got {convention!r}")
        self._medium_arg, self._ready, self._syncing = medium, False, False
        self._book, self._solution, self._scan = LockBook(), None, (None, None)
        self._source_name = self._source_sha256 = self._source_path = None
        self._slider_pushed, self._anchor = 0.0, float(z)
        self._confirm = glue.ConfirmStep()
        self.plot = SpectrumPlot(width=width, label_rows=label_rows)
        self.plot.to_observed = lambda rest: self._observed(rest, self._factor_now)
        self.plot.on_click = self._on_plot_click
        self.plot.on_view = self._on_view
        self.figure = self.plot.figure
        self.strip = VerificationStrip(width=width)
        self.strip.on_click = self._on_strip_click
        self.ui = Controls(width=width)
        self._header = W.HTML()
        self._factor_now = 1.0
        self._set_spectrum(self._read(spectrum, medium), source=spectrum)
        self._set_lines(lines)
        with self.hold_trait_notifications():
            self.z, self.velocity, self.convention = float(z), float(velocity.to_value(_KMS)), convention
        self._wire()
        self._ready = True
        self._apply_shift()
        self._sync_controls(recentre=True)
        self.ui.help.value = help_html(self.click_tolerance_text())
        self.view = W.VBox([self._header, self.plot.band_figure, self.figure, self.plot.key])
        self.view.add_class("zline-view")
        self.add_class("zline-identifier")
        self.children = [self.view, self.strip.widget,
                         self.ui.shift_box, self.ui.view_box, self.ui.lock_box, self.ui.scan_box,
                         self.ui.export_box, self.ui.help, self.ui.status]
        self._keys = self.ui.watch_keys(self, self._on_key)

    # ------------------------------------------------------------------ wiring
    def _wire(self):
        ui, g = self.ui, self._guard
        self.observe(self._on_shift_traits, names=["z", "velocity", "convention"])
        self.observe(self._on_display_traits, names=["mode", "rest_axis", "log_flux", "smoothing", "smoothing_px"])
        ui.slider.observe(g(self._on_slider), names="value")
        ui.z_text.observe(g(self._on_z_text), names="value")
        ui.v_text.observe(g(lambda c: None if self._syncing else setattr(self, "velocity", float(c["new"]))),
                          names="value")
        ui.conv.observe(g(lambda c: None if self._syncing else setattr(self, "convention", c["new"])),
                        names="value")
        ui.set_menu.observe(g(self._on_set_menu), names="value")
        ui.mode.observe(g(lambda c: None if self._syncing else setattr(self, "mode", c["new"])), names="value")
        ui.rest_toggle.observe(g(lambda c: setattr(self, "rest_axis", bool(c["new"]))), names="value")
        ui.log.observe(g(lambda c: setattr(self, "log_flux", bool(c["new"]))), names="value")
        ui.smooth.observe(g(lambda c: setattr(self, "smoothing", c["new"])), names="value")
        ui.smooth_px.observe(g(lambda c: setattr(self, "smoothing_px", float(c["new"]))), names="value")
        ui.jump_button.on_click(g(lambda _: self.zoom_to(ui.jump.value)))
        ui.full_button.on_click(g(lambda _: self.zoom_to(None)))
        ui.autoscale.on_click(g(lambda _: self.plot.autoscale_y()))
        ui.y_in.on_click(g(lambda _: self.plot.zoom_y(0.5)))
        ui.y_out.on_click(g(lambda _: self.plot.zoom_y(2.0)))
        ui.solve.on_click(g(lambda _: self.solve()))
        ui.undo.on_click(g(lambda _: self.undo()))
        ui.redo.on_click(g(lambda _: self.redo()))
        ui.save.on_click(g(lambda _: glue.write_with_confirm(
            self, self._confirm, ui.save_path.value,
            lambda overwrite: self.save(ui.save_path.value, overwrite=overwrite), "save")))
        ui.export.on_click(g(lambda _: glue.write_with_confirm(
            self, self._confirm, ui.export_path.value,
            lambda overwrite: self.export(ui.export_path.value, ui.export_format.value, overwrite=overwrite),
            "write table")))
        ui.export_format.observe(g(self._on_export_format), names="value")
        ui.upload.observe(g(self._on_upload), names="value")
        ui.scan.on_click(g(lambda _: self.scan(ui.scan_min.value, ui.scan_max.value)))
        ui.candidates.observe(g(lambda c: None if self._syncing or c["new"] is None
                                else self.jump_to(int(c["new"]))), names="value")

    def _guard(self, handler):
        """Wrap a UI callback so that any error lands in the status area in plain words."""
        def wrapped(*args):
            try:
                handler(*args)
            except Exception as exc:    # noqa: BLE001 - shown to the user, not swallowed
                self._say(f"{type(exc).__name__}: {exc}", level="error")
        return wrapped

    def _on_key(self, action):
        ui, step = self.ui, self.ui.slider.step
        moves = {"z_up": step, "z_down": -step, "z_up10": 10 * step, "z_down10": -10 * step}
        if action in moves:
            self.z = self.z + moves[action]
        elif action.startswith("mode_"):
            self.mode = {"mode_lock": "lock", "mode_pan": "pan/zoom", "mode_y": "y only"}[action]
        else:
            {"autoscale": ui.autoscale, "whole": ui.full_button, "solve": ui.solve, "undo": ui.undo,
             "redo": ui.redo}.get(action, W.Button()).click()
            if action == "drop_last":
                self._guard(lambda: self.unlock(-1) if len(self._book) else self._say("No lock to remove."))()

    def _say(self, message, level="info"):
        colour = {"info": "#000000", "warning": "#B35900", "error": "#B00020"}[level]
        word = {"info": "", "warning": "Warning: ", "error": "Problem: "}[level]
        self.ui.status.value = (f'<div class="zline-{level}" style="color:{colour}">'
                                f"{html.escape(word + message)}</div>")

    @property
    def status(self):
        """Plain text of the status area (last message shown to the user)."""
        return html.unescape(re.sub(r"<[^>]+>", "", self.ui.status.value))

    # ------------------------------------------------------------------ spectrum and line set
    @staticmethod
    def _read(source, medium):
        if hasattr(source, "spectral_axis") and hasattr(source, "flux"):
            return source
        if isinstance(source, (bytes, bytearray, memoryview, str, os.PathLike)):
            return read_spectrum(source, medium=medium)
        raise TypeError(f"LineIdentifier: 'spectrum' must be a FITS path, FITS bytes or a specutils "
                        f"Spectrum; got {type(source).__name__}")

    def load(self, source, medium=None, name=None):
        """Replace the spectrum (path, FITS bytes or Spectrum) and start clean.

        Locks, their history, the solution and the scan candidates are dropped; the line set
        becomes the one that fits the new spectral axis (radio for frequency, X-ray for energy),
        and the widget says which and why. A problem is shown in the status area and raised.
        """
        try:
            spectrum = self._read(source, medium if medium is not None else self._medium_arg)
            self._set_spectrum(spectrum, source=source, name=name)
        except Exception as exc:
            where = f"file {os.fspath(source)!r}" if isinstance(source, (str, os.PathLike)) else "the data"
            self._say(f"could not open {name or where}: {exc}", level="error")
            raise
        keep = self._set_name if self._set_name not in ("custom", "radio", "xray") else "galaxy-emission"
        chosen, reason = catalog.line_set_for_axis(spectrum.spectral_axis, default=keep)
        self._set_lines(chosen)
        self._apply_shift()
        shown = os.path.basename(self._source_name or "spectrum")
        self._say(f"opened {shown}; line set {chosen!r}" + (f" because {reason}" if reason else ""))

    def _set_spectrum(self, spectrum, source=None, name=None):
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
        if mask.all():
            raise ValueError("LineIdentifier: every pixel of the spectrum is masked or not finite")
        err = None
        if spectrum.uncertainty is not None:
            err = np.asarray(spectrum.uncertainty.represent_as(StdDevUncertainty).array, float)[order]
        self.spectrum, self._meta, self._medium, self._xunit, self._x = spectrum, meta, medium, xunit, x
        self._book.clear(history=True)
        self._solution, self._scan = None, (None, None)
        if hasattr(self, "ui"):
            self._syncing = True
            self.ui.candidates.options, self.ui.scan_progress.value = [], 0
            self._syncing = False
        self._source_path = None  # a file on disk the session can re-open (None for an upload)
        if isinstance(source, (bytes, bytearray, memoryview)):
            self._source_name = name or meta.get("file") or "upload"
            self._source_sha256 = hashlib.sha256(bytes(source)).hexdigest()
        else:
            self._source_name = os.fspath(source) if isinstance(source, (str, os.PathLike)) else meta.get("file")
            self._source_sha256 = None
            if isinstance(source, (str, os.PathLike)) and os.path.isfile(source):
                self._source_path = os.path.abspath(os.fspath(source))
        kind = next((k for k, unit in (("wavelength", u.m), ("frequency", u.Hz), ("energy", u.J),
                                       ("wavenumber", 1 / u.m)) if xunit.is_equivalent(unit)), "position")
        where = f" in {medium}" if self._is_length else ""
        ustr = xunit.to_string("unicode")
        funit = spectrum.flux.unit.to_string("unicode") if spectrum.flux.unit != u.dimensionless_unscaled else ""
        telluric = ([(a * u.AA).to_value(xunit) for a in span] for span in TELLURIC_AA) if self._is_length else ()
        self.plot.set_spectrum(x, flux, err, mask, f"observed {kind}{where} [{ustr}]",
                               f"flux [{funit}]" if funit else "flux", telluric=list(telluric))
        pixel_kms = _C_KMS * abs(self.plot.pixel) / float(np.median(x))
        self.strip.set_data(x, flux, mask, xunit, pixel_kms)
        assumed = " (medium assumed: no keyword in the file)" if meta.get("medium_assumed") else ""
        said = [f.get("message", "") for f in meta.get("flags", []) if isinstance(f, dict)]
        self._header.value = header_html(os.path.basename(self._source_name or "spectrum"), x.size, x[0], x[-1],
                                         ustr, f", {medium}{assumed}" if self._is_length else "",
                                         note="; ".join(m for m in said if m))
        if getattr(self, "_ready", False):
            self._locks_changed(say=False)

    def _set_lines(self, lines):
        if lines is None:
            lines, reason = catalog.line_set_for_axis(self.spectrum.spectral_axis)
        if isinstance(lines, str):
            if lines not in catalog.LINE_SETS:
                raise ValueError(f"LineIdentifier: 'lines' must be one of {sorted(catalog.LINE_SETS)} or a "
                                 f"table; got {lines!r}")
            table, self._set_name = catalog.line_set(lines, medium=self._medium, unit=self._xunit), lines
        elif hasattr(lines, "colnames"):
            missing = {"label", "rest"} - set(lines.colnames)
            if missing:
                raise ValueError(f"LineIdentifier: the 'lines' table lacks column(s) {sorted(missing)}; "
                                 f"it has {lines.colnames}")
            table, self._set_name = lines, "custom"
        else:
            raise TypeError(f"LineIdentifier: 'lines' must be a line-set name or a table; got {type(lines).__name__}")
        n, rest = len(table), table["rest"]
        if not isinstance(rest, u.Quantity):
            raise u.UnitTypeError("LineIdentifier: the 'rest' column of 'lines' must carry a spectral unit")
        self._lines_arg, self._line_table = lines, table
        self._rest = np.asarray(rest.to_value(self._xunit, equivalencies=u.spectral()), dtype=float)
        self._labels = np.array([str(s) for s in table["label"]], dtype=object)
        self._species = (np.array([str(s) for s in table["species"]], dtype=object)
                         if "species" in table.colnames else np.full(n, "", dtype=object))
        self._strength = (np.asarray(table["strength"], dtype=float) if "strength" in table.colnames
                          else np.ones(n))
        column = "origin" if "origin" in table.colnames else "kind" if "kind" in table.colnames else None
        kinds = (np.array([str(s) for s in table[column]], dtype=object) if column
                 else np.full(n, "other", dtype=object))
        self.plot.set_lines(self._rest, self._labels, self._strength, kinds,
                            lambda k: PALETTE.get(k, PALETTE["other"]))
        self.strip.set_lines(self._rest, self._labels, self._strength)
        names = list(catalog.LINE_SETS) + (["custom"] if self._set_name == "custom" else [])
        self._syncing = True
        try:
            if list(self.ui.set_menu.options) != names:
                self.ui.set_menu.options = names
            self.ui.set_menu.value = self._set_name
            by_strength = np.argsort(-self._strength, kind="stable")
            self.ui.jump.options = [(f"{self._labels[i]}", int(i)) for i in by_strength]
            if by_strength.size:
                self.ui.jump.value = int(by_strength[0])
        finally:
            self._syncing = False
        self._locks_changed(say=False)

    def _on_set_menu(self, change):
        if not self._syncing and change["new"] not in (None, "custom") and change["new"] != self._set_name:
            self._set_lines(change["new"])
            self._apply_shift()

