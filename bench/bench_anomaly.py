"""False alarms and detection delay of the per-regime anomaly baseline (a benchmark, not a test).

Data: simulated Saltbush Flats pumps (the pump simulator fed through the gateway's extractor),
one window per hour, 0.25 s windows of the two accelerometers and the motor current (the
accelerometer indicators below, the operating regime from the extractor's shaft speed and load).
The simulator's own duty profile moves speed and load through the day and the seasons, so the
healthy data cross operating regimes and fluid temperatures.

Model: :class:`~prognosis_service.health.RegimeBaseline` (regimes = 3 speed bands over the
drive's 1,150–1,780 rpm × 2 load bands, Hotelling T² per regime, α = 0.01 per window), fitted on
each pump's first 30 days (healthy), then scoring every later window.

Alarm rule: an alarm is raised when at least 4 of the last 6 windows (hours) are "anomaly"; it
clears when that no longer holds. A false alarm is a raised alarm on a healthy pump; the rate is
raised alarms / scored asset-years. Windows whose regime has no baseline ("not_enough_data") or
whose indicators are missing give no verdict and count as not anomalous; their share is stated.
The single-window rule (any "anomaly" window raises an alarm) is given for comparison.

Detection delay: pumps of the healthy set get a fault right after their baseline period (same
pump, same seed, so the baseline is the same healthy data); the delay is the days from fault
onset to the first raised alarm, searched up to a cap. The score uses vibration indicators only
(no pressures), so faults that show first in the pressures (cavitation) are expected to be slow;
the simulator's bearing defects and imbalance start at a severity that is already visible.

Run: ``.venv/bin/python -m bench anomaly``.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from datetime import datetime, timedelta

import numpy as np
from numpy.typing import NDArray

from bench._pumps import IndicatorSeries, simulate_indicators
from bench.harness import Figure, Report, Target
from edge_agent.simulator import DEMO_START, FaultScenario, draw_life_days
from prognosis_service.health import RegimeBaseline, RegimeBinning

__all__ = ["INDICATORS", "alarm_starts", "k_of_n", "run"]

INDICATORS: tuple[str, ...] = tuple(
    f"{channel}.{quantity}"
    for channel in ("de_accel", "nde_accel")
    for quantity in ("rms", "kurtosis", "velocity_rms", "env_bpfo", "env_bpfi", "high_band_rms")
)
K, N = 4, 6  # alarm: at least K "anomaly" verdicts among the last N windows
WINDOW_H = 1.0
BASELINE_DAYS = 30
HOURS_PER_YEAR = 24 * 365.25
SPEED_RANGE_HZ = (1150.0 / 60.0, 1780.0 / 60.0)
FAULTS = ("outer_race", "inner_race", "imbalance", "impeller_wear", "cavitation")

_RARE = Target(text='"rare"; read here as ≤ 1 per asset-year', op="<=", value=1.0)


def k_of_n(flags: NDArray, k: int, n: int) -> NDArray:
    """True at window ``i`` when at least ``k`` of windows ``i−n+1 … i`` are flagged."""
    f = np.asarray(flags, dtype=int)
    counts = np.convolve(f, np.ones(n, dtype=int))[: f.size]
    return counts >= k


def alarm_starts(flags: NDArray, k: int, n: int) -> NDArray:
    """Indices where the k-of-n alarm is raised (rises from clear to raised)."""
    on = k_of_n(flags, k, n)
    return np.flatnonzero(on & ~np.concatenate(([False], on[:-1])))


@dataclass(frozen=True)
class _Pump:
    asset_id: str
    seed: int
    start: datetime


def _verdicts(model: RegimeBaseline, series: IndicatorSeries) -> tuple[NDArray, NDArray]:
    """(anomaly flag, has a verdict) per window; rows with missing values get no verdict."""
    ok = np.isfinite(series.values).all(axis=1) & np.isfinite(series.operating).all(axis=1)
    anomaly = np.zeros(len(series.times), dtype=bool)
    verdict = np.zeros(len(series.times), dtype=bool)
    if ok.any():
        status = model.assess(series.values[ok], series.operating[ok]).status
        anomaly[ok] = status == "anomaly"
        verdict[ok] = status != "not_enough_data"
    return anomaly, verdict


def _hourly(start: datetime, hours: int) -> list[datetime]:
    return [start + timedelta(hours=k * WINDOW_H, minutes=3) for k in range(hours)]


def _fit_baseline(series: IndicatorSeries) -> RegimeBaseline:
    ok = np.isfinite(series.values).all(axis=1) & np.isfinite(series.operating).all(axis=1)
    return RegimeBaseline(binning=RegimeBinning(speed_range_hz=SPEED_RANGE_HZ)).fit(
        series.values[ok], series.operating[ok]
    )


def run(*, quick: bool = False, report: Report | None = None) -> list[Figure]:
    """Measure false alarms per asset-year on healthy pumps and detection delay per fault."""
    faults: tuple[str, ...]
    if quick:
        pumps = [_Pump("MAL-P1", 11, DEMO_START)]
        baseline_days, scored_days, cap_days, faults = 10, 5, 3, ("outer_race", "impeller_wear")
    else:
        # Staggered starts so that, together, the scored periods cover every season.
        pumps = [
            _Pump("MAL-P1", 11, DEMO_START),
            _Pump("GIB-P2", 12, DEMO_START + timedelta(days=122)),
            _Pump("COO-P3", 13, DEMO_START + timedelta(days=244)),
        ]
        baseline_days, scored_days, cap_days, faults = BASELINE_DAYS, 120, 21, FAULTS
    total = len(pumps) * ((baseline_days + scored_days) * 24 + len(faults) * cap_days * 24)
    done = 0

    def tick(what: str) -> Callable[[int], None]:
        base = done

        def step(k: int) -> None:
            if report is not None:
                report(base + k, total, what)

        return step

    rng = np.random.default_rng(99)
    scored_h = 0
    flagged = 0
    no_verdict = 0
    alarms_rule = 0
    alarms_single = 0
    per_pump: list[str] = []
    delays: dict[str, list[float | None]] = {f: [] for f in faults}
    for pump in pumps:
        hours = (baseline_days + scored_days) * 24
        healthy = simulate_indicators(
            pump.asset_id, FaultScenario(), _hourly(pump.start, hours), seed=pump.seed,
            indicators=INDICATORS, progress=tick(f"{pump.asset_id} healthy"),
        )  # fmt: skip
        done += hours
        n_base = baseline_days * 24
        base = IndicatorSeries(
            times=healthy.times[:n_base], names=healthy.names, values=healthy.values[:n_base],
            operating=healthy.operating[:n_base], severity=healthy.severity[:n_base],
        )  # fmt: skip
        scored = IndicatorSeries(
            times=healthy.times[n_base:], names=healthy.names, values=healthy.values[n_base:],
            operating=healthy.operating[n_base:], severity=healthy.severity[n_base:],
        )  # fmt: skip
        model = _fit_baseline(base)
        anomaly, verdict = _verdicts(model, scored)
        rule = alarm_starts(anomaly, K, N).size
        single = alarm_starts(anomaly, 1, 1).size
        scored_h += anomaly.size
        flagged += int(anomaly.sum())
        no_verdict += int((~verdict).sum())
        alarms_rule += rule
        alarms_single += single
        per_pump.append(
            f"{pump.asset_id} from {scored.times[0]:%d %b}: {rule} raised, "
            f"{100 * anomaly.mean():.1f} % windows anomalous"
        )
        onset = pump.start + timedelta(days=baseline_days, minutes=30)
        for fault in faults:
            scenario = FaultScenario(
                fault=fault,  # type: ignore[arg-type]
                onset=onset,
                life_days=draw_life_days(rng, median_days=90.0, dispersion=0.2),
            )

            def alarmed(_k: int, partial: IndicatorSeries, m: RegimeBaseline = model) -> bool:
                flags, _ = _verdicts(m, partial)
                return bool(k_of_n(flags, K, N).any())

            cap = cap_days * 24
            series = simulate_indicators(
                pump.asset_id, scenario, _hourly(onset, cap), seed=pump.seed, indicators=INDICATORS,
                stop=alarmed, stop_every=12, progress=tick(f"{pump.asset_id} {fault}"),
            )  # fmt: skip
            done += cap
            flags, _ = _verdicts(model, series)
            raised = np.flatnonzero(k_of_n(flags, K, N))
            delays[fault].append(
                None if raised.size == 0 else (series.times[raised[0]] - onset) / timedelta(days=1)
            )
    years = scored_h * WINDOW_H / HOURS_PER_YEAR
    rule_text = f"alarm when ≥ {K} of the last {N} hourly windows are anomalous"
    figures = [
        Figure(
            name="healthy data scored",
            value=years,
            unit="asset-years",
            digits=3,
            notes=f"{len(pumps)} healthy pumps, one window per hour, baseline = each pump's "
            f"first {baseline_days} d; indicators {', '.join(INDICATORS)}; " + "; ".join(per_pump),
        ),
        Figure(
            name=f"false alarms on healthy pumps ({K}-of-{N} rule)",
            value=alarms_rule / years,
            unit="per asset-year",
            target=_RARE,
            notes=f"{alarms_rule} alarms raised in {years:.2f} asset-years; {rule_text}",
        ),
        Figure(
            name="false alarms on healthy pumps (single-window rule)",
            value=alarms_single / years,
            unit="per asset-year",
            notes=f"{alarms_single} alarms; any anomalous window raises one (for comparison)",
            digits=0,
        ),
        Figure(
            name="anomalous windows on healthy pumps",
            value=100.0 * flagged / max(scored_h, 1),
            unit="%",
            notes="per-window false-alarm probability α = 1 % by design of the T² limit",
        ),
        Figure(
            name="healthy windows without a verdict",
            value=100.0 * no_verdict / max(scored_h, 1),
            unit="%",
            notes="regime without baseline (fewer than 30 healthy windows) or missing values; "
            "these can raise no alarm",
        ),
    ]
    for fault, values in delays.items():
        found = [v for v in values if v is not None]
        listed = ", ".join("not within cap" if v is None else f"{v:.2f} d" for v in values)
        figures.append(
            Figure(
                name=f"detection delay, {fault.replace('_', ' ')} (median)",
                value=float(np.median(found)) if found else float("nan"),
                unit="d",
                notes=f"days from fault onset to the first raised alarm ({rule_text}; the "
                f"earliest possible is {K - 1} h after onset, 0.13 d); {len(found)} of "
                f"{len(values)} detected within {cap_days} d: {listed}",
            )
        )
    return figures


if __name__ == "__main__":
    from bench.__main__ import main

    raise SystemExit(main(["anomaly"]))
