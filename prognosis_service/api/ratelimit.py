"""A token bucket per API key: ``rate_limit_per_s`` sustained, ``rate_limit_burst`` at once.

Each service process keeps its own buckets in memory (the limit is per process: with N API
workers a key may send up to N times the rate). Only authenticated keys get a bucket, so the
table is bounded by the number of keys.
"""

from __future__ import annotations

import math
import threading
import time
from collections.abc import Callable

__all__ = ["TokenBuckets"]


class TokenBuckets:
    """Token buckets by key.

    Parameters
    ----------
    rate_per_s : float
        Tokens added per second (requests per second sustained); 0 turns limiting off.
    burst : int
        Bucket size: requests a key may send at once after a quiet spell.
    clock : callable
        Monotonic seconds (tests pass their own).
    """

    def __init__(
        self, rate_per_s: float, burst: int, *, clock: Callable[[], float] = time.monotonic
    ) -> None:
        self.rate_per_s = rate_per_s
        self.burst = burst
        self.clock = clock
        self._buckets: dict[str, tuple[float, float]] = {}  # key -> (tokens, at)
        self._lock = threading.Lock()

    def __repr__(self) -> str:
        return f"TokenBuckets(rate_per_s={self.rate_per_s!r}, burst={self.burst!r})"

    def take(self, key: str) -> float:
        """Spend one token of ``key``: 0.0 when allowed, else the seconds until one is due."""
        if self.rate_per_s <= 0:
            return 0.0
        now = self.clock()
        with self._lock:
            tokens, at = self._buckets.get(key, (float(self.burst), now))
            tokens = min(float(self.burst), tokens + (now - at) * self.rate_per_s)
            if tokens >= 1.0:
                self._buckets[key] = (tokens - 1.0, now)
                return 0.0
            self._buckets[key] = (tokens, now)
            return (1.0 - tokens) / self.rate_per_s

    @staticmethod
    def retry_after(wait_s: float) -> str:
        """The ``Retry-After`` header value: whole seconds, at least 1."""
        return str(max(1, math.ceil(wait_s)))
