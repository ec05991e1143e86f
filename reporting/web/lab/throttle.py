"""Per-address throttling of failed sign-ins (in memory, per server process).

Password guessing spread over many accounts does not trip any one account's lockout, so failures
are also counted per network address: after :attr:`Settings.sign_in_throttle_failures` within
:attr:`Settings.sign_in_throttle_minutes`, that address gets 429 with ``Retry-After`` until its
oldest counted failure leaves the window (NIST SP 800-63B section 5.2.2, rate limiting; OWASP
Authentication Cheat Sheet). The counts live in this process only: a restart forgets them, which
the per-account lockout (kept in the store) does not.
"""

from __future__ import annotations

import logging
import math
import threading
import time
from collections import OrderedDict, deque
from collections.abc import Callable

log = logging.getLogger(__name__)

MAX_ADDRESSES = 10_000
"""Addresses remembered at most (the least recently failing are forgotten first)."""


class AddressThrottle:
    """Counts failed sign-ins per address in a sliding window (``clock`` is for tests)."""

    def __init__(
        self, *, failures: int, window_minutes: int, clock: Callable[[], float] = time.monotonic
    ) -> None:
        self.failures = failures
        self.window = window_minutes * 60.0
        self.clock = clock
        self._seen: OrderedDict[str, deque[float]] = OrderedDict()
        self._lock = threading.Lock()

    def _recent(self, address: str, now: float) -> deque[float]:
        times = self._seen.get(address)
        if times is None:
            return deque()
        while times and now - times[0] >= self.window:
            times.popleft()
        if not times:
            del self._seen[address]
        return times

    def wait_seconds(self, address: str) -> int:
        """Seconds ``address`` must wait before its next attempt (0: it may try now)."""
        with self._lock:
            now = self.clock()
            times = self._recent(address, now)
            if len(times) < self.failures:
                return 0
            return max(1, math.ceil(self.window - (now - times[0])))

    def failed(self, address: str) -> None:
        """Count a failed sign-in from ``address``."""
        with self._lock:
            now = self.clock()
            times = self._recent(address, now)
            times.append(now)
            self._seen[address] = times
            self._seen.move_to_end(address)
            while len(self._seen) > MAX_ADDRESSES:
                self._seen.popitem(last=False)
            if len(times) == self.failures:
                log.warning("sign-in throttled for %s after %d failures", address, len(times))
