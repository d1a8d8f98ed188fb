"""Fault scenarios: what goes wrong with a simulated pump, when, and how fast.

A `FaultScenario` gives one pump a single fault mode with an onset time, a life to failure (days
from onset until severity 1, the failure threshold), a growth law, an optional repair time that
resets the fault, and optional sensor-fault episodes. `saltbush_scenarios` assigns the demo's
twelve pumps their stories, drawing onset times and lives per unit from a seed.
"""

from __future__ import annotations

import zlib
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from typing import Literal, get_args

import numpy as np

from edge_agent.simulator.degradation import (
    ExponentialGrowth,
    GrowthLaw,
    LinearGrowth,
    ParisGrowth,
    StepGrowth,
    draw_life_days,
)
from edge_agent.simulator.sensor_faults import SENSOR_FAULT_KINDS, SensorFaultKind

__all__ = [
    "BEARING_FAULTS",
    "DEMO_START",
    "FAULT_MODES",
    "SALTBUSH_STORY_DAYS",
    "FaultMode",
    "FaultScenario",
    "SensorFaultEvent",
    "draw_sensor_faults",
    "require_utc",
    "saltbush_scenarios",
]

FaultMode = Literal[
    "healthy",
    "outer_race",
    "inner_race",
    "rolling_element",
    "cage",
    "imbalance",
    "misalignment",
    "cavitation",
    "impeller_wear",
]
FAULT_MODES: tuple[str, ...] = get_args(FaultMode)
BEARING_FAULTS: frozenset[str] = frozenset({"outer_race", "inner_race", "rolling_element", "cage"})

DEMO_START = datetime(2026, 3, 1, tzinfo=UTC)
"""Start of the demo period the default Saltbush Flats scenarios are laid out over."""

_DAY = timedelta(days=1)


def require_utc(t: datetime, name: str = "t") -> datetime:
    """Return ``t`` converted to UTC; reject a naive datetime with a clear error."""
    if not isinstance(t, datetime):
        raise TypeError(f"{name} must be a datetime, got {type(t).__name__}")
    if t.tzinfo is None or t.utcoffset() is None:
        raise ValueError(f"{name} must be timezone-aware (UTC), got naive {t.isoformat()}")
    return t.astimezone(UTC)


def _default_growth(fault: str) -> GrowthLaw:
    growth: dict[str, GrowthLaw] = {
        "outer_race": ExponentialGrowth(initial=0.02),
        "inner_race": ExponentialGrowth(initial=0.02),
        "rolling_element": ExponentialGrowth(initial=0.02),
        "cage": ExponentialGrowth(initial=0.03),
        "imbalance": LinearGrowth(initial=0.1),
        "misalignment": StepGrowth(step=0.5),
        "cavitation": LinearGrowth(initial=0.0),
        "impeller_wear": LinearGrowth(initial=0.0),
    }
    return growth[fault]


@dataclass(frozen=True, slots=True, kw_only=True)
class SensorFaultEvent:
    """A sensor fault on one channel from ``start`` (inclusive) to ``end`` (exclusive)."""

    channel: str
    kind: SensorFaultKind
    start: datetime
    end: datetime
    drift_per_day: float | None = None
    """``dc_drift`` only: channel units per day; None takes the default for the channel kind."""

    def __post_init__(self) -> None:
        if self.kind not in SENSOR_FAULT_KINDS:
            raise ValueError(f"kind must be one of {list(SENSOR_FAULT_KINDS)}, got {self.kind!r}")
        start = require_utc(self.start, "start")
        end = require_utc(self.end, "end")
        if end <= start:
            raise ValueError(
                f"end must be after start, got start={start.isoformat()}, end={end.isoformat()}"
            )

    def active(self, t: datetime) -> bool:
        return self.start <= t < self.end


