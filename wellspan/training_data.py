"""Training data for the fault classifier: simulated pumps through the gateway's real chain, and
the operator's own history labelled by maintenance events.

Simulated rows: every unit (a Saltbush Flats pump with its own bearing geometry, drawn from a
seed) runs at chosen operating points (speed, fluid temperature, tank supply pressure) with a
constant duty; at each point it gets a healthy baseline from its own windows, then healthy
windows and windows of every fault mode at several severities. Each window goes through the
simulator (:class:`edge_agent.simulator.PumpSimulator`) and the gateway extractor
(:class:`edge_agent.extractor.Extractor`), exactly as on a gateway, and becomes baseline-relative
features (:func:`prognosis_service.diagnosis.diagnostic_features`). Everything is a function of
the seed. This module is the launcher's: it may use both the gateway and the service packages,
which never import each other.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta

import numpy as np
from numpy.typing import ArrayLike, NDArray

from edge_agent.assets import AssetConfig
from edge_agent.extractor import Extractor
from edge_agent.simulator import (
    FAULT_MODES,
    SALTBUSH_ASSET_IDS,
    SALTBUSH_SITE_ID,
    ConstantDuty,
    DutyPoint,
    FaultScenario,
    LinearGrowth,
    PumpSimulator,
    bearing_defect_frequencies,
    saltbush_asset,
)
from edge_agent.simulator.scenario import BEARING_FAULTS
from prognosis_service.diagnosis import (
    DiagnosisTable,
    IndicatorBaseline,
    diagnostic_features,
    label_maintenance_history,
)
from shared_schema import MaintenanceEvent

__all__ = [
    "HELD_OUT_POINTS",
    "TRAINING_POINTS",
    "OperatingPoint",
    "SimulatedCase",
    "cases_table",
    "defect_orders",
    "history_training_table",
    "simulate_cases",
    "simulated_training_table",
]

_START = datetime(2026, 3, 1, tzinfo=UTC)
_LIFE_DAYS = 100.0
_GATEWAY = "gw-training"


@dataclass(frozen=True, slots=True, kw_only=True)
class OperatingPoint:
    """A constant operating point: drive speed, fluid temperature and tank supply pressure."""

    speed_rpm: float
    fluid_temperature_c: float = 33.0
    supply_pressure_kpa: float = 85.0

    def __post_init__(self) -> None:
        if not 1150.0 <= self.speed_rpm <= 1780.0:
            raise ValueError(
                f"speed_rpm must lie in the drives' range [1150, 1780] rpm; got {self.speed_rpm!r}"
            )
        if not 1.0 <= self.fluid_temperature_c <= 95.0:
            raise ValueError(
                f"fluid_temperature_c must lie in [1, 95] degC; got {self.fluid_temperature_c!r}"
            )
        if not 20.0 <= self.supply_pressure_kpa <= 300.0:
            raise ValueError(
                f"supply_pressure_kpa must lie in [20, 300] kPa; got {self.supply_pressure_kpa!r}"
            )

    @property
    def label(self) -> str:
        return (
            f"{self.speed_rpm:.0f} rpm, {self.fluid_temperature_c:.0f} degC, "
            f"{self.supply_pressure_kpa:.0f} kPa supply"
        )


TRAINING_POINTS: tuple[OperatingPoint, ...] = (
    OperatingPoint(speed_rpm=1150.0, fluid_temperature_c=25.0, supply_pressure_kpa=90.0),
    OperatingPoint(speed_rpm=1465.0, fluid_temperature_c=33.0, supply_pressure_kpa=85.0),
    OperatingPoint(speed_rpm=1780.0, fluid_temperature_c=42.0, supply_pressure_kpa=78.0),
)
"""Low, middle and top of the drives' speed range, with winter, mean and summer fluid."""

HELD_OUT_POINTS: tuple[OperatingPoint, ...] = (
    OperatingPoint(speed_rpm=1250.0, fluid_temperature_c=38.0, supply_pressure_kpa=82.0),
    OperatingPoint(speed_rpm=1600.0, fluid_temperature_c=28.0, supply_pressure_kpa=88.0),
    OperatingPoint(speed_rpm=1740.0, fluid_temperature_c=35.0, supply_pressure_kpa=75.0),
)
"""Operating points none of the training points share, for held-out checks."""


