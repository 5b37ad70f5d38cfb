"""Survey batch throughput: spectra per second at 1 and 2 workers on 500 generated spectra.

Baseline measured in the same run: a bare in-process loop of read_spectrum + scan_redshift with
no records, no catalogue (what the batch machinery adds on top is the ratio).  Also: scaling
efficiency of 2 local worker processes, the cost of a rerun that finds every record done, and
peak memory (resident set of the largest worker process; tracemalloc peak of one spectrum).
"""

import os
import resource
import shutil
import tempfile
import time
import tracemalloc
import warnings

from zline.physics.batch import measure_one, measure_survey, write_synthetic_spectra

N = 500
NPIX = 3000
REPEAT = 2  # best of (the machine may be shared)
SETTINGS = {"z_min": 0.0, "z_max": 3.0, "lines": "galaxy-emission", "version": 1}


def _timed(fn, *args):
    t0 = time.perf_counter()
    fn(*args)
    return time.perf_counter() - t0


def _bare_loop(paths):
    from zline.physics.scan import scan_redshift
    from zline.physics.spectra import read_spectrum

    for p in paths:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            scan_redshift(read_spectrum(p), lines="galaxy-emission", z_min=0.0, z_max=3.0,
                          top=3)


def main():
    with tempfile.TemporaryDirectory() as tmp:
        truth = write_synthetic_spectra(os.path.join(tmp, "s"), N, seed=2026, npix=NPIX)
        paths = sorted(truth)
        _bare_loop(paths[:5])  # imports and caches warm

        times = {"bare": [], 1: [], 2: []}
        worst = {}
        for _ in range(REPEAT):  # interleaved rounds, best of each (the machine may be shared)
            times["bare"].append(_timed(_bare_loop, paths))
            for workers in (1, 2):
                cat = os.path.join(tmp, f"cat{workers}.ecsv")
                shutil.rmtree(cat + ".parts", ignore_errors=True)  # fresh records every time
                if os.path.exists(cat):  # (a catalogue without its records is not replaced)
                    os.remove(cat)
                t0 = time.perf_counter()
                table = measure_survey(paths, cat, workers=workers)
                times[workers].append(time.perf_counter() - t0)
                worst[workers] = max(abs(r["z"] - truth[r["file"]]) for r in table)
        t_bare = min(times["bare"])
        rows = [(w, min(times[w]), worst[w]) for w in (1, 2)]
        t0 = time.perf_counter()
        measure_survey(paths, os.path.join(tmp, "cat2.ecsv"), workers=2)
        t_rerun = time.perf_counter() - t0
        shutil.rmtree(os.path.join(tmp, "cat1.ecsv.parts"))

        rss_child = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024  # KiB -> MiB
        rss_self = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
        tracemalloc.start()
        measure_one(paths[0], SETTINGS)
        _, peak = tracemalloc.get_traced_memory()
        tracemalloc.stop()

    ncpu = os.cpu_count()
    print(f"{N} generated spectra, {NPIX} px each, 0 <= z <= 3, galaxy-emission; {ncpu} CPUs; "
          f"best of {REPEAT}")
    print(f"{'run':<46}{'time':>9}{'spectra/s':>11}{'worst |dz|':>12}")
    print(f"{'baseline: bare loop read + scan (in-process)':<46}{t_bare:>7.1f} s"
          f"{N / t_bare:>11.1f}{'':>12}")
    for workers, dt, worst in rows:
        label = "measure_survey, 1 worker (in-process)" if workers == 1 else \
            f"measure_survey, {workers} worker processes"
        print(f"{label:<46}{dt:>7.1f} s{N / dt:>11.1f}{worst:>12.1e}")
    print(f"{'rerun, every record already done':<46}{t_rerun:>7.2f} s{N / t_rerun:>11.0f}")
    t1, t2 = rows[0][1], rows[1][1]
    print(f"ratio baseline/batch(1 worker) speed: {t_bare / t1:.2f}   "
          f"speed-up 2 workers vs 1: {t1 / t2:.2f}   scaling efficiency: {t1 / t2 / 2:.0%}")
    print(f"peak memory: largest worker process RSS {rss_child:.0f} MiB, "
          f"main process RSS {rss_self:.0f} MiB, tracemalloc peak of one spectrum "
          f"{peak / 2**20:.1f} MiB")


if __name__ == "__main__":
    main()