@dataclass(frozen=True, slots=True, kw_only=True)
class FaultScenario:
    """One pump's fault history.

    Parameters
    ----------
    fault : FaultMode
        The fault that develops; ``"healthy"`` for none.
    onset : datetime, optional
        When the fault starts (severity jumps from 0 to the law's initial value). Required
        unless healthy.
    life_days : float
        Days from onset until severity reaches 1 (the failure threshold). Required unless healthy.
    growth : GrowthLaw, optional
        Severity growth law; defaults by fault (exponential for bearing defects, linear for
        imbalance, wear and strainer fouling, a step for misalignment).
    bearing : str
        Key in ``AssetConfig.bearings`` of the bearing that carries a bearing defect
        (``"de"`` or ``"nde"`` on the Saltbush Flats pumps).
    repair : datetime, optional
        A maintenance event that removes the fault; the pump is healthy from then on.
    sensor_faults : tuple of SensorFaultEvent
        Sensor-fault episodes, independent of the machine fault.
    """

    fault: FaultMode = "healthy"
    onset: datetime | None = None
    life_days: float | None = None
    growth: GrowthLaw | None = None
    bearing: str = "de"
    repair: datetime | None = None
    sensor_faults: tuple[SensorFaultEvent, ...] = field(default=())

    def __post_init__(self) -> None:
        if self.fault not in FAULT_MODES:
            raise ValueError(f"fault must be one of {list(FAULT_MODES)}, got {self.fault!r}")
        if self.fault != "healthy":
            if self.onset is None:
                raise ValueError(f"onset is required for fault {self.fault!r}")
            if self.life_days is None or not self.life_days > 0:
                raise ValueError(
                    f"life_days must be > 0 for fault {self.fault!r}, got {self.life_days!r}"
                )
        if self.onset is not None:
            require_utc(self.onset, "onset")
        if self.repair is not None:
            repair = require_utc(self.repair, "repair")
            if self.onset is not None and repair <= require_utc(self.onset):
                raise ValueError(
                    f"repair must be after onset, got onset={self.onset.isoformat()}, "
                    f"repair={repair.isoformat()}"
                )
        if self.growth is not None and not isinstance(self.growth, GrowthLaw):
            raise TypeError(f"growth must be a growth law, got {self.growth!r}")
        if self.fault in BEARING_FAULTS and not self.bearing:
            raise ValueError(
                f"bearing must name one of the asset's bearings (e.g. 'de'), got {self.bearing!r}"
            )

    @property
    def growth_law(self) -> GrowthLaw | None:
        if self.fault == "healthy":
            return None
        return self.growth if self.growth is not None else _default_growth(self.fault)

    @property
    def failure_time(self) -> datetime | None:
        """When severity reaches 1, or None if healthy."""
        if self.onset is None or self.life_days is None or self.fault == "healthy":
            return None
        return self.onset + self.life_days * _DAY

    def _present(self, t: datetime) -> bool:
        if self.fault == "healthy" or self.onset is None:
            return False
        return self.onset <= t and (self.repair is None or t < self.repair)

    def fault_at(self, t: datetime) -> str:
        """The fault present at ``t`` (``"healthy"`` before onset and after a repair)."""
        return self.fault if self._present(require_utc(t)) else "healthy"

    def severity(self, t: datetime) -> float:
        """Severity at ``t`` in [0, 1]; 1 means the failure threshold has been reached."""
        t = require_utc(t)
        law = self.growth_law
        if not self._present(t) or law is None or self.onset is None or self.life_days is None:
            return 0.0
        tau = (t - self.onset) / _DAY
        return float(law.severity(tau, self.life_days))

    def active_sensor_faults(self, t: datetime) -> tuple[SensorFaultEvent, ...]:
        t = require_utc(t)
        return tuple(e for e in self.sensor_faults if e.active(t))


_EPISODE_DAYS: dict[str, tuple[float, float]] = {
    "clipping": (0.05, 1.0),
    "flatline": (0.1, 2.0),
    "spikes": (0.05, 1.0),
    "dropout": (0.02, 0.5),
    "dc_drift": (20.0, 60.0),
}


