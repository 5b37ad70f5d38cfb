"""Bundled data tables (each row carries its published source)."""
