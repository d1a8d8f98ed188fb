"""Time sources for the scheduler: the wall clock, or a simulated clock faster than real time.

A simulated clock with ``speed=0`` is a *stepping* clock: waiting for a time simply moves the
clock there, so months of simulated life run as fast as the gateway can compute them.
"""

from __future__ import annotations

import threading
import time
from datetime import UTC, datetime, timedelta
from typing import Protocol

__all__ = ["Clock", "RealClock", "SimulatedClock"]


class Clock(Protocol):
    """What the scheduler needs from a time source."""

    def now(self) -> datetime:
        """The current time, timezone-aware UTC."""
        ...

    def wait_until(self, t: datetime, stop: threading.Event) -> bool:
        """Block until ``t``; return False at once if ``stop`` is set first."""
        ...


class RealClock:
    """The gateway's wall clock."""

    def now(self) -> datetime:
        return datetime.now(UTC)

    def wait_until(self, t: datetime, stop: threading.Event) -> bool:
        while not stop.is_set():
            remaining = (t - self.now()).total_seconds()
            if remaining <= 0:
                return True
            stop.wait(min(remaining, 1.0))
        return False

    def __repr__(self) -> str:
        return "RealClock()"


class SimulatedClock:
    """Simulated time: ``start`` advanced ``speed`` times faster than the wall clock.

    Parameters
    ----------
    start : datetime
        Simulated time at construction (timezone-aware).
    speed : float
        Simulated seconds per real second; ``0`` steps straight to every awaited time.
    """

    def __init__(self, start: datetime, *, speed: float = 0.0) -> None:
        if start.tzinfo is None:
            raise ValueError("start must be timezone-aware, got a naive datetime")
        if speed < 0:
            raise ValueError(f"speed must be >= 0 (0 = as fast as possible), got {speed!r}")
        self.start = start.astimezone(UTC)
        self.speed = speed
        self._lock = threading.Lock()
        self._t0 = time.monotonic()
        self._stepped = self.start

    def now(self) -> datetime:
        if self.speed == 0:
            with self._lock:
                return self._stepped
        return self.start + timedelta(seconds=(time.monotonic() - self._t0) * self.speed)

    def wait_until(self, t: datetime, stop: threading.Event) -> bool:
        if stop.is_set():
            return False
        if self.speed == 0:
            with self._lock:
                self._stepped = max(self._stepped, t)
            return True
        while not stop.is_set():
            remaining = (t - self.now()).total_seconds() / self.speed
            if remaining <= 0:
                return True
            stop.wait(min(remaining, 0.5))
        return False

    def __repr__(self) -> str:
        return f"SimulatedClock(start={self.start.isoformat()}, speed={self.speed:g})"