def draw_sensor_faults(
    channels: Sequence[str],
    *,
    start: datetime,
    end: datetime,
    rng: np.random.Generator,
    episodes_per_year: float = 1.0,
    kinds: Sequence[SensorFaultKind] = SENSOR_FAULT_KINDS,
) -> tuple[SensorFaultEvent, ...]:
    """Random sensor-fault episodes over ``[start, end)``, for "the odd sensor fault".

    Episodes arrive on each channel as a Poisson process at ``episodes_per_year``; each takes
    a kind uniformly from ``kinds`` and a duration uniform in a kind-typical range (hours for
    spikes, clipping and dropouts, a day or two for a flatline, weeks for a DC drift).

    Examples
    --------
    >>> from datetime import UTC, datetime
    >>> events = draw_sensor_faults(["de_accel"], start=datetime(2026, 1, 1, tzinfo=UTC),
    ...                             end=datetime(2027, 1, 1, tzinfo=UTC),
    ...                             rng=np.random.default_rng(0), episodes_per_year=3.0)
    >>> all(e.channel == "de_accel" for e in events)
    True
    """
    start = require_utc(start, "start")
    end = require_utc(end, "end")
    if end <= start:
        raise ValueError(f"end must be after start, got {start.isoformat()} .. {end.isoformat()}")
    if not episodes_per_year >= 0:
        raise ValueError(f"episodes_per_year must be >= 0, got {episodes_per_year!r}")
    unknown = [k for k in kinds if k not in SENSOR_FAULT_KINDS]
    if unknown or not kinds:
        raise ValueError(
            f"kinds must be a non-empty subset of {list(SENSOR_FAULT_KINDS)}, got {kinds!r}"
        )
    span_days = (end - start) / _DAY
    events = []
    for channel in channels:
        for _ in range(int(rng.poisson(episodes_per_year * span_days / 365.25))):
            kind = kinds[int(rng.integers(len(kinds)))]
            first = float(rng.uniform(0.0, span_days))
            length = float(rng.uniform(*_EPISODE_DAYS[kind]))
            events.append(
                SensorFaultEvent(
                    channel=channel,
                    kind=kind,
                    start=start + first * _DAY,
                    end=start + (first + length) * _DAY,
                )
            )
    return tuple(sorted(events, key=lambda e: (e.start, e.channel)))


def _unit_rng(seed: int, asset_id: str) -> np.random.Generator:
    return np.random.default_rng([seed, zlib.crc32(asset_id.encode()), 0x5CE7A])


SALTBUSH_STORY_DAYS = 180.0
"""Length of the Saltbush Flats story at ``time_scale=1``, days."""


