"""Edge alarms: raised on the gateway from each window's indicators and sent ahead of the queue.

Three kinds (``EdgeAlarmKind``):

zone change
    Every indicator named ``*.velocity_rms`` in mm/s is placed in its ISO 10816-3 evaluation
    zone (A-D) for the asset's machine group and foundation. An alarm is raised when the zone
    changes, and on the first window if it is already in zone C or D. A change back to a lower
    zone is sent with ``cleared=True`` once the value is below the boundary by the hysteresis
    (5 % of the boundary; common practice, no source).
threshold
    Configured ``high``/``low`` levels per indicator; raised on crossing, cleared on return past
    the level by its hysteresis fraction.
sensor fault
    A channel flagged clipped, flatline or dropout in ``sensor_fault_windows`` consecutive windows;
    cleared on the first clean window. Only channels of ``sensor_fault_kinds`` are watched (by
    default not temperature: a slow channel may look flat over one short window).

Alarms are advisory: they do not replace the machine's protective trips.
"""

from __future__ import annotations

import uuid
from collections.abc import Mapping
from dataclasses import dataclass, field
from datetime import datetime

from edge_agent.assets import AssetConfig
from edge_agent.config import AlarmConfig
from edge_agent.dsp.severity import zone_boundaries
from shared_schema import (
    EdgeAlarm,
    EdgeAlarmKind,
    IndicatorLayout,
    IndicatorMessage,
    QualityFlag,
)

__all__ = ["EdgeAlarmDetector"]

_ZONES = ("A", "B", "C", "D")
_ZONE_HYSTERESIS = 0.05
_FAULT_FLAGS = frozenset({QualityFlag.CLIPPED, QualityFlag.FLATLINE, QualityFlag.DROPOUT})


@dataclass(slots=True)
class _State:
    zone: dict[str, str] = field(default_factory=dict)
    high: dict[str, bool] = field(default_factory=dict)
    low: dict[str, bool] = field(default_factory=dict)
    bad_windows: dict[str, int] = field(default_factory=dict)
    faulted: dict[str, bool] = field(default_factory=dict)


