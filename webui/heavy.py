"""A small bounded pool for heavy searches, so that cheap requests stay responsive under load.

Shape searches (overlay re-ranking), pair comparisons, disagreement lists and scorecards run in at
most `workers` threads of their own; at most `queue` more wait for a place, and any request beyond
that is answered at once with 503 and Retry-After (`ServerBusy`). A request waits at most
`time_limit_s` for its result (`TooSlow`, 503); the work goes on, and a request for the same key
(the same scorecard or pair list of the same catalogue revision) picks up its result instead of
starting again. The request threads of the server are therefore never all tied up by heavy work
while the server has more threads than `workers + queue`.
"""

from __future__ import annotations

import os
import threading
import time
from collections import OrderedDict
from concurrent.futures import Future, ThreadPoolExecutor
from concurrent.futures import TimeoutError as FutureTimeout
from typing import Any, Callable

from flask import current_app

KEPT_RESULTS = 16
KEPT_FOR_S = 300.0


class ServerBusy(Exception):
    """Too many heavy requests are running or waiting; answered with 503 and Retry-After (not an
    OlibraError: nothing is wrong with the request, so pages do not show it as a 400 beside the form)."""

    retry_after_s = 5


class TooSlow(ServerBusy):
    """A heavy request ran past the per-request time limit (its result is kept for a retry)."""

    retry_after_s = 10


def default_workers() -> int:
    return max(1, (os.cpu_count() or 2) - 1)


class HeavyPool:
    def __init__(self, *, workers: int | None = None, queue: int = 3, time_limit_s: float = 60.0):
        self.workers = workers or default_workers()
        self.queue = queue
        self.time_limit_s = time_limit_s
        self._executor = ThreadPoolExecutor(self.workers, thread_name_prefix="olibra-heavy")
        self._lock = threading.Lock()
        self._pending = 0
        self._by_key: OrderedDict[Any, tuple[Future, float]] = OrderedDict()

    def _finished(self, _future: Future) -> None:
        with self._lock:
            self._pending -= 1

    def run(self, what: str, work: Callable[[], Any], *, key: Any = None):
        """work() in the pool with the current app context; its result, or ServerBusy / TooSlow."""
        app = current_app._get_current_object()

        def in_context():
            with app.app_context():
                return work()

        with self._lock:
            now = time.monotonic()
            for old in [k for k, (f, at) in self._by_key.items() if f.done() and now - at > KEPT_FOR_S]:
                del self._by_key[old]
            known = self._by_key.get(key) if key is not None else None
            if known is not None and not (known[0].done() and known[0].exception() is not None):
                future = known[0]
            else:
                if self._pending >= self.workers + self.queue:
                    raise ServerBusy(f"the server is busy with {self._pending} heavy searches (at most "
                                     f"{self.workers} run at once and {self.queue} wait); try {what} again "
                                     "in a few seconds")
                self._pending += 1
                future = self._executor.submit(in_context)
                future.add_done_callback(self._finished)
                if key is not None:
                    self._by_key[key] = (future, now)
                    while len(self._by_key) > KEPT_RESULTS:
                        self._by_key.popitem(last=False)
        try:
            return future.result(timeout=self.time_limit_s)
        except FutureTimeout:
            raise TooSlow(f"{what} took longer than this server's limit of {self.time_limit_s:g} s per request; "
                          "it goes on in the background: ask again in a minute for its result, or ask for "
                          "less (fewer permutations or resamples)") from None


def heavy(what: str, work: Callable[[], Any], *, key: Any = None):
    """Run `work` in the app's heavy pool (see HeavyPool.run)."""
    return current_app.extensions["olibra_heavy"].run(what, work, key=key)
