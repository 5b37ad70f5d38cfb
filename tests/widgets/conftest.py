"""Fixtures for the widget tests: an invented spectrum, a small line table, a recording comm, and
(for the browser tests) JupyterLab on loopback driven by Debian's Chromium through Playwright."""

import re
import sys
from pathlib import Path

import astropy.units as u
import numpy as np
import pytest
from astropy.nddata import StdDevUncertainty
from astropy.table import QTable

# Invented scenario for mechanics tests: four emission lines at z = 0.1 on a flat continuum.
TRUE_Z = 0.1
REST = np.array([4862.7, 5008.2, 6564.6, 6585.3])
AMPLITUDE = np.array([1.0, 3.0, 5.0, 1.5])


@pytest.fixture
def spectrum():
    from specutils import Spectrum
    rng = np.random.default_rng(20261201)
    x = np.linspace(4000.0, 9000.0, 20000)
    y = 1.0 + rng.normal(0.0, 0.02, x.size)
    for r, a in zip(REST, AMPLITUDE):
        y += a * np.exp(-0.5 * ((x - r * (1 + TRUE_Z)) / 2.5) ** 2)
    mask = np.zeros(x.size, bool)
    mask[5000:5010] = True
    return Spectrum(spectral_axis=x * u.AA, flux=y * u.Jy,
                    uncertainty=StdDevUncertainty(np.full(x.size, 0.02)), mask=mask,
                    meta={"zline": {"medium": "vacuum", "file": "invented.fits"}})


@pytest.fixture
def lines():
    return QTable({"label": ["L4863", "L5008", "L6565", "L6585"],
                   "species": ["H I", "X II", "H I", "Y II"],
                   "rest": REST * u.AA,
                   "strength": [0.3, 1.0, 1.0, 0.1],
                   "kind": ["computed", "tabulated", "computed", "tabulated"]})


@pytest.fixture
def sent(monkeypatch):
    """Record every message the widgets send (install before creating widgets)."""
    import comm
    from comm.base_comm import BaseComm
    log = []

    class RecordingComm(BaseComm):
        def publish_msg(self, msg_type, data=None, metadata=None, buffers=None, **keys):
            log.append((self.comm_id, msg_type, data, buffers))

    monkeypatch.setattr(comm, "create_comm", lambda *a, **k: RecordingComm(*a, **k))
    return log


# ---------------------------------------------------------------------------------------- browser
sys.path.insert(0, str(Path(__file__).resolve().parent))
from labserver import CHROMIUM_ARGS, TOKEN, start_lab, stop_lab  # noqa: E402


class LabServer:
    def __init__(self, url, root, runtime, token):
        self.url, self.root, self.runtime, self.token = url, root, runtime, token


@pytest.fixture
def lab_root(tmp_path):
    root = tmp_path / "root"
    root.mkdir()
    return root


@pytest.fixture
def lab_server(tmp_path, lab_root):
    """JupyterLab on 127.0.0.1 at a free port, with fresh config/data/runtime dirs."""
    proc, log, url, runtime = start_lab(lab_root, tmp_path)
    try:
        yield LabServer(url, lab_root, runtime, TOKEN)
    finally:
        stop_lab(proc, log)


@pytest.fixture(scope="session")
def browser(chromium_path):
    from playwright.sync_api import sync_playwright
    with sync_playwright() as p:
        b = p.chromium.launch(executable_path=chromium_path, headless=True, args=CHROMIUM_ARGS)
        yield b
        b.close()


@pytest.fixture
def page(browser, tmp_path):
    ctx = browser.new_context(viewport={"width": 1400, "height": 1100})
    ctx.route(re.compile(r"^https?://(?!127\.0\.0\.1[:/]|localhost[:/])"), lambda route: route.abort())
    pg = ctx.new_page()
    pg.set_default_timeout(60_000)
    errors = []
    pg.on("pageerror", lambda e: errors.append(str(e)))
    yield pg
    pg.screenshot(path=str(tmp_path / "last.png"))
    ctx.close()
    assert not errors, errors


@pytest.fixture
def spectrum_file(tmp_path, spectrum):
    """The invented spectrum as a linear-WCS FITS image with a vacuum wavelength axis."""
    from astropy.io import fits
    x = spectrum.spectral_axis.value
    hdr = fits.Header()
    hdr.update(CTYPE1="WAVE", CUNIT1="Angstrom", CRPIX1=1.0, CRVAL1=float(x[0]),
               CDELT1=float(x[1] - x[0]), BUNIT="Jy", OBJECT="invented test galaxy")
    path = tmp_path / "invented.fits"
    fits.PrimaryHDU(np.asarray(spectrum.flux.value, dtype=np.float64), header=hdr).writeto(path)
    return path
