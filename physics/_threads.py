"""One BLAS thread for the fits (internal).

The least-squares problems of a line fit are small (a few hundred to a few thousand pixels by a
few tens of parameters).  For such sizes a multi-threaded BLAS (OpenBLAS by default spawns one
thread per core) spends its time synchronising threads, and when the cores are busy with other
work each call waits for its threads to be scheduled: ``numpy.linalg.lstsq`` of an 800 x 15
matrix took 31 ms instead of 0.3 ms on a shared two-core machine.  `one_blas_thread` holds every
loaded BLAS to one thread while the decorated call runs (nested calls pay the switch once) and
restores the user's setting afterwards.  With OpenBLAS's process-wide thread pool only one Python
thread at a time can change the setting (threadpoolctl's rule): decorated calls made by other
threads meanwhile run with that thread's setting.
"""

import functools
import threading

__all__ = ["one_blas_thread"]

_state = threading.local()
_controller = []


def _limit():
    """Context that holds the BLAS libraries to one thread (the libraries are looked up once, at
    the first call, when numpy and scipy are loaded; a lookup costs ~15 ms, a switch ~0.1 ms)."""
    if not _controller:
        from threadpoolctl import ThreadpoolController

        _controller.append(ThreadpoolController())
    return _controller[0].limit(limits=1, user_api="blas")


def one_blas_thread(fn):
    """Decorator: run ``fn`` with every loaded BLAS library limited to one thread."""
    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        if getattr(_state, "active", False):
            return fn(*args, **kwargs)
        _state.active = True
        try:
            with _limit():
                return fn(*args, **kwargs)
        finally:
            _state.active = False

    return wrapper
