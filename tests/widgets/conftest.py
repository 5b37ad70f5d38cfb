"""Fixtures for the widget tests: an invented spectrum, a small line table, a recording comm, and
(for the browser tests) JupyterLab on loopback driven by Debian's Chromium through Playwright."""

import os
import re
import signal
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request
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
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                 "--disable-background-networking", "--disable-component-update", "--disable-sync"]
BIN = Path(sys.executable).parent
TOKEN = "zline-test-token"


def _free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _isolated_env(base):
    env = dict(os.environ)
    for var, sub in [("HOME", "home"), ("JUPYTER_CONFIG_DIR", "cfg"), ("JUPYTER_DATA_DIR", "data"),
                     ("JUPYTER_RUNTIME_DIR", "runtime"), ("IPYTHONDIR", "ipython")]:
        (base / sub).mkdir(exist_ok=True)
        env[var] = str(base / sub)
    env["JUPYTER_PLATFORM_DIRS"] = "1"
    env["PATH"] = f"{BIN}{os.pathsep}{env.get('PATH', '')}"
    settings = base / "cfg/lab/user-settings/@jupyterlab/apputils-extension"
    settings.mkdir(parents=True, exist_ok=True)
    (settings / "notification.jupyterlab-settings").write_text('{"fetchNews": "false", "checkForUpdates": false}')
    return env


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
    port = _free_port()
    cmd = [str(BIN / "jupyter"), "lab", "--no-browser", "--allow-root", "--ip=127.0.0.1",
           f"--port={port}", "--ServerApp.port_retries=0", f"--IdentityProvider.token={TOKEN}",
           f"--ServerApp.root_dir={lab_root}", "--LabApp.news_url=None",
           "--LabApp.check_for_updates_class=jupyterlab.NeverCheckForUpdate",
           "--LabApp.extension_manager=readonly", "--expose-app-in-browser"]
    env = _isolated_env(tmp_path)
    url = f"http://127.0.0.1:{port}"
    log = open(tmp_path / "lab.log", "w")
    proc = subprocess.Popen(cmd, cwd=lab_root, env=env, stdout=log, stderr=subprocess.STDOUT,
                            start_new_session=True)
    try:
        end = time.monotonic() + 120
        while True:
            if proc.poll() is not None:
                raise RuntimeError(f"jupyter lab exited rc={proc.returncode}, see {tmp_path / 'lab.log'}")
            try:
                urllib.request.urlopen(f"{url}/api/status?token={TOKEN}", timeout=5)
                break
            except urllib.error.HTTPError:
                break
            except OSError:
                if time.monotonic() > end:
                    raise TimeoutError(f"jupyter lab did not answer at {url}")
                time.sleep(0.3)
        yield LabServer(url, lab_root, Path(env["JUPYTER_RUNTIME_DIR"]), TOKEN)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGTERM)
            try:
                proc.wait(30)
            except subprocess.TimeoutExpired:
                os.killpg(proc.pid, signal.SIGKILL)
                proc.wait()
        log.close()


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