@dataclass(frozen=True)
class SimulatedCase:
    """One simulated window with everything the service would know about it.

    Attributes
    ----------
    unit_id : str
        ``"{asset_id}#{seed}"``: the asset's geometry with the unit traits of that seed.
    asset_id : str
    regime : str
        The operating point's label.
    fault : str
        True fault mode of the window.
    severity : float
        True severity in [0, 1] (1 is the failure threshold).
    names : tuple of str
        Indicator names (the extractor's layout).
    values : ndarray of shape (n_indicators,)
        Indicator values, NaN where the extractor gave none.
    shaft_speed_hz : float
        Shaft speed the extractor reported, Hz.
    baseline : IndicatorBaseline
        The unit's healthy baseline at this operating point.
    defect_orders : dict
        Bearing defect multiples of shaft speed per accelerometer channel.
    faulty_bearing : str or None
        ``"de"`` or ``"nde"`` for bearing faults.
    """

    unit_id: str
    asset_id: str
    regime: str
    fault: str
    severity: float
    names: tuple[str, ...]
    values: NDArray
    shaft_speed_hz: float
    baseline: IndicatorBaseline
    defect_orders: dict[str, dict[str, float]]
    faulty_bearing: str | None = None

    def values_by_name(self) -> dict[str, float | None]:
        """The indicator values as ``{name: value}`` (None where missing)."""
        return {
            n: (float(v) if math.isfinite(v) else None)
            for n, v in zip(self.names, self.values, strict=True)
        }


def defect_orders(asset: AssetConfig) -> dict[str, dict[str, float]]:
    """Bearing defect frequencies as multiples of shaft speed, per accelerometer channel.

    Randall & Antoni (2011), eqs. 1-4, via the simulator's kinematics; ``bsf`` is the ball spin
    frequency (the extractor's envelope indicator takes the larger of BSF and 2 x BSF).
    """
    out: dict[str, dict[str, float]] = {}
    for c in asset.channels:
        if c.kind != "accel" or c.bearing is None or c.bearing not in asset.bearings:
            continue
        f = bearing_defect_frequencies(asset.bearings[c.bearing], 1.0)
        out[c.name] = {"bpfo": f.bpfo_hz, "bpfi": f.bpfi_hz, "bsf": f.bsf_hz, "ftf": f.ftf_hz}
    return out


def _scenario(fault: str, severity: float, t: datetime, bearing: str) -> FaultScenario:
    if fault == "healthy":
        return FaultScenario()
    return FaultScenario(
        fault=fault,  # type: ignore[arg-type]
        onset=t - timedelta(days=severity * _LIFE_DAYS),
        life_days=_LIFE_DAYS,
        growth=LinearGrowth(initial=0.0),
        bearing=bearing,
    )


def _check_unit_interval(name: str, values: Sequence[float]) -> tuple[float, ...]:
    out = tuple(float(v) for v in values)
    if not out or not all(0.0 < v <= 1.0 for v in out):
        raise ValueError(f"{name} must be a non-empty sequence of values in (0, 1]; got {values!r}")
    return out


def simulate_cases(
    *,
    seed: int,
    asset_ids: Sequence[str] = SALTBUSH_ASSET_IDS[:4],
    points: Sequence[OperatingPoint] = TRAINING_POINTS,
    faults: Sequence[str] = FAULT_MODES,
    severities: Sequence[float] = (0.2, 0.4, 0.7, 1.0),
    baseline_windows: int = 6,
    healthy_windows: int = 3,
    windows_per_severity: int = 1,
    speed_spread: float = 0.03,
) -> list[SimulatedCase]:
    """Simulate windows of every fault mode, each paired with its unit's healthy baseline.

    Parameters
    ----------
    seed : int
        Seed of everything: unit traits, bearing side, speed scatter and every window.
    asset_ids : sequence of str
        Saltbush Flats pumps to use as units (each has its own bearing geometry).
    points : sequence of OperatingPoint
        Operating points (regimes) every unit runs at.
    faults : sequence of str
        Fault modes to simulate (``"healthy"`` gives the healthy rows).
    severities : sequence of float
        Severities in (0, 1] of every fault (1 is the failure threshold).
    baseline_windows : int
        Healthy windows per unit and point that form the baseline (not returned as rows).
    healthy_windows : int
        Further healthy windows per unit and point, returned as "healthy" rows.
    windows_per_severity : int
        Windows per fault mode and severity.
    speed_spread : float
        Each window's drive speed is drawn uniformly within +-``speed_spread`` of the point's
        (an operating regime is a band, not a line); fluid temperature and supply pressure
        scatter by 0.5 degC and 1 kPa (standard deviations).

    Returns
    -------
    list of SimulatedCase
    """
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise ValueError(f"seed must be a non-negative integer; got {seed!r}")
    unknown = [f for f in faults if f not in FAULT_MODES]
    if unknown:
        raise ValueError(f"faults must be among {list(FAULT_MODES)}; got {unknown!r}")
    sev = _check_unit_interval("severities", severities)
    for name, value, low in (
        ("baseline_windows", baseline_windows, 3),
        ("healthy_windows", healthy_windows, 0),
        ("windows_per_severity", windows_per_severity, 1),
    ):
        if isinstance(value, bool) or not isinstance(value, int) or value < low:
            raise ValueError(f"{name} must be an integer >= {low}; got {value!r}")
    if not 0.0 <= speed_spread <= 0.1:
        raise ValueError(f"speed_spread must lie in [0, 0.1]; got {speed_spread!r}")
    if not points:
        raise ValueError("points must name at least one OperatingPoint")

    rng = np.random.default_rng([seed, 0xD1A6])
    cases: list[SimulatedCase] = []
    clock = _Clock()
    for asset_id in asset_ids:
        unit = _Unit(saltbush_asset(asset_id), seed, rng, clock, speed_spread)
        for point in points:
            rows = [unit.run(point, "healthy", 0.0, "de") for _ in range(baseline_windows)]
            baseline = IndicatorBaseline.from_windows(
                unit.layout.names,
                np.vstack([r[0] for r in rows]),
                shaft_speed_hz=[r[1] for r in rows],
            )
            plan: list[tuple[str, float]] = []
            for fault in faults:
                if fault == "healthy":
                    plan += [("healthy", 0.0)] * healthy_windows
                else:
                    plan += [(fault, s) for s in sev for _ in range(windows_per_severity)]
            for fault, severity in plan:
                bearing = "de" if rng.random() < 0.5 else "nde"
                x, speed = unit.run(point, fault, severity, bearing)
                cases.append(
                    SimulatedCase(
                        unit_id=f"{asset_id}#{seed}",
                        asset_id=asset_id,
                        regime=point.label,
                        fault=fault,
                        severity=severity,
                        names=unit.layout.names,
                        values=x,
                        shaft_speed_hz=speed,
                        baseline=baseline,
                        defect_orders=unit.orders,
                        faulty_bearing=bearing if fault in BEARING_FAULTS else None,
                    )
                )
    return cases


