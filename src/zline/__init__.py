"""zline: hydrogen-like line positions, redshifts and line tables for real spectra."""

from importlib.metadata import PackageNotFoundError, version as _version

try:
    __version__ = _version("zline")
except PackageNotFoundError:  # pragma: no cover - running from an uninstalled tree
    __version__ = "0+unknown"

__all__ = ["__version__"]
