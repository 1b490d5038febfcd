"""Run small dense linear algebra on one BLAS thread, safely from several threads at once.

Hessians of odorant-sized molecules are at most a few hundred rows, and a search query is one
matrix-vector product per metric. For such work a multithreaded BLAS gains nothing, and on a
loaded machine its spinning worker threads made one eigendecomposition up to 100 times slower
(measured: 0.13 s instead of 1 ms for 87 x 87). Parallelism in olibra comes from worker
processes instead.

threadpoolctl's limit is process-wide, not per thread: two overlapping `with limit(...)` blocks
from two threads (a web server answering two searches) would restore each other's settings in
the wrong order. Here the first thread to enter sets the limit and the last to leave restores it.
"""

from __future__ import annotations

import functools
import threading
from contextlib import contextmanager

_lock = threading.Lock()
_users = 0
_limiter = None
_controller = None


@contextmanager
def one_blas_thread():
    """Context in which BLAS uses one thread (re-entrant and thread-safe)."""
    global _users, _limiter, _controller
    with _lock:
        if _users == 0:
            import threadpoolctl

            if _controller is None:
                _controller = threadpoolctl.ThreadpoolController()
            _limiter = _controller.limit(limits=1, user_api="blas")
        _users += 1
    try:
        yield
    finally:
        with _lock:
            _users -= 1
            if _users == 0 and _limiter is not None:
                _limiter.restore_original_limits()
                _limiter = None


def single_threaded_blas(function):
    """Decorator: call `function` with BLAS limited to one thread."""

    @functools.wraps(function)
    def wrapper(*args, **kwargs):
        with one_blas_thread():
            return function(*args, **kwargs)

    return wrapper
