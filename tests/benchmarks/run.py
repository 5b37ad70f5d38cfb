"""Run every ``tests/benchmarks/bench_*.py`` and print its report.

Each benchmark module defines ``main()`` which prints a table whose ratios are measured against a
named baseline in the same run.  The combined report is also written to ``build/benchmarks.txt``.
"""

import contextlib
import importlib.util
import io
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent


def run(names=None):
    out_dir = HERE.parents[1] / "build"
    out_dir.mkdir(exist_ok=True)
    report = io.StringIO()
    failed = 0
    for path in sorted(HERE.glob("bench_*.py")):
        if names and path.stem.removeprefix("bench_") not in names:
            continue
        spec = importlib.util.spec_from_file_location(path.stem, path)
        mod = importlib.util.module_from_spec(spec)
        header = f"== {path.stem} =="
        print(header, flush=True)
        report.write(header + "\n")
        buf = io.StringIO()
        t0 = time.perf_counter()
        try:
            with contextlib.redirect_stdout(buf):
                spec.loader.exec_module(mod)
                mod.main()
        except Exception as exc:  # report and go on with the others
            failed += 1
            buf.write(f"FAILED: {type(exc).__name__}: {exc}\n")
        buf.write(f"(wall time {time.perf_counter() - t0:.1f} s)\n\n")
        print(buf.getvalue(), end="", flush=True)
        report.write(buf.getvalue())
    (out_dir / "benchmarks.txt").write_text(report.getvalue())
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(run(sys.argv[1:]))
