"""Start-up time of the ``zline`` command, as ratios against bare imports timed in the same run.

* ``zline --help`` against ``python -c "import numpy"`` (target: at most 2x);
* ``zline info FILE`` (a demo spectrum) against ``python -c "import astropy.io.fits"``, what
  reading FITS cannot avoid (target: at most 1.5x).

Every command is a fresh process with the same interpreter; rounds are interleaved and the
median of each is used (the machine may be shared).  The report also lists which heavy modules
each command imported.
"""

import os
import statistics
import subprocess
import sys
import tempfile
import time

ROUNDS = 5
HEAVY = ("scipy", "specutils", "astropy.table", "astropy.wcs", "astropy.nddata",
         "astropy.modeling", "zline.physics.catalog")


def _zline():
    """The installed console script beside this interpreter, else ``python -m zline.cli``."""
    script = os.path.join(os.path.dirname(sys.executable), "zline")
    return [script] if os.path.exists(script) else [sys.executable, "-m", "zline.cli"]


def _time(cmd):
    t0 = time.perf_counter()
    subprocess.run(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, check=True)
    return time.perf_counter() - t0


def _imported(argv):
    """Heavy modules present after running the zline command ``argv`` in-process."""
    code = ("import sys\nfrom zline.cli import main\n"
            "try:\n    main(sys.argv[1:])\nexcept SystemExit:\n    pass\n"
            f"print(','.join(m for m in {HEAVY!r} if m in sys.modules))")
    lines = subprocess.run([sys.executable, "-c", code, *argv], capture_output=True, text=True,
                           check=True).stdout.splitlines()
    return (lines[-1] if lines else "") or "none"


def main():
    from zline.physics.demo import write_demo_spectra

    with tempfile.TemporaryDirectory() as tmp:
        galaxy = str(write_demo_spectra(tmp)["galaxy"])
        cases = {
            "numpy": [sys.executable, "-c", "import numpy"],
            "fits": [sys.executable, "-c", "import astropy.io.fits"],
            "help": _zline() + ["--help"],
            "info": _zline() + ["info", galaxy],
        }
        for cmd in cases.values():  # warm the file cache once
            _time(cmd)
        times = {k: [] for k in cases}
        for _ in range(ROUNDS):
            for key, cmd in cases.items():
                times[key].append(_time(cmd))
        med = {k: statistics.median(v) for k, v in times.items()}
        heavy_help = _imported(["--help"])
        heavy_info = _imported(["info", galaxy])
    r_help = med["help"] / med["numpy"]
    r_info = med["info"] / med["fits"]
    print(f"median of {ROUNDS} interleaved runs, each a fresh process")
    print(f"{'command':<34} {'median s':>9}")
    for key, label in (("numpy", 'python -c "import numpy"'),
                       ("fits", 'python -c "import astropy.io.fits"'),
                       ("help", "zline --help"), ("info", "zline info galaxy.fits")):
        print(f"{label:<34} {med[key]:>9.3f}")
    print(f"zline --help / import numpy          = {r_help:.2f}  (target <= 2.0: "
          f"{'met' if r_help <= 2.0 else 'MISSED'})")
    print(f"zline info / import astropy.io.fits  = {r_info:.2f}  (target <= 1.5: "
          f"{'met' if r_info <= 1.5 else 'MISSED'})")
    print(f"heavy modules imported by zline --help: {heavy_help}")
    print(f"heavy modules imported by zline info:   {heavy_info}")


if __name__ == "__main__":
    main()
