"""Duty profiles: the process conditions a pump sees over time.

A profile maps a UTC time to a `DutyPoint` — either a flow demand (the drive then finds the speed
that delivers it) or a fixed drive speed reference — plus fluid and ambient temperature and the
supply pressure at the suction tank outlet. `SaltbushDuty` is the demo's: produced-water demand
with seasonal and daily swings, hot summers (January) and mild winters (July), and a tank level
that wanders. Every value is a deterministic function of the time and the seed.
"""

from __future__ import annotations

import math
import zlib
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Protocol, runtime_checkable

import numpy as np

from edge_agent.simulator.scenario import require_utc

__all__ = ["ConstantDuty", "DutyPoint", "DutyProfile", "SaltbushDuty"]

_YEAR_S = 365.25 * 86400.0
_DAY_S = 86400.0


@dataclass(frozen=True, slots=True, kw_only=True)
class DutyPoint:
    """Process conditions at one moment.

    Exactly one of ``flow_demand_m3_per_h`` and ``speed_reference_rpm`` is set.
    """

    flow_demand_m3_per_h: float | None = None
    speed_reference_rpm: float | None = None
    fluid_temperature_c: float = 30.0
    ambient_temperature_c: float = 25.0
    supply_pressure_kpa: float = 85.0

    def __post_init__(self) -> None:
        if (self.flow_demand_m3_per_h is None) == (self.speed_reference_rpm is None):
            raise ValueError(
                "exactly one of flow_demand_m3_per_h and speed_reference_rpm must be set, got "
                f"{self.flow_demand_m3_per_h!r} and {self.speed_reference_rpm!r}"
            )
        if self.flow_demand_m3_per_h is not None and not self.flow_demand_m3_per_h >= 0:
            raise ValueError(
                f"flow_demand_m3_per_h must be >= 0, got {self.flow_demand_m3_per_h!r}"
            )
        if self.speed_reference_rpm is not None and not self.speed_reference_rpm > 0:
            raise ValueError(f"speed_reference_rpm must be > 0, got {self.speed_reference_rpm!r}")
        if not 1.0 <= self.fluid_temperature_c <= 95.0:
            raise ValueError(
                f"fluid_temperature_c must lie in [1, 95] degC, got {self.fluid_temperature_c!r}"
            )


@runtime_checkable
class DutyProfile(Protocol):
    """Anything that gives the duty at a UTC time."""

    def at(self, t: datetime) -> DutyPoint: ...


@dataclass(frozen=True, slots=True, kw_only=True)
class ConstantDuty:
    """The same duty at every time (tests, what-if runs)."""

    point: DutyPoint

    def at(self, t: datetime) -> DutyPoint:
        return self.point


@dataclass(frozen=True, slots=True, kw_only=True)
class SaltbushDuty:
    """The demo's produced-water duty for one pump.

    Demand is ``bep_flow_m3_per_h`` times a base load with a seasonal swing, a daily cycle and
    an hourly random component (linearly interpolated between whole hours so it is continuous);
    fluid temperature swings seasonally between about 24 and 42 degC (southern hemisphere,
    warmest in late January) and a little through the day.
    """

    asset_id: str
    seed: int = 0
    bep_flow_m3_per_h: float = 120.0

    def _hourly(self, hour: int) -> float:
        key = [self.seed, zlib.crc32(self.asset_id.encode()), 0xD07, hour & (2**64 - 1)]
        return float(np.random.default_rng(key).standard_normal())

    def _unit_phase(self) -> float:
        return (zlib.crc32(self.asset_id.encode()) % 1000) / 1000.0 * 2.0 * math.pi

    def at(self, t: datetime) -> DutyPoint:
        t = require_utc(t)
        epoch_s = t.timestamp()
        year_start = datetime(t.year, 1, 1, tzinfo=UTC).timestamp()
        season = 2.0 * math.pi * ((epoch_s - year_start) / _YEAR_S - 25.0 / 365.25)
        local_hour = ((epoch_s / 3600.0) + 9.5) % 24.0  # central Australian time, UTC+9:30
        daily = 2.0 * math.pi * (local_hour - 15.0) / 24.0
        hours = epoch_s / 3600.0
        h0 = math.floor(hours)
        frac = hours - h0
        wander = (1.0 - frac) * self._hourly(h0) + frac * self._hourly(h0 + 1)
        phase = self._unit_phase()
        load = 0.74 + 0.10 * math.sin(season + phase) + 0.08 * math.cos(daily) + 0.04 * wander
        load = min(max(load, 0.35), 1.02)
        fluid_c = 33.0 + 9.0 * math.cos(season) + 1.0 * math.cos(daily)
        ambient_c = 22.0 + 11.0 * math.cos(season) + 7.0 * math.cos(daily)
        tank_kpa = 85.0 + 12.0 * math.sin(2.0 * math.pi * hours / 79.0 + phase) + 2.0 * wander
        return DutyPoint(
            flow_demand_m3_per_h=load * self.bep_flow_m3_per_h,
            fluid_temperature_c=fluid_c,
            ambient_temperature_c=ambient_c,
            supply_pressure_kpa=tank_kpa,
        )
