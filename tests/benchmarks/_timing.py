"""Timing helper shared by the benchmarks (not a benchmark itself: run.py runs bench_*.py)."""

import time

__all__ = ["best_of"]


def best_of(fn, repeats=3, clock=time.perf_counter):
    """Shortest of ``repeats`` timed calls of ``fn`` by ``clock``, and the last call's result."""
    best, out = float("inf"), None
    for _ in range(repeats):
        t0 = clock()
        out = fn()
        best = min(best, clock() - t0)
    return best, out
