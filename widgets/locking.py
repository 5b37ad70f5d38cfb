"""Locks of `LineIdentifier`: safe clicks, lock/unlock with undo and redo, solving, the lock table."""

import dataclasses
import warnings

import astropy.units as u
import ipywidgets as W
import numpy as np

from zline.physics import identify, kinematics
from zline.physics.fitting import DETECTION_SNR

from . import glue
from .controls import lock_rows
from .state import Entry

__all__ = ["LockingMixin", "CLICK_PIXELS", "CLICK_SCREEN_PX"]

_KMS = u.km / u.s
CLICK_PIXELS = 4.0       # a click locks a predicted line within this many spectrum pixels ...
CLICK_SCREEN_PX = 6.0    # ... or this many screen pixels of the current view, whichever is wider


class LockingMixin:
    """Lock-related methods of `LineIdentifier` (needs ``_book``, ``plot``, ``strip``, ``ui``)."""

    @property
    def locks(self):
        """The locked identifications (`zline.physics.identify.Lock`), in locking order."""
        return tuple(e.lock for e in self._book)

    def click_tolerance(self):
        """Largest distance (spectral unit of the plot) between a click and the line it locks."""
        lo, hi = self.plot.view_range()
        return max(CLICK_PIXELS * abs(self.plot.pixel), CLICK_SCREEN_PX * (hi - lo) / self.plot.plot_px)

    def click_tolerance_text(self):
        return (f"{CLICK_PIXELS:g} spectrum pixels or {CLICK_SCREEN_PX:g} screen pixels, whichever is "
                f"wider (now {self.click_tolerance():.3g} {self._xunit})")

    def _on_plot_click(self, x):
        if self.mode != "lock":
            return
        try:
            self.lock_click(x * self._xunit)
        except Exception as exc:    # noqa: BLE001 - shown to the user
            self._say(f"{type(exc).__name__}: {exc}", level="error")

    def lock_click(self, near):
        """What a click in lock mode does: lock the nearest predicted line if it is within
        `click_tolerance`, else lock nothing and name the nearest lines.  Returns the lock or None."""
        value = float(near.to_value(self._xunit, equivalencies=u.spectral()))
        predicted = self._observed(self._rest, self._factor())
        dist = np.abs(predicted - value)
        tol = self.click_tolerance()
        i = int(np.nanargmin(dist)) if dist.size else -1
        if i < 0 or dist[i] > tol:
            near3 = np.argsort(dist)[:3]
            names = ", ".join(f"{self._labels[k]} ({predicted[k] - value:+.4g})" for k in near3)
            self._say(f"nothing locked: no predicted line within {tol:.3g} {self._xunit} of {value:.7g}; "
                      f"nearest: {names}", level="warning")
            return None
        return self.lock(near=self._snap(value, tol) * self._xunit, line=int(i))

    def _snap(self, value, tol):
        """Where the user meant: the pixel within ``tol`` of a click that stands out most from the
        local median (in units of its error when known); the click itself if nothing is there."""
        x, flux = self.plot._x, self.plot._flux
        a, b = np.searchsorted(x, [value - tol, value + tol])
        good = ~self.plot._mask[a:b]
        if b - a < 3 or good.sum() < 3:
            return value
        seg = flux[a:b][good]
        dev = np.abs(seg - np.median(seg))
        if self.plot._err is not None:
            dev = dev / np.where(self.plot._err[a:b][good] > 0, self.plot._err[a:b][good], np.inf)
        return float(x[a:b][good][int(np.argmax(dev))])

    def _on_strip_click(self, line_index, v_kms):
        try:
            rest = self._rest[line_index] * self._xunit
            near = kinematics.observed_position(rest, z=self.z, velocity=(self.velocity + v_kms) * _KMS,
                                                convention=self.convention)
            value = float(near.to_value(self._xunit, equivalencies=u.spectral()))
            tol = abs(value) * 0.25 * self.strip.half_width / 299792.458   # a quarter of the panel
            self.lock(near=self._snap(value, tol) * self._xunit, line=int(line_index))
        except Exception as exc:    # noqa: BLE001 - shown to the user
            self._say(f"{type(exc).__name__}: {exc}", level="error")

    def lock(self, near, line=None, note=""):
        """Lock a predicted line at the fitted centre of the feature near an observed position.

        Parameters
        ----------
        near : `~astropy.units.Quantity` [spectral]
            Observed position of the feature.
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
        unit, pixel = self._xunit, abs(self.plot.pixel)
        message = ""
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                fit = identify.fit_line(self.spectrum, value * unit, label=str(self._labels[i]))
            centre = fit.center.to(unit, equivalencies=u.spectral())
            centre_err = fit.center_err.to(unit, equivalencies=u.spectral())
            low, high = sorted(fit.window.to_value(unit, equivalencies=u.spectral()))
            if not fit.success:
                raise ValueError(f"the optimizer did not converge ({fit.message})")
            if not (np.isfinite(centre.value) and np.isfinite(centre_err.value) and centre_err.value > 0):
                raise ValueError(f"the fitted centre {centre:.7g} +/- {centre_err:.2g} is not usable")
            if not low <= centre.value <= high:
                raise ValueError(f"the fitted centre {centre:.7g} left the fit window")
            if not (np.isfinite(fit.snr) and abs(fit.snr) >= DETECTION_SNR):
                raise ValueError(f"no line detected there (S/N {fit.snr:.2g})")
        except Exception as exc:    # noqa: BLE001 - fall back to the position, and say so
            fit = None
            message = (f"the line fit near {value:.7g} {unit} failed: {exc}. Locked at that position, "
                       f"with one pixel ({pixel:.3g} {unit}) as its error")
            centre, centre_err = value * unit, pixel * unit
        lock = identify.Lock(label=str(self._labels[i]), rest=self._rest[i] * unit, observed=centre,
                             observed_err=centre_err, species=str(self._species[i]), note=str(note),
                             medium=self._medium, fit=fit)
        self._book.add(Entry(lock, float(self._strength[i]), message))
        self._locks_changed(say=False)
        if message:
            self._say(f"{lock.label}: {message}", level="warning")
        else:
            self._say(f"locked {lock.label} at {centre.value:.7g} +/- {centre_err.value:.2g} {unit}")
        return lock

    def unlock(self, label_or_index):
        """Remove a lock, by its label or its position in `locks` (undoable)."""
        gone = self._book.remove(label_or_index)
        self._locks_changed(say=False)
        self._say(f"removed the lock on {gone.lock.label} (undo brings it back)")

    def undo(self):
        """Undo the last lock change (lock, re-lock, removal, note); False if there is none."""
        done = self._book.undo()
        self._locks_changed(say=False)
        self._say("undid the last lock change" if done else "nothing to undo")
        return done

    def redo(self):
        """Redo the lock change last undone; False if there is none."""
        done = self._book.redo()
        self._locks_changed(say=False)
        self._say("redid the lock change" if done else "nothing to redo")
        return done

    def annotate(self, label, note):
        """Attach a free-text note to a lock (label or index)."""
        k = self._book.index(label)
        e = self._book.entries[k]
        self._book.replace(k, dataclasses.replace(e, lock=dataclasses.replace(e.lock, note=str(note))))
        self._locks_changed(say=False)

    def _locks_changed(self, say=True):
        """Redraw everything that shows locks; the solution belongs to the old set of locks."""
        self._solution = None
        obs = [e.lock.observed.to_value(self._xunit, equivalencies=u.spectral()) for e in self._book]
        self.plot.set_locks(obs, [e.lock.label for e in self._book], [e.strength for e in self._book])
        if getattr(self, "_ready", False):
            self._update_strip()
        self.ui.undo.disabled = not self._book.can_undo
        self.ui.redo.disabled = not self._book.can_redo
        self._show_results()

    def solve(self):
        """Solve the redshift from the locks and move the overlay there.

        Returns
        -------
        z, z_err : float
        """
        if not len(self._book):
            raise ValueError("solve: lock at least one line first (lock mode: click a feature)")
        sol = identify.solve_redshift(list(self.locks), convention=self.convention)
        z, z_err = float(sol.z), float(sol.z_err)
        self._solution = sol
        with self.hold_trait_notifications():
            self.velocity = 0.0
            self.z = z
        self._show_results()
        self._say(f"solved z = {self.format_z(z)} +/- {z_err:.2g} from {len(self._book)} line(s)")
        return z, z_err

    def table(self):
        """One row per lock: ``label, species, rest, observed, observed_err, residual_kms, note`` and
        the line fit (``fit_flux``, ``fit_flux_err``, ``fit_fwhm``, ... ``fit_snr``; NaN where no fit).

        Returns
        -------
        `~astropy.table.QTable`
            meta holds z, velocity, convention, medium, line set and file.
        """
        return glue.lock_table(self)

    def _show_results(self):
        entries = list(self._book)
        head = []
        if self._solution is not None:
            sol = self._solution
            head = [W.HTML(
                f"<p><b>z = {self.format_z(sol.z)} &plusmn; {sol.z_err:.2g}</b> (1&sigma;), "
                f"&chi;&sup2;/dof = {sol.chi2_dof:.3g}, {sol.n_used} of {len(entries)} line(s) used</p>")]
        if not entries:
            self.ui.lock_table.children = head + [W.HTML("<i>No locked lines yet.</i>")]
            return
        try:
            res = glue.residuals(self).to_value(_KMS)
        except RuntimeError:
            res = np.full(len(entries), np.nan)
        outliers = (np.asarray(self._solution.outliers, bool) if self._solution is not None
                    else np.zeros(len(entries), bool))
        unit = self._xunit.to_string("unicode")
        self.ui.lock_table.children = head + lock_rows(entries, res, outliers, unit, self.unlock)
