"""Notebook widgets: state and view only; every number comes from zline.physics.

Rooms: `state` (traits, lock book with undo/redo), `plot` (the whole-spectrum view and its label
band), `strip` (verification panels in velocity), `controls` (the control panels), `locking`
(safe clicks, locks, solving), `glue` (scan, sessions, tables, survey catalogue) and
`identifier` (the `LineIdentifier` that composes them).
"""

from .identifier import LineIdentifier
from .state import MODES

__all__ = ["LineIdentifier", "MODES"]
