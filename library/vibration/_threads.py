"""Run the small dense linear algebra of normal-mode analysis on one BLAS thread.

Hessians of odorant-sized molecules are at most a few hundred rows. For such
matrices a multithreaded BLAS gains nothing, and on a loaded machine its
spinning worker threads made one eigendecomposition up to 100 times slower
(measured: 0.13 s instead of 1 ms for 87 x 87). Parallelism in olibra comes
from worker processes instead.
"""

from __future__ import annotations

import functools

import threadpoolctl

_controller: threadpoolctl.ThreadpoolController | None = None


def single_threaded_blas(function):
    """Decorator: call `function` with BLAS limited to one thread."""

    @functools.wraps(function)
    def wrapper(*args, **kwargs):
        global _controller
        if _controller is None:
            _controller = threadpoolctl.ThreadpoolController()
        with _controller.limit(limits=1, user_api="blas"):
            return function(*args, **kwargs)

    return wrapper
