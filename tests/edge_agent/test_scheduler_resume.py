"""Resuming after a restart: the first tick is the one after the last window handled.

Regression of the chaos run (wellspan.chaos): with intervals above 1000 s the resume point
``last + 1 µs`` fell inside the tick index tolerance, so the last window was computed again and
sent under a new sequence. Expected values are the un-restarted schedule's own next ticks
(common practice, no source: a restart must neither repeat nor skip a tick).
"""

from __future__ import annotations

from datetime import UTC, datetime

import pytest

from edge_agent.scheduler import Scheduler

T0 = datetime(2026, 11, 22, tzinfo=UTC)


@pytest.mark.parametrize("interval_s", [1.0, 60.0, 600.0, 7200.0, 86400.0])
def test_a_resumed_schedule_continues_where_the_running_one_would(interval_s: float) -> None:
    running = Scheduler({"GIB-P2": interval_s}, start=T0, jitter_s=60.0)
    for _ in range(3):
        last = running.peek().due
        running.advance("GIB-P2", last)
        resumed = Scheduler({"GIB-P2": interval_s}, start=T0, jitter_s=60.0,
                            after={"GIB-P2": last})  # fmt: skip
        assert resumed.peek().due == running.peek().due
        assert resumed.peek().due > last
