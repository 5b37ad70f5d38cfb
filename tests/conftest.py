"""Shared test configuration for zline."""

import os
import shutil

import pytest

IN_CI = os.environ.get("CI", "").lower() in {"1", "true", "yes"}
CHROMIUM = os.environ.get("CHROMIUM", "/usr/bin/chromium")


@pytest.fixture(scope="session")
def chromium_path():
    """Path of Debian's chromium; in CI a missing browser is a failure, never a skip."""
    path = CHROMIUM if os.path.exists(CHROMIUM) else shutil.which("chromium")
    if path is None:
        msg = f"chromium not found at {CHROMIUM!r} (install Debian's 'chromium' package)"
        if IN_CI:
            pytest.fail(msg)
        pytest.skip(msg)
    return path


#: Real public survey spectra beside the project (never copied into the repository).
REALDATA = os.environ.get(
    "ZLINE_REALDATA",
    os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))), os.pardir, "shared",
                 "realdata"))


@pytest.fixture(scope="session")
def realdata():
    """The real survey spectra of ``../shared/realdata`` as the manifest's table.

    Returns an `astropy.table.Table` with the manifest's columns (``file``, ``kind``,
    ``z_published``, ``z_published_err``, ``z_source`` ...) plus ``path``, the absolute path of each
    file.  The published redshifts are the surveys' own (SDSS pipeline redshift: HDU 2 column Z;
    LAMOST pipeline redshift: primary header Z), as the manifest says per row.  Where the folder is
    absent the tests that use it skip with the reason, except with ``CI=true``, where they fail.
    """
    from astropy.table import Table

    manifest = os.path.join(REALDATA, "manifest.ecsv")
    if not os.path.isfile(manifest):
        msg = (f"real survey spectra not found: {os.path.abspath(manifest)} is missing "
               f"(set ZLINE_REALDATA to the folder holding manifest.ecsv)")
        if IN_CI:
            pytest.fail(msg)
        pytest.skip(msg)
    table = Table.read(manifest, format="ascii.ecsv")
    table["path"] = [os.path.abspath(os.path.join(REALDATA, name)) for name in table["file"]]
    missing = [p for p in table["path"] if not os.path.isfile(p)]
    if missing:
        pytest.fail(f"manifest.ecsv lists {len(missing)} file(s) that are not there, e.g. {missing[0]}")
    return table
