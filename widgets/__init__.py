"""Notebook widgets: state and view only; every number comes from zline.physics."""

from .identifier import LineIdentifier

__all__ = ["LineIdentifier"]
