"""Support for survey batches: the catalogue lock, the progress bar and workers that end with their
parent.

* `catalog_lock` holds an advisory lock on ``<catalog>.parts/lock`` for a whole run.  The
  operating system releases it when the process ends in any way (even ``kill -9``), so a stale
  lock never blocks a later run.  A second run on the same catalogue does not wait: it stops at
  once with `CatalogLockedError`, naming the process that holds the lock.
* `progress_bar` draws a tqdm bar with counts, rate and time left.
* `watch_parent` runs in every pool worker: a worker whose parent process has gone ends itself
  within a fraction of a second instead of living on as an orphan.
"""

import contextlib
import datetime
import os
import socket
import sys
import threading
import time

__all__ = ["CatalogLockedError", "catalog_lock", "progress_bar", "watch_parent", "LOCK_NAME"]

#: Name of the lock file inside ``<catalog>.parts``.
LOCK_NAME = "lock"

try:  # POSIX
    import fcntl

    def _try_lock(fd):
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except (BlockingIOError, PermissionError):
            return False
        return True
except ImportError:  # pragma: no cover - Windows
    import msvcrt

    def _try_lock(fd):
        try:
            msvcrt.locking(fd, msvcrt.LK_NBLCK, 1)
        except OSError:
            return False
        return True


class CatalogLockedError(OSError):
    """Another run is writing the same catalogue."""


@contextlib.contextmanager
def catalog_lock(catalog, parts, wait=0.0, who="zline batch"):
    """Hold the lock of a catalogue for the duration of a ``with`` block.

    Parameters
    ----------
    catalog : str
        The catalogue (named in messages).
    parts : str
        Its ``.parts`` folder (created if missing); the lock file lives there.
    wait : float
        Seconds to wait for another run to finish before giving up (0: give up at once).
    who : str
        What holds the lock, written into the lock file for the message of a second run.

    Raises
    ------
    CatalogLockedError
        Another process holds the lock (the message names it and what to do).
    """
    os.makedirs(parts, exist_ok=True)
    path = os.path.join(parts, LOCK_NAME)
    fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o666)
    try:
        deadline = time.monotonic() + max(float(wait), 0.0)
        while not _try_lock(fd):
            if time.monotonic() >= deadline:
                try:
                    with open(path, encoding="utf-8", errors="replace") as fh:
                        holder = fh.read(300).strip() or "another process"
                except OSError:
                    holder = "another process"
                raise CatalogLockedError(
                    f"{catalog!r} is being written by another run ({holder}); nothing was "
                    f"done. Wait until it has finished and run again (finished spectra are "
                    f"reused), or write to another catalogue")
            time.sleep(0.2)
        stamp = datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds")
        os.ftruncate(fd, 0)
        os.lseek(fd, 0, os.SEEK_SET)
        os.write(fd, f"{who}, pid {os.getpid()} on {socket.gethostname()}, since {stamp}"
                 .encode())
        yield path
    finally:
        os.close(fd)  # closing releases the lock


def progress_bar(stream=None, unit="spectrum", desc="zline batch"):
    """A progress callable ``(done, total)`` drawing a tqdm bar with counts, rate and time left.

    The first call sets the start (records reused from an earlier run count as done, not in the
    rate); the bar closes itself when ``done`` reaches ``total``; ``.close()`` ends it early.
    """
    from tqdm import tqdm  # noqa: PLC0415

    class _Bar(tqdm):
        monitor_interval = 0  # no monitor thread: worker processes are forked after this

    stream = sys.stderr if stream is None else stream
    state = {"bar": None}

    def progress(done, total):
        bar = state["bar"]
        if bar is None:
            bar = state["bar"] = _Bar(total=total, initial=done, unit=unit, desc=desc,
                                      file=stream, dynamic_ncols=True, mininterval=0.2,
                                      smoothing=0.1)
        if done > bar.n:
            bar.update(done - bar.n)
        if done >= total:
            close()

    def close():
        if state["bar"] is not None:
            state["bar"].close()
            state["bar"] = None

    progress.close = close
    return progress


def watch_parent(parent_pid, interval=0.25):
    """Pool-worker initializer: end this process when ``parent_pid`` (the run) is gone.

    Checks every ``interval`` seconds from a daemon thread whether the parent still exists and
    whether this process was handed to another parent; either ends the worker with status 1.
    """
    first_ppid = os.getppid()

    def watch():
        while True:
            time.sleep(interval)
            if os.getppid() != first_ppid:
                os._exit(1)
            try:
                os.kill(parent_pid, 0)
            except ProcessLookupError:
                os._exit(1)
            except PermissionError:  # pragma: no cover - pid reused by another user
                os._exit(1)

    threading.Thread(target=watch, name="zline-watch-parent", daemon=True).start()
