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