class _Clock:
    """Hands out distinct window times, so every window draws its own random streams."""

    def __init__(self) -> None:
        self.count = 0

    def tick(self) -> tuple[datetime, int]:
        self.count += 1
        return _START + timedelta(hours=self.count), self.count


class _Unit:
    """One simulated unit: its asset, extractor and the scatter of its operating point."""

    def __init__(
        self,
        asset: AssetConfig,
        seed: int,
        rng: np.random.Generator,
        clock: _Clock,
        speed_spread: float,
    ) -> None:
        self.asset = asset
        self.seed = seed
        self.rng = rng
        self.clock = clock
        self.speed_spread = speed_spread
        self.extractor = Extractor(asset)
        self.layout = self.extractor.layout
        self.orders = defect_orders(asset)

    def run(
        self, point: OperatingPoint, fault: str, severity: float, bearing: str
    ) -> tuple[NDArray, float]:
        """Indicator vector (layout order, NaN for missing) and reported shaft speed (Hz)."""
        t, sequence = self.clock.tick()
        rng = self.rng
        duty = DutyPoint(
            speed_reference_rpm=point.speed_rpm * (1.0 + rng.uniform(-1, 1) * self.speed_spread),
            fluid_temperature_c=point.fluid_temperature_c + 0.5 * rng.standard_normal(),
            supply_pressure_kpa=point.supply_pressure_kpa + 1.0 * rng.standard_normal(),
        )
        sim = PumpSimulator(
            self.asset,
            _scenario(fault, severity, t, bearing),
            seed=self.seed,
            duty=ConstantDuty(point=duty),
        )
        message = self.extractor.extract(
            sim.window(t), gateway_id=_GATEWAY, site=SALTBUSH_SITE_ID, sequence=sequence
        )
        by_name = message.values_by_name(self.layout)
        x = np.array([np.nan if v is None else v for v in by_name.values()], dtype=float)
        speed = message.operating.shaft_speed_hz
        return x, (math.nan if speed is None else float(speed))


def cases_table(cases: Sequence[SimulatedCase]) -> DiagnosisTable:
    """The classifier's table (feature names, X, y, regime, unit id) of simulated cases."""
    if not cases:
        raise ValueError("cases_table needs at least one case")
    names = cases[0].names
    if any(c.names != names for c in cases):
        raise ValueError("cases_table: all cases must share one indicator layout")
    X = np.vstack([c.values for c in cases])
    median = np.vstack([c.baseline.aligned(names)[0] for c in cases])
    base_speed = np.array(
        [
            math.nan if c.baseline.shaft_speed_hz is None else c.baseline.shaft_speed_hz
            for c in cases
        ]
    )
    feature_names, F = diagnostic_features(
        names,
        X,
        median,
        shaft_speed_hz=np.array([c.shaft_speed_hz for c in cases]),
        baseline_shaft_speed_hz=base_speed,
    )
    return DiagnosisTable(
        feature_names,
        F,
        np.array([c.fault for c in cases]),
        np.array([c.regime for c in cases]),
        np.array([c.unit_id for c in cases]),
    )


