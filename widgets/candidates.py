"""The candidate search of the line identifier: the one place the widget calls the redshift scan."""

import warnings

import astropy.units as u
import numpy as np

from zline.physics.catalog import LINE_SETS
from zline.physics.kinematics import velocity_from
from zline.physics.scan import scan_redshift, scan_velocity

__all__ = ["find_candidates", "ScanMixin"]

_KMS = u.km / u.s


def find_candidates(spectrum, line_set, z_min, z_max, top, convention):
    """Run the redshift (or, within |z| <= 0.01, velocity) scan; returns (result, kind).

    ``line_set=None`` searches every kind of spectrum (emission- and absorption-line galaxies,
    quasars, stars) and ranks the readings on one footing. The single call site of
    `zline.physics.scan` in the widget.
    """
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if line_set is not None and max(abs(z_min), abs(z_max)) <= 0.01:
            one = 1.0 * u.AA
            v_lo, v_hi = (velocity_from((1.0 + z) * one, one, convention=convention) for z in (z_min, z_max))
            return scan_velocity(spectrum, lines=line_set, v_min=v_lo.to(_KMS), v_max=v_hi.to(_KMS),
                                 top=top, convention=convention), "velocity"
        return scan_redshift(spectrum, lines=line_set, z_min=z_min, z_max=z_max, top=top), "redshift"


class ScanMixin:
    """Scan, candidate list and jump for `LineIdentifier`."""

    def scan(self, z_min=0.0, z_max=7.0, top=5, lines=None):
        """Search the spectrum for its redshift and list the candidates.

        Uses `zline.physics.scan.scan_redshift`. By default every kind of spectrum is searched
        (emission- and absorption-line galaxies, quasars, stars) and each candidate names the
        kind it reads; `jump_to` then draws that kind's line set. With ``lines`` one set is
        searched, and a range within |z| <= 0.01 is searched as a velocity with
        `zline.physics.scan.scan_velocity` in the widget's convention.

        Parameters
        ----------
        z_min, z_max : float
            Redshift range searched.
        top : int
            Number of candidates.
        lines : str, optional
            Restrict the search to one set of `zline.physics.catalog.LINE_SETS`.

        Returns
        -------
        `zline.physics.scan.ScanResult`
        """
        for name, val in (("z_min", z_min), ("z_max", z_max)):
            if isinstance(val, u.Quantity) or isinstance(val, bool) or not np.isscalar(val):
                raise TypeError(f"scan: '{name}' must be a plain redshift number; got {val!r}")
        name = lines
        if name is not None and name not in LINE_SETS:
            raise ValueError(f"scan: 'lines' must be one of {sorted(LINE_SETS)}; got {name!r}")
        bar = self.ui.scan_progress
        bar.bar_style, bar.value = "", 1
        what = f"line set {name!r}" if name is not None else "every kind of spectrum"
        self._say(f"searching {z_min:g} <= z <= {z_max:g} with {what} ...")
        try:
            result, kind = find_candidates(self.spectrum, name, z_min, z_max, top, self.convention)
        except Exception:
            bar.value, bar.bar_style = 0, "danger"
            raise
        self._scan = (result, kind)
        options = []
        for i, c in enumerate(result.candidates):
            where = (f"v={c.velocity.to_value(_KMS):+.1f} km/s" if kind == "velocity" and c.velocity is not None
                     else f"z={c.z:.5f}")
            options.append((f"{i + 1}. {where}  {c.klass}  score {c.score:.3g}  {c.n_matched} lines", i))
        self._syncing = True
        try:
            self.ui.candidates.options = options
            self.ui.candidates.value = None
        finally:
            self._syncing = False
        bar.value, bar.bar_style = bar.max, "success"
        if options and result.no_redshift:
            self._say(f"no redshift: nothing convincing (confidence {result.confidence:.2f} that "
                      f"candidate 1 is right); the {len(options)} candidate(s) are listed anyway",
                      level="warning")
        elif options:
            self._say(f"{len(options)} candidate(s), confidence {result.confidence:.2f} that "
                      f"candidate 1 ({result.candidates[0].klass}) is right; click one to move "
                      f"the overlay there")
        else:
            self._say("no candidate found in that range", level="warning")
        return result

    @property
    def candidates(self):
        """Candidates of the last `scan` (`zline.physics.scan.Candidate`), best first."""
        return tuple(self._scan[0].candidates) if self._scan[0] is not None else ()

    def jump_to(self, i):
        """Move the overlay to candidate ``i`` (0 = best) of the last `scan`; returns the candidate."""
        cands = self.candidates
        if not cands:
            raise ValueError("jump_to: no candidates yet; run scan() first")
        if isinstance(i, bool) or not isinstance(i, (int, np.integer)) or not 0 <= i < len(cands):
            raise IndexError(f"jump_to: candidate index must be 0..{len(cands) - 1}; got {i!r}")
        c = cands[int(i)]
        if self._set_name != "custom" and c.line_set != self._set_name:
            self._set_lines(c.line_set)  # draw the lines of the kind this reading is
            self._apply_shift()
        with self.hold_trait_notifications():
            if self._scan[1] == "velocity" and c.velocity is not None:
                self.z, self.velocity = 0.0, float(c.velocity.to_value(_KMS))
            else:
                self.z, self.velocity = float(c.z), 0.0
        self._sync_controls(recentre=True)
        self._syncing = True
        try:
            if self.ui.candidates.value != int(i):
                self.ui.candidates.value = int(i)
        finally:
            self._syncing = False
        lines = ", ".join(c.lines[:6]) + (" ..." if len(c.lines) > 6 else "")
        self._say(f"candidate {int(i) + 1}: z = {c.z:.5f}, {c.klass} with line set {c.line_set!r} "
                  f"(score {c.score:.3g}; {c.n_matched} line(s)"
                  f"{': ' + lines if lines else ''})")
        return c
