"""A token bucket that spaces out requests to one endpoint, shared by every loop using it.

Tokens come back at ``per_minute / 60`` a second, up to ``burst`` saved. A request
that finds no token reserves the next one at once (the count goes below zero) and
sleeps until it is due, so waiting requests are served in the order they came,
without a lock: nothing awaits between reading the count and reserving.

A request whose wait would end after its deadline does not reserve anything; it
fails at once with :class:`NoTimeToWait`, because waiting would only spend the
budget on a request that can no longer be made in time.
"""

from __future__ import annotations

import asyncio
import math
import time
from collections.abc import Awaitable, Callable

from plansieve.adapters.http_errors import NoTimeToWait


class TokenBucket:
    """At most ``per_minute`` requests a minute on average, ``burst`` of them back to back.

    ``clock`` (monotonic seconds) and ``sleep`` can be replaced in tests.
    """

    def __init__(self, per_minute: float, burst: int = 1, *,
                 clock: Callable[[], float] = time.monotonic,
                 sleep: Callable[[float], Awaitable[None]] = asyncio.sleep) -> None:
        if (isinstance(per_minute, bool) or not isinstance(per_minute, (int, float))
                or not math.isfinite(per_minute) or per_minute <= 0):
            raise ValueError(f"per_minute must be a positive number, not {per_minute!r}")
        if isinstance(burst, bool) or not isinstance(burst, int) or burst < 1:
            raise ValueError(f"burst must be a whole number of at least 1, not {burst!r}")
        self.per_minute = float(per_minute)
        self.burst = burst
        self._rate = self.per_minute / 60.0  # tokens a second
        self._clock = clock
        self._sleep = sleep
        self._tokens = float(burst)
        self._stamp = clock()

    def _refill(self) -> float:
        now = self._clock()
        self._tokens = min(float(self.burst), self._tokens + (now - self._stamp) * self._rate)
        self._stamp = now
        return now

    def wait_for_next(self) -> float:
        """Seconds a request made now would wait (0 if a token is ready)."""
        self._refill()
        return 0.0 if self._tokens >= 1 else (1 - self._tokens) / self._rate

    async def take(self, deadline: float | None = None) -> None:
        """Wait for a token; raise NoTimeToWait if it would come after ``deadline``
        (a value of ``clock``), taking nothing in that case."""
        now = self._refill()
        wait = 0.0 if self._tokens >= 1 else (1 - self._tokens) / self._rate
        if deadline is not None and now + wait > deadline:
            left = max(deadline - now, 0.0)
            raise NoTimeToWait(
                f"the rate limit of {self.per_minute:g} requests a minute would hold this "
                f"request for {wait:.2f} s, but the time budget has only {left:.2f} s left")
        self._tokens -= 1
        if wait <= 0:
            return
        try:
            await self._sleep(wait)
        except asyncio.CancelledError:
            # The reserved token goes back: this request will not be made.
            self._tokens = min(float(self.burst), self._tokens + 1)
            raise
