"""The line identifier's state: traits and the lock book with its undo/redo history.

Nothing here draws; the plot, the strip and the controls observe these traits and the lock book.
"""

import dataclasses

import numpy as np
import traitlets as T

from zline.physics.kinematics import CONVENTIONS

__all__ = ["MODES", "SMOOTHING", "Entry", "LockBook", "IdentifierState"]

#: Mouse modes of the plot: what a click or drag on the plot area does.
MODES = {
    "pan/zoom": "drag to pan, wheel to zoom (both axes)",
    "y only": "drag or wheel moves and zooms the flux axis only",
    "lock": "click on a feature to lock the predicted line within the click tolerance",
}

#: Display smoothing kernels (the measured data are never smoothed).
SMOOTHING = ("none", "boxcar", "gaussian")


@dataclasses.dataclass
class Entry:
    """One locked identification: the physics `Lock` plus what the widget knows about it."""

    lock: object
    strength: float
    fit_message: str = ""
    fit_record: dict = None   # a restored fit (plain dict of values and unit strings)


class LockBook:
    """The locked identifications in locking order, with an undo/redo history of every change.

    Each change (lock, re-lock, remove, clear, note) stores the list as it was before, so `undo`
    and `redo` walk whole states; a new change after an undo drops the redo branch.
    """

    def __init__(self):
        self.entries = []
        self._undo = []
        self._redo = []

    def __len__(self):
        return len(self.entries)

    def __iter__(self):
        return iter(self.entries)

    def _push(self):
        self._undo.append(list(self.entries))
        self._redo.clear()

    def add(self, entry):
        """Add a lock; a lock of the same label is replaced. Returns the replaced entry or None."""
        self._push()
        old = next((e for e in self.entries if e.lock.label == entry.lock.label), None)
        self.entries = [e for e in self.entries if e.lock.label != entry.lock.label] + [entry]
        return old

    def index(self, label_or_index):
        """Position of a lock given by its label or its (possibly negative) index."""
        n = len(self.entries)
        if isinstance(label_or_index, (int, np.integer)) and not isinstance(label_or_index, bool):
            if not -n <= label_or_index < n:
                raise IndexError(f"lock index {label_or_index} is out of range; there are {n} locks")
            return int(label_or_index) % n
        for k, e in enumerate(self.entries):
            if e.lock.label == label_or_index:
                return k
        raise KeyError(f"no locked line labelled {label_or_index!r}; locked: "
                       f"{[e.lock.label for e in self.entries]}")

    def remove(self, label_or_index):
        """Remove one lock; returns its entry."""
        k = self.index(label_or_index)
        self._push()
        entries = list(self.entries)
        gone = entries.pop(k)
        self.entries = entries
        return gone

    def replace(self, k, entry):
        """Put a changed entry (e.g. a new note) at position ``k``."""
        self._push()
        entries = list(self.entries)
        entries[k] = entry
        self.entries = entries

    def clear(self, history=False):
        """Drop every lock (undoable); with ``history=True`` also forget the history."""
        if history:
            self.entries, self._undo, self._redo = [], [], []
            return
        if self.entries:
            self._push()
            self.entries = []

    @property
    def can_undo(self):
        return bool(self._undo)

    @property
    def can_redo(self):
        return bool(self._redo)

    def undo(self):
        """Go back one change; False when there is nothing to undo."""
        if not self._undo:
            return False
        self._redo.append(list(self.entries))
        self.entries = self._undo.pop()
        return True

    def redo(self):
        """Re-apply the change last undone; False when there is nothing to redo."""
        if not self._redo:
            return False
        self._undo.append(list(self.entries))
        self.entries = self._redo.pop()
        return True


class IdentifierState(T.HasTraits):
    """What the astronomer set: the trial shift, the mouse mode and how the flux is shown.

    ``z`` is the state itself: controls only ever write a value the user chose into it, and
    every view follows it.
    """

    z = T.Float(0.0, help="trial redshift")
    velocity = T.Float(0.0, help="trial velocity on top of z, km/s")
    convention = T.Unicode("optical", help="velocity convention")
    mode = T.Unicode("pan/zoom", help=f"mouse mode of the plot, one of {sorted(MODES)}")
    rest_axis = T.Bool(False, help="show a rest-frame axis (at the current z and velocity) on top")
    log_flux = T.Bool(False, help="logarithmic flux axis")
    smoothing = T.Unicode("none", help=f"display smoothing, one of {SMOOTHING}")
    smoothing_px = T.Float(3.0, help="display smoothing width in pixels (boxcar width or Gaussian FWHM)")

    @T.validate("convention")
    def _valid_convention(self, proposal):
        if proposal["value"] not in CONVENTIONS:
            raise T.TraitError(f"'convention' must be one of {sorted(CONVENTIONS)}; "
                               f"got {proposal['value']!r}")
        return proposal["value"]

    @T.validate("mode")
    def _valid_mode(self, proposal):
        if proposal["value"] not in MODES:
            raise T.TraitError(f"'mode' must be one of {sorted(MODES)}; got {proposal['value']!r}")
        return proposal["value"]

    @T.validate("smoothing")
    def _valid_smoothing(self, proposal):
        if proposal["value"] not in SMOOTHING:
            raise T.TraitError(f"'smoothing' must be one of {SMOOTHING}; got {proposal['value']!r}")
        return proposal["value"]

    @T.validate("smoothing_px")
    def _valid_smoothing_px(self, proposal):
        value = float(proposal["value"])
        if not np.isfinite(value) or not 1.0 <= value <= 200.0:
            raise T.TraitError(f"'smoothing_px' must be between 1 and 200 pixels; got {value!r}")
        return value
