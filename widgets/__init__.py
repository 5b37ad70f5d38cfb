"""Notebook widgets: state and view only; every number comes from zline.physics."""
