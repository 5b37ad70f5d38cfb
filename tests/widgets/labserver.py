"""JupyterLab on 127.0.0.1 for the browser test and the browser benchmark: a free port, fresh
config/data/runtime folders, no news or update checks, started and stopped as one process group."""

import os
import signal
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request
from pathlib import Path

BIN = Path(sys.executable).parent
TOKEN = "zline-test-token"
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                 "--disable-background-networking", "--disable-component-update", "--disable-sync"]


def free_port():
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def isolated_env(base):
    """Environment whose HOME and Jupyter/IPython folders live under ``base``."""
    env = dict(os.environ)
    for var, sub in [("HOME", "home"), ("JUPYTER_CONFIG_DIR", "cfg"), ("JUPYTER_DATA_DIR", "data"),
                     ("JUPYTER_RUNTIME_DIR", "runtime"), ("IPYTHONDIR", "ipython")]:
        (base / sub).mkdir(exist_ok=True)
        env[var] = str(base / sub)
    env["JUPYTER_PLATFORM_DIRS"] = "1"
    # reading a spectrum imports matplotlib (through ndcube); its first import in a fresh HOME
    # builds a font cache and says so on stderr, which the notebook would show: build it here,
    # once, and let the server's kernels share it
    try:
        import matplotlib.font_manager  # noqa: F401, PLC0415
        import matplotlib  # noqa: PLC0415

        env["MPLCONFIGDIR"] = matplotlib.get_configdir()
    except ImportError:
        pass
    env["PATH"] = f"{BIN}{os.pathsep}{env.get('PATH', '')}"
    settings = base / "cfg/lab/user-settings/@jupyterlab/apputils-extension"
    settings.mkdir(parents=True, exist_ok=True)
    (settings / "notification.jupyterlab-settings").write_text('{"fetchNews": "false", "checkForUpdates": false}')
    return env


def start_lab(root, base, timeout=120):
    """Start JupyterLab serving ``root`` (state under ``base``) and wait until it answers.

    Returns ``(process, log file, url, runtime folder)``; stop it with `stop_lab`.
    """
    port = free_port()
    cmd = [str(BIN / "jupyter"), "lab", "--no-browser", "--allow-root", "--ip=127.0.0.1",
           f"--port={port}", "--ServerApp.port_retries=0", f"--IdentityProvider.token={TOKEN}",
           f"--ServerApp.root_dir={root}", "--LabApp.news_url=None",
           "--LabApp.check_for_updates_class=jupyterlab.NeverCheckForUpdate",
           "--LabApp.extension_manager=readonly", "--expose-app-in-browser"]
    env = isolated_env(base)
    url = f"http://127.0.0.1:{port}"
    log = open(base / "lab.log", "w")
    proc = subprocess.Popen(cmd, cwd=root, env=env, stdout=log, stderr=subprocess.STDOUT,
                            start_new_session=True)
    try:
        end = time.monotonic() + timeout
        while True:
            if proc.poll() is not None:
                raise RuntimeError(f"jupyter lab exited rc={proc.returncode}, see {base / 'lab.log'}")
            try:
                urllib.request.urlopen(f"{url}/api/status?token={TOKEN}", timeout=5)
                break
            except urllib.error.HTTPError:
                break
            except OSError:
                if time.monotonic() > end:
                    raise TimeoutError(f"jupyter lab did not answer at {url}") from None
                time.sleep(0.3)
    except BaseException:
        stop_lab(proc, log)
        raise
    return proc, log, url, Path(env["JUPYTER_RUNTIME_DIR"])


def stop_lab(proc, log):
    """End the server's whole process group (TERM, then KILL after 30 s) and close its log."""
    if proc.poll() is None:
        os.killpg(proc.pid, signal.SIGTERM)
        try:
            proc.wait(30)
        except subprocess.TimeoutExpired:
            os.killpg(proc.pid, signal.SIGKILL)
            proc.wait()
    log.close()