class EdgeAlarmDetector:
    """Keeps each asset's alarm state and turns indicator messages into edge alarms."""

    def __init__(
        self,
        config: AlarmConfig,
        assets: Mapping[str, AssetConfig],
        layouts: Mapping[str, IndicatorLayout],
        *,
        gateway_id: str,
        site: str,
    ) -> None:
        self.config = config
        self.assets = dict(assets)
        self.layouts = dict(layouts)
        self.gateway_id = gateway_id
        self.site = site
        self._state = {a: _State() for a in self.assets}
        every = set().union(*(set(la.names) for la in self.layouts.values()))
        unknown = sorted(set(config.thresholds) - every)
        if unknown:
            raise ValueError(
                f"alarms.thresholds names indicators {unknown} that no asset computes; "
                f"known: {sorted(every)}"
            )

    def _alarm(self, msg: IndicatorMessage, kind: EdgeAlarmKind, **fields: object) -> EdgeAlarm:
        return EdgeAlarm.model_validate(
            {
                "message_id": uuid.uuid4(),
                "gateway_id": self.gateway_id,
                "site": self.site,
                "asset_id": msg.asset_id,
                "raised_at": msg.window_start,
                "kind": kind,
                **fields,
            }
        )

    def check(self, msg: IndicatorMessage, at: datetime | None = None) -> list[EdgeAlarm]:
        """The alarms this window raises or clears (often none)."""
        asset = self.assets[msg.asset_id]
        layout = self.layouts[msg.asset_id]
        state = self._state[msg.asset_id]
        values = msg.values_by_name(layout)
        out: list[EdgeAlarm] = []
        if self.config.zone_change:
            bounds = zone_boundaries(
                machine_group=asset.severity.machine_group, foundation=asset.severity.foundation
            )
            for spec in layout.indicators:
                if not spec.name.endswith(".velocity_rms") or spec.unit != "mm/s":
                    continue
                v = values[spec.name]
                if v is None:
                    continue
                out.extend(self._zone(msg, state, spec.name, spec.channel, v, bounds))
        for name, t in self.config.thresholds.items():
            v = values.get(name)
            if v is None:
                continue
            spec = layout.indicators[layout.index(name)]
            common = {"indicator": name, "channel": spec.channel, "value": v, "unit": spec.unit}
            if t.high is not None:
                was = state.high.get(name, False)
                margin = t.hysteresis * abs(t.high)
                if not was and v > t.high:
                    state.high[name] = True
                    out.append(self._alarm(msg, EdgeAlarmKind.THRESHOLD, threshold=t.high,
                                           detail=f"{name} above {t.high:g} {spec.unit}",
                                           **common))  # fmt: skip
                elif was and v < t.high - margin:
                    state.high[name] = False
                    out.append(self._alarm(msg, EdgeAlarmKind.THRESHOLD, threshold=t.high,
                                           cleared=True,
                                           detail=f"{name} back below {t.high:g} {spec.unit}",
                                           **common))  # fmt: skip
            if t.low is not None:
                was = state.low.get(name, False)
                margin = t.hysteresis * abs(t.low)
                if not was and v < t.low:
                    state.low[name] = True
                    out.append(self._alarm(msg, EdgeAlarmKind.THRESHOLD, threshold=t.low,
                                           detail=f"{name} below {t.low:g} {spec.unit}",
                                           **common))  # fmt: skip
                elif was and v > t.low + margin:
                    state.low[name] = False
                    out.append(self._alarm(msg, EdgeAlarmKind.THRESHOLD, threshold=t.low,
                                           cleared=True,
                                           detail=f"{name} back above {t.low:g} {spec.unit}",
                                           **common))  # fmt: skip
        if self.config.sensor_fault_windows:
            out.extend(self._sensor_faults(msg, state, layout))
        return out

    def _zone(
        self,
        msg: IndicatorMessage,
        state: _State,
        name: str,
        channel: str,
        v: float,
        bounds: tuple[float, float, float],
    ) -> list[EdgeAlarm]:
        raw = _ZONES[sum(v > b for b in bounds)]
        old = state.zone.get(name)
        if old is None:
            state.zone[name] = raw
            if raw in ("C", "D"):
                return [self._zone_alarm(msg, name, channel, v, bounds, None, raw)]
            return []
        if raw > old:
            state.zone[name] = raw
            return [self._zone_alarm(msg, name, channel, v, bounds, old, raw)]
        if raw < old:
            # leave the higher zone only once clear of its lower boundary by the hysteresis
            lower = bounds[_ZONES.index(old) - 1]
            if v < lower * (1 - _ZONE_HYSTERESIS):
                state.zone[name] = raw
                return [self._zone_alarm(msg, name, channel, v, bounds, old, raw)]
        return []

    def _zone_alarm(
        self,
        msg: IndicatorMessage,
        name: str,
        channel: str,
        v: float,
        bounds: tuple[float, float, float],
        old: str | None,
        new: str,
    ) -> EdgeAlarm:
        worse = old is None or new > old
        idx = _ZONES.index(new if worse else old) - 1
        return self._alarm(
            msg,
            EdgeAlarmKind.ZONE_CHANGE,
            indicator=name,
            channel=channel,
            value=v,
            unit="mm/s",
            threshold=bounds[max(idx, 0)],
            zone_from=old,
            zone_to=new,
            cleared=not worse,
            detail=f"ISO 10816-3 zone {old or '-'} -> {new} ({name} {v:.3g} mm/s)",
        )

    def _sensor_faults(
        self, msg: IndicatorMessage, state: _State, layout: IndicatorLayout
    ) -> list[EdgeAlarm]:
        out = []
        asset = self.assets[msg.asset_id]
        kinds = set(self.config.sensor_fault_kinds)
        for channel in layout.channels:
            try:
                if asset.channel(channel).kind not in kinds:
                    continue
            except KeyError:
                continue
            flags = msg.quality_of(channel).flags & _FAULT_FLAGS
            if flags:
                n = state.bad_windows.get(channel, 0) + 1
                state.bad_windows[channel] = n
                if n >= self.config.sensor_fault_windows and not state.faulted.get(channel):
                    state.faulted[channel] = True
                    names = ", ".join(sorted(f.value for f in flags))
                    out.append(
                        self._alarm(
                            msg,
                            EdgeAlarmKind.SENSOR_FAULT,
                            channel=channel,
                            detail=f"channel {channel} {names} for {n} consecutive windows",
                        )
                    )
            else:
                state.bad_windows[channel] = 0
                if state.faulted.get(channel):
                    state.faulted[channel] = False
                    out.append(
                        self._alarm(
                            msg,
                            EdgeAlarmKind.SENSOR_FAULT,
                            channel=channel,
                            cleared=True,
                            detail=f"channel {channel} passes its quality checks again",
                        )
                    )
        return out
