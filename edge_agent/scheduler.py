"""Acquisition schedule: absolute ticks per asset, so the pace never drifts.

Asset ``a`` with interval ``I`` is due at ``k * I + offset_a`` seconds after the Unix epoch, for
whole ``k``: the tick grid is fixed, and the time spent processing a window never pushes later
ticks back. ``offset_a`` spreads the assets of a gateway over ``jitter_s`` (a fixed, per-asset
fraction derived from the asset id) so they are not all acquired in the same instant. When the
gateway falls more than ``max_late_intervals`` ticks behind (overload, a suspended VM), the missed
ticks are skipped and counted instead of being worked off in a burst.
"""

from __future__ import annotations

import heapq
import math
import zlib
from collections.abc import Mapping
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

__all__ = ["Scheduler", "Tick"]

_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)


@dataclass(frozen=True, slots=True)
class Tick:
    due: datetime
    asset_ids: tuple[str, ...]


class Scheduler:
    """The next due tick of every asset.

    Parameters
    ----------
    intervals : mapping of asset id to seconds
    start : datetime
        No tick before this time.
    jitter_s : float
        Spread of the per-asset offsets, s.
    max_late_intervals : int
        How many intervals late a tick may be before it is skipped.
    after : mapping of asset id to datetime, optional
        Per asset, the last window already handled (resume after restart): its first tick is
        strictly later.
    """

    def __init__(
        self,
        intervals: Mapping[str, float],
        *,
        start: datetime,
        jitter_s: float = 0.0,
        max_late_intervals: int = 2,
        after: Mapping[str, datetime] | None = None,
    ) -> None:
        self.intervals = dict(intervals)
        self.max_late_intervals = max_late_intervals
        self.skipped = 0
        self._offsets = {
            a: (zlib.crc32(a.encode()) % 10_000) / 10_000 * min(jitter_s, i)
            for a, i in self.intervals.items()
        }
        self._heap: list[tuple[datetime, str, int]] = []
        for asset_id in self.intervals:
            last = after.get(asset_id) if after else None
            if last is not None and last >= start:
                # the first tick strictly after the last window handled; compared on the due
                # times themselves, since the index tolerance (1e-9 intervals) exceeds a
                # microsecond once the interval is above 1000 s
                k = self._index_at_or_after(asset_id, last)
                if self._due(asset_id, k) <= last:
                    k += 1
            else:
                k = self._index_at_or_after(asset_id, start)
            heapq.heappush(self._heap, (self._due(asset_id, k), asset_id, k))

    def _seconds(self, t: datetime) -> float:
        return (t - _EPOCH).total_seconds()

    def _index_at_or_after(self, asset_id: str, t: datetime) -> int:
        i, off = self.intervals[asset_id], self._offsets[asset_id]
        return math.ceil((self._seconds(t) - off) / i - 1e-9)

    def _due(self, asset_id: str, k: int) -> datetime:
        i, off = self.intervals[asset_id], self._offsets[asset_id]
        due = _EPOCH + timedelta(seconds=k * i + off)
        return due.replace(microsecond=due.microsecond // 1000 * 1000)  # wire has milliseconds

    def peek(self) -> Tick:
        """The earliest due time and every asset due then."""
        due = self._heap[0][0]
        assets = tuple(sorted(a for d, a, _ in self._heap if d == due))
        return Tick(due, assets)

    def advance(self, asset_id: str, now: datetime) -> int:
        """Move ``asset_id`` past its current tick; returns how many ticks were skipped."""
        found = [n for n, entry in enumerate(self._heap) if entry[1] == asset_id]
        if not found:
            raise KeyError(asset_id)
        _, _, k = self._heap.pop(found[0])
        heapq.heapify(self._heap)
        nxt = k + 1
        latest_ok = self._index_at_or_after(asset_id, now) - self.max_late_intervals
        skipped = max(0, latest_ok - nxt)
        nxt += skipped
        self.skipped += skipped
        heapq.heappush(self._heap, (self._due(asset_id, nxt), asset_id, nxt))
        return skipped
