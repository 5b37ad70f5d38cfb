"""zline: hydrogen-like line positions, redshifts and line tables for real spectra."""

__all__ = ["__version__"]


def __getattr__(name):
    # the version is looked up on first use: importlib.metadata costs start-up time
    if name == "__version__":
        from importlib.metadata import PackageNotFoundError, version

        try:
            value = version("zline")
        except PackageNotFoundError:  # pragma: no cover - running from an uninstalled tree
            value = "0+unknown"
        globals()["__version__"] = value
        return value
    raise AttributeError(f"module 'zline' has no attribute {name!r}")