def saltbush_scenarios(
    start: datetime = DEMO_START, *, seed: int = 2026, time_scale: float = 1.0
) -> dict[str, FaultScenario]:
    """The demo's fault story for the twelve Saltbush Flats pumps over about 180 days.

    ``time_scale`` stretches or compresses the whole story (onsets, lives, repairs and sensor
    episodes alike): ``time_scale=0.1`` tells it in 18 days.

    Onset times and lives vary from unit to unit (onset uniform in a window, life lognormal
    with ``sigma(ln life) = 0.2`` about the median); the same ``seed`` always gives the same
    story. Days count from ``start``:

    ======  ===============  =======  =====  ======  =========================================
    pump    fault            bearing  onset  life    notes
    ======  ===============  =======  =====  ======  =========================================
    MAL-P1  healthy                                  reference pump
    MAL-P2  outer_race       de       15-30  ~110    exponential growth, runs to failure
    MAL-P3  imbalance                 5-15   ~150    linear build-up from 0.1
    GIB-P1  inner_race       de       30-45  ~100    Paris-law growth (m = 3)
    GIB-P2  healthy                                  de_accel spikes d40-42, suction_pressure
                                                     flatline d90-91
    GIB-P3  misalignment              60     120     step to 0.45 after maintenance on d60,
                                                     realigned d140
    SPI-P1  cavitation                10-20  ~90     strainer fouling, linear; cleaned at
                                                     1.05 x life (just past the threshold)
    SPI-P2  impeller_wear             0-1    ~240    linear; about 0.75 by the end of the demo
    SPI-P3  rolling_element  nde      40-60  ~100    exponential growth
    COO-P1  cage             de       50-70  ~80     exponential growth
    COO-P2  outer_race       nde      10-20  ~120    bearing replaced at 0.6 x life (mid-way)
    COO-P3  healthy                                  discharge_pressure dropout d30-31,
                                                     bearing_temp DC drift d60-120, de_accel
                                                     clipping d150-151
    ======  ===============  =======  =====  ======  =========================================
    """
    start = require_utc(start, "start")
    if not time_scale > 0:
        raise ValueError(f"time_scale must be > 0, got {time_scale!r}")

    def day(d: float) -> datetime:
        return start + d * time_scale * _DAY

    def drawn(
        asset_id: str,
        fault: FaultMode,
        *,
        onset_days: tuple[float, float],
        median_life_days: float,
        repair_at_life: float | None = None,
        **kw: object,
    ) -> FaultScenario:
        rng = _unit_rng(seed, asset_id)
        onset = day(float(rng.uniform(*onset_days)))
        life = time_scale * draw_life_days(rng, median_days=median_life_days, dispersion=0.2)
        repair = None if repair_at_life is None else onset + repair_at_life * life * _DAY
        return FaultScenario(fault=fault, onset=onset, life_days=life, repair=repair, **kw)  # type: ignore[arg-type]

    def episode(channel: str, kind: SensorFaultKind, first: float, last: float) -> SensorFaultEvent:
        return SensorFaultEvent(channel=channel, kind=kind, start=day(first), end=day(last))

    return {
        "MAL-P1": FaultScenario(),
        "MAL-P2": drawn("MAL-P2", "outer_race", onset_days=(15, 30), median_life_days=110),
        "MAL-P3": drawn("MAL-P3", "imbalance", onset_days=(5, 15), median_life_days=150),
        "GIB-P1": drawn(
            "GIB-P1", "inner_race", onset_days=(30, 45), median_life_days=100,
            growth=ParisGrowth(exponent=3.0, initial=0.02),
        ),
        "GIB-P2": FaultScenario(
            sensor_faults=(
                episode("de_accel", "spikes", 40, 42),
                episode("suction_pressure", "flatline", 90, 91),
            )
        ),
        "GIB-P3": FaultScenario(
            fault="misalignment", onset=day(60), life_days=120.0 * time_scale,
            growth=StepGrowth(step=0.45), repair=day(140),
        ),
        "SPI-P1": drawn(
            "SPI-P1", "cavitation", onset_days=(10, 20), median_life_days=90,
            repair_at_life=1.05,
        ),
        "SPI-P2": drawn("SPI-P2", "impeller_wear", onset_days=(0, 1), median_life_days=240),
        "SPI-P3": drawn(
            "SPI-P3", "rolling_element", onset_days=(40, 60), median_life_days=100, bearing="nde"
        ),
        "COO-P1": drawn("COO-P1", "cage", onset_days=(50, 70), median_life_days=80),
        "COO-P2": drawn(
            "COO-P2", "outer_race", onset_days=(10, 20), median_life_days=120, bearing="nde",
            repair_at_life=0.6,
        ),
        "COO-P3": FaultScenario(
            sensor_faults=(
                episode("discharge_pressure", "dropout", 30, 31),
                episode("bearing_temp", "dc_drift", 60, 120),
                episode("de_accel", "clipping", 150, 151),
            )
        ),
    }  # fmt: skip
