"""Absolute-tick schedule and the simulated clock."""

from __future__ import annotations

import threading
import time
from datetime import UTC, datetime, timedelta

import pytest

from edge_agent.clock import SimulatedClock
from edge_agent.scheduler import Scheduler

T0 = datetime(2026, 3, 1, tzinfo=UTC)


def test_ticks_sit_on_a_fixed_grid_however_late_processing_runs() -> None:
    s = Scheduler({"A": 60.0}, start=T0 + timedelta(seconds=5))
    dues = []
    for k in range(100):
        tick = s.peek()
        dues.append(tick.due)
        # processing finishes a varying time after the tick, always within the interval
        s.advance("A", tick.due + timedelta(seconds=(k * 7) % 50))
    assert dues[0] == T0 + timedelta(minutes=1)
    assert all(d == T0 + timedelta(minutes=1 + k) for k, d in enumerate(dues))


def test_late_ticks_are_skipped_and_counted() -> None:
    s = Scheduler({"A": 60.0}, start=T0, max_late_intervals=2)
    assert s.peek().due == T0
    assert s.advance("A", T0 + timedelta(minutes=10, seconds=30)) == 8
    assert s.peek().due == T0 + timedelta(minutes=9)
    assert s.skipped == 8


def test_assets_are_spread_by_their_offsets_and_resume_after_the_last_window() -> None:
    s = Scheduler({"A": 60.0, "B": 60.0, "C": 120.0}, start=T0, jitter_s=30.0)
    first: dict[str, datetime] = {}
    for _ in range(6):
        tick = s.peek()
        for a in tick.asset_ids:
            first.setdefault(a, tick.due)
            s.advance(a, tick.due)
    offsets = {a: (t - T0).total_seconds() % 60 for a, t in first.items()}
    assert all(0 <= o < 30 for o in offsets.values())
    assert len(set(offsets.values())) == 3
    resumed = Scheduler({"A": 60.0}, start=T0, after={"A": T0 + timedelta(minutes=5)})
    assert resumed.peek().due == T0 + timedelta(minutes=6)


def test_stepping_clock_jumps_and_fast_clock_runs_faster_than_real_time() -> None:
    stop = threading.Event()
    step = SimulatedClock(T0, speed=0)
    assert step.wait_until(T0 + timedelta(days=30), stop)
    assert step.now() == T0 + timedelta(days=30)
    fast = SimulatedClock(T0, speed=3600)
    t = time.monotonic()
    assert fast.wait_until(T0 + timedelta(minutes=6), stop)  # 0.1 s of real time
    assert 0.05 < time.monotonic() - t < 5
    stop.set()
    assert not fast.wait_until(T0 + timedelta(days=1), stop)
    with pytest.raises(ValueError, match="speed must be >= 0"):
        SimulatedClock(T0, speed=-1)