def simulated_training_table(
    *,
    seed: int = 2026,
    asset_ids: Sequence[str] = SALTBUSH_ASSET_IDS[:4],
    points: Sequence[OperatingPoint] = TRAINING_POINTS,
    severities: Sequence[float] = (0.2, 0.4, 0.7, 1.0),
    baseline_windows: int = 6,
    healthy_windows: int = 3,
    windows_per_severity: int = 1,
) -> DiagnosisTable:
    """A reproducible training table from simulated units (see :func:`simulate_cases`).

    With the defaults: 4 units x 3 operating points x (3 healthy + 8 faults x 4 severities) =
    420 rows, from 492 simulated windows (about 30 s of CPU time on the project machine).
    """
    return cases_table(
        simulate_cases(
            seed=seed,
            asset_ids=asset_ids,
            points=points,
            severities=severities,
            baseline_windows=baseline_windows,
            healthy_windows=healthy_windows,
            windows_per_severity=windows_per_severity,
        )
    )


def history_training_table(
    names: Sequence[str],
    vectors: ArrayLike,
    timestamps: Sequence[datetime],
    events: Sequence[MaintenanceEvent],
    *,
    baseline: IndicatorBaseline | Sequence[IndicatorBaseline],
    unit_id: str,
    shaft_speed_hz: ArrayLike | None = None,
    regime: Sequence[str] | None = None,
    lookback: timedelta = timedelta(days=14),
    settle: timedelta = timedelta(days=1),
    healthy_span: timedelta = timedelta(days=14),
) -> DiagnosisTable:
    """Training rows from one asset's own history, labelled by its maintenance events.

    Parameters
    ----------
    names : sequence of str
        Indicator names of the columns of ``vectors`` (the layout's names).
    vectors : array_like of shape (n_windows, n_indicators)
        Indicator values per window; NaN for missing.
    timestamps : sequence of datetime
        Window starts (timezone-aware).
    events : sequence of MaintenanceEvent
        The asset's maintenance events (see
        :func:`prognosis_service.diagnosis.label_maintenance_history` for how they label).
    baseline : IndicatorBaseline or sequence of IndicatorBaseline
        The asset's healthy baseline, one for all windows or one per window (its regime's).
    unit_id : str
        The asset, for grouped splits.
    shaft_speed_hz : array_like of shape (n_windows,), optional
        Shaft speed of each window, Hz.
    regime : sequence of str, optional
        Regime label of each window; default ``"unknown"``.
    lookback, settle, healthy_span : timedelta
        As in ``label_maintenance_history``.

    Returns
    -------
    DiagnosisTable
        Only the labelled windows; empty (zero rows) when no event labels any window.
    """
    names = tuple(names)
    X = np.asarray(vectors, dtype=float)
    if X.ndim != 2 or X.shape != (len(timestamps), len(names)):
        raise ValueError(
            f"vectors must have shape ({len(timestamps)}, {len(names)}) to match timestamps and "
            f"names; got {X.shape}"
        )
    n = X.shape[0]
    baselines = [baseline] * n if isinstance(baseline, IndicatorBaseline) else list(baseline)
    if len(baselines) != n:
        raise ValueError(
            f"baseline must be one IndicatorBaseline or {n} of them; got {len(baselines)}"
        )
    labels = label_maintenance_history(
        timestamps, events, lookback=lookback, settle=settle, healthy_span=healthy_span
    )
    keep = np.array([lab is not None for lab in labels], dtype=bool)
    median = np.vstack([b.aligned(names)[0] for b in baselines]) if n else np.zeros((0, len(names)))
    base_speed = np.array(
        [math.nan if b.shaft_speed_hz is None else b.shaft_speed_hz for b in baselines]
    )
    speed = None if shaft_speed_hz is None else np.asarray(shaft_speed_hz, dtype=float)
    feature_names, F = diagnostic_features(
        names, X, median, shaft_speed_hz=speed, baseline_shaft_speed_hz=base_speed
    )
    regimes = np.array(list(regime) if regime is not None else ["unknown"] * n, dtype=str)
    if regimes.shape != (n,):
        raise ValueError(f"regime must have {n} entries; got {regimes.shape[0]}")
    return DiagnosisTable(
        feature_names,
        F[keep],
        np.array([str(lab) for lab in labels[keep]], dtype=str),
        regimes[keep],
        np.full(int(keep.sum()), unit_id),
    )
