"""Bandwidth budget: report-by-exception within a daily byte budget for the whole gateway.

A routine indicator message is queued when one of its indicators moved beyond its deadband since
the last message queued for that asset, when a value appeared or vanished, when the channel
quality changed, or when the asset's heartbeat interval has passed. Messages tied to an edge
alarm are always queued. Deadbands are multiplied by a common *scale* that adapts so the budget
holds: when the bytes spent today run ahead of the day's pro-rata allowance the scale grows by
10 %, when they fall below 70 % of it the scale shrinks by 10 % (within ``min_scale`` ..
``max_scale``). Routine messages are also held to a hard pace: the bytes spent by the end of a
message may not exceed ``(1 - reserve_fraction) * bytes_per_day * min(1, f + 1/24)``, ``f`` being
the fraction of the UTC day elapsed (heartbeats only to the day's total); the reserve is kept for
alarms, status and drop reports, which are never suppressed. Bytes are counted when a message is
queued, as the estimated size of its MQTT PUBLISH packet (:func:`wire_bytes`).

A message not queued gets no sequence number, so the receiver sees no false gaps.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import date, datetime

from edge_agent.config import BudgetConfig
from shared_schema import IndicatorLayout

__all__ = ["BandwidthBudget", "BudgetDecision", "wire_bytes"]

_PUBLISH_OVERHEAD = 9  # fixed header (<= 4), topic length (2), packet id (2), properties length (1)
_BURST_FRACTION = 1 / 24


def wire_bytes(topic: str, payload: bytes) -> int:
    """Estimated size of the MQTT v5 PUBLISH packet (QoS 1) carrying ``payload`` on ``topic``."""
    return len(payload) + len(topic.encode()) + _PUBLISH_OVERHEAD


@dataclass(frozen=True, slots=True)
class BudgetDecision:
    send: bool
    reason: str  # first | alarm | change | quality | heartbeat | unchanged | over_budget


@dataclass(slots=True)
class _Last:
    values: tuple[float | None, ...]
    quality: object
    at: datetime


class BandwidthBudget:
    """Decides, window by window, which routine messages the gateway can afford to send."""

    def __init__(
        self,
        config: BudgetConfig,
        layouts: Mapping[str, IndicatorLayout],
        *,
        spent_today: int = 0,
        day: date | None = None,
        scale: float = 1.0,
    ) -> None:
        self.config = config
        self.scale = min(max(scale, config.min_scale), config.max_scale)
        self.day = day
        self.spent_today = spent_today
        self.suppressed_today = 0
        self._last: dict[str, _Last] = {}
        self._bands: dict[str, list[tuple[str, float]]] = {}
        for asset_id, layout in layouts.items():
            bands = []
            for name in layout.names:
                d = config.deadbands.get(name)
                if d is None:
                    bands.append(("relative", config.default_relative))
                elif d.absolute is not None:
                    bands.append(("absolute", d.absolute))
                else:
                    bands.append(("relative", float(d.relative or 0.0)))
            self._bands[asset_id] = bands

    @property
    def routine_bytes_per_day(self) -> float:
        return self.config.bytes_per_day * (1 - self.config.reserve_fraction)

    def _roll(self, at: datetime) -> None:
        if self.day != at.date():
            self.day = at.date()
            self.spent_today = 0
            self.suppressed_today = 0

    def _fraction(self, at: datetime) -> float:
        midnight = datetime(at.year, at.month, at.day, tzinfo=at.tzinfo)
        return (at - midnight).total_seconds() / 86400.0

    def _moved(self, asset_id: str, values: Sequence[float | None], last: _Last) -> bool:
        for (kind, band), v, old in zip(self._bands[asset_id], values, last.values, strict=True):
            if (v is None) != (old is None):
                return True
            if v is None or old is None:
                continue
            width = band if kind == "absolute" else band * abs(old)
            if abs(v - old) > width * self.scale or (width == 0 and v != old):
                return True
        return False

    def _adapt(self, at: datetime) -> None:
        if not self.config.adapt:
            return
        allowance = self.routine_bytes_per_day * max(self._fraction(at), 1 / 1440)
        if self.spent_today > allowance:
            self.scale = min(self.scale * 1.1, self.config.max_scale)
        elif self.spent_today < 0.7 * allowance:
            self.scale = max(self.scale / 1.1, self.config.min_scale)

    def decide(
        self,
        asset_id: str,
        values: Sequence[float | None],
        at: datetime,
        *,
        size: int,
        quality: object = None,
        forced: bool = False,
    ) -> BudgetDecision:
        """Whether the message for this window is queued; call :meth:`record` if it is."""
        self._roll(at)
        self._adapt(at)
        last = self._last.get(asset_id)
        if forced:
            return BudgetDecision(True, "alarm")
        heartbeat = last is None or (at - last.at).total_seconds() >= self.config.heartbeat_s
        if last is None:
            reason = "first"
        elif quality != last.quality:
            reason = "quality"
        elif self._moved(asset_id, values, last):
            reason = "change"
        elif heartbeat:
            reason = "heartbeat"
        else:
            self.suppressed_today += 1
            return BudgetDecision(False, "unchanged")
        # Heartbeats are few and known in advance: only the day's total limits them. Changes are
        # also held to the pace, so an eventful morning cannot starve the evening.
        if self.spent_today + size > self.routine_bytes_per_day:
            self.suppressed_today += 1
            return BudgetDecision(False, "over_budget")
        pace = self.routine_bytes_per_day * min(1.0, self._fraction(at) + _BURST_FRACTION)
        if self.spent_today + size > pace:
            if heartbeat:
                return BudgetDecision(True, "heartbeat")
            self.suppressed_today += 1
            return BudgetDecision(False, "over_budget")
        return BudgetDecision(True, reason)

    def sent(
        self, asset_id: str, values: Sequence[float | None], at: datetime, *, quality: object
    ) -> None:
        """Remember what was sent for ``asset_id`` (the reference for the next deadband test)."""
        self._last[asset_id] = _Last(tuple(values), quality, at)

    def record(self, at: datetime, nbytes: int) -> None:
        """Count bytes queued for sending (any message: indicators, alarms, status, reports)."""
        self._roll(at)
        self.spent_today += nbytes

    def __repr__(self) -> str:
        return (
            f"BandwidthBudget(bytes_per_day={self.config.bytes_per_day}, "
            f"spent_today={self.spent_today}, scale={self.scale:.3g})"
        )
