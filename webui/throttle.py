"""Sign-in throttling: exponential back-off per account and client address, never a permanent lockout.

Three counters of failed sign-ins, each forgotten `forget_after_s` after its last failure:

- per (account, address): `free_attempts` failures are free; each further failure makes that address
  wait `base_delay_s`, then twice as long, and so on up to `max_delay_s`, before it may try that
  account again. A successful sign-in clears it.
- per address (any account): `address_free_attempts` failures are free, then the same back-off, so one
  address cannot walk through many accounts.
- per account (any address): after `account_alarm` failures the account is under attack, and each
  address gets only one free failure for it instead of `free_attempts`. An address that has not
  failed for the account may always try it once, so nobody can lock the real user out by guessing
  from elsewhere.

While a back-off runs, the password is not checked at all (the right one is refused too). State lives
in the server process's memory (bounded by `max_entries`); a restart forgets it.
"""

from __future__ import annotations

import threading
import time
from collections import OrderedDict
from dataclasses import dataclass
from typing import Callable


@dataclass
class _Counter:
    failures: int = 0
    last_failure: float = 0.0
    blocked_until: float = 0.0


class SignInThrottle:
    def __init__(self, *, free_attempts: int = 5, address_free_attempts: int = 20, account_alarm: int = 20,
                 base_delay_s: float = 1.0, max_delay_s: float = 900.0, forget_after_s: float = 900.0,
                 max_entries: int = 10_000, clock: Callable[[], float] = time.monotonic):
        self.free_attempts = free_attempts
        self.address_free_attempts = address_free_attempts
        self.account_alarm = account_alarm
        self.base_delay_s = base_delay_s
        self.max_delay_s = max_delay_s
        self.forget_after_s = forget_after_s
        self.max_entries = max_entries
        self.clock = clock
        self._counters: OrderedDict[tuple, _Counter] = OrderedDict()
        self._lock = threading.Lock()

    def _get(self, key: tuple, now: float) -> _Counter:
        counter = self._counters.get(key)
        if counter is None or (now - counter.last_failure > self.forget_after_s and now >= counter.blocked_until):
            counter = _Counter()
        return counter

    def _put(self, key: tuple, counter: _Counter) -> None:
        self._counters[key] = counter
        self._counters.move_to_end(key)
        while len(self._counters) > self.max_entries:
            self._counters.popitem(last=False)

    def wait_s(self, username: str, address: str) -> float:
        """Seconds before this address may try this account again (0: now)."""
        account = (username or "").strip().lower()
        now = self.clock()
        with self._lock:
            until = max(self._get(("pair", account, address), now).blocked_until,
                        self._get(("address", address), now).blocked_until)
        return max(0.0, until - now)

    def _delay(self, failures: int, free: int) -> float:
        if failures < free:
            return 0.0
        return min(self.max_delay_s, self.base_delay_s * 2 ** (failures - free))

    def failed(self, username: str, address: str) -> float:
        """Record a failed sign-in; returns the back-off (s) it starts, 0 when the attempt was free."""
        account = (username or "").strip().lower()
        now = self.clock()
        with self._lock:
            under_attack = self._get(("account", account), now)
            under_attack.failures += 1
            under_attack.last_failure = now
            self._put(("account", account), under_attack)
            free = 1 if under_attack.failures > self.account_alarm else self.free_attempts
            delays = []
            for key, allowance in ((("pair", account, address), free),
                                   (("address", address), self.address_free_attempts)):
                counter = self._get(key, now)
                counter.failures += 1
                counter.last_failure = now
                delay = self._delay(counter.failures, allowance)
                counter.blocked_until = max(counter.blocked_until, now + delay)
                self._put(key, counter)
                delays.append(delay)
        return max(delays)

    def succeeded(self, username: str, address: str) -> None:
        account = (username or "").strip().lower()
        with self._lock:
            self._counters.pop(("pair", account, address), None)
