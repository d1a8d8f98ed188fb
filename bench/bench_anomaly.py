"""False alarms and detection delay of the assessment's anomaly score (a benchmark, not a test).

Data: simulated Saltbush Flats pumps (the pump simulator fed through the gateway's extractor),
one window per hour, every channel of the pump (0.25 s windows of the two accelerometers, both
pressures and the motor current; 1 s of the 10 Hz bearing temperature, which the extractor's
quality check needs), so each window carries the extractor's full indicator set, its operating
point (shaft speed, load) and its channels' quality flags. The windows are handed to the
assessment as :class:`~prognosis_service.assessment.windows.Window` objects, values packed to
float32 as the store keeps them. The simulator's own duty profile moves speed and load through
the day and the seasons, so the healthy data cross operating regimes and fluid temperatures.

Model: the assessment's own scoring path. :func:`~prognosis_service.assessment.baseline.
fit_baseline` with the defaults of :class:`~prognosis_service.assessment.assessor.
AssessmentConfig` (speed × load bands, minimum windows per regime, α) is fitted on each pump's
first 30 days (healthy, windows the assessment excludes left out); every later window is scored
with :meth:`~prognosis_service.assessment.baseline.FittedBaseline.score`: Hotelling's T² of the
health-index vector of :data:`~prognosis_service.assessment.baseline.ASSESSMENT_FAILURE_MODES`
(bearing from the high-band r.m.s., imbalance 1×, misalignment 2×, cavitation from the high-band
r.m.s. and the suction pressure, impeller wear from the discharge pressure and vane pass).

Alarm rule: a window is anomalous when its anomaly score exceeds its control limit. An alarm is
raised when at least 4 of the last 6 windows (hours) are anomalous; it clears when that no
longer holds. A false alarm is a raised alarm on a healthy pump; the rate is raised alarms /
scored asset-years. Windows the assessment excludes (quality flags, no operating point) or the
score refuses (indicators not computed, no baseline in the regime, a shaft speed outside the
speeds the baseline was learned at) give no verdict and count as not anomalous; their share is
stated. The baseline matures and learns windows at new speeds as the assessor's does
(while no degradation is detected: refitted on the windows so far each time as many have been
scored as it holds, up to ``mature_windows``; ``extend_windows`` windows at new speeds at a
time). The single-window rule (any anomalous window raises an alarm) is given for comparison,
and so is the false-alarm rate when the score is fitted as the assessor fits it in service: on
its first ``baseline_windows`` usable windows, not 30 days, then matured.

Detection delay: pumps of the healthy set get a fault right after their baseline period (same
pump, same seed, so the baseline is the same healthy data); the delay is the days from fault
onset to the first raised alarm, searched up to a cap. The simulator's bearing defects and
imbalance start at a severity that is already visible.

Comparison rows (labelled so): the previous model of this benchmark,
:class:`~prognosis_service.health.RegimeBaseline` over 12 vibration indicators only (3 speed
bands over the drive's 1,150–1,780 rpm × 2 load bands, T² per regime, α = 0.01), on the same
windows with the same rule. They cost no extra simulation except that a fault run goes on until
both models have alarmed (or the cap).

Run: ``.venv/bin/python -m bench anomaly``.
"""

from __future__ import annotations

import uuid
from collections import Counter
from collections.abc import Callable
from dataclasses import dataclass
from datetime import datetime, timedelta

import numpy as np
from numpy.typing import NDArray

from bench._pumps import IndicatorSeries, simulate_indicators
from bench.harness import Figure, Report, Target
from edge_agent.simulator import DEMO_START, FaultScenario, draw_life_days, saltbush_asset
from prognosis_service.assessment.assessor import AssessmentConfig
from prognosis_service.assessment.baseline import OUTSIDE_SPEED_RANGE, FittedBaseline
from prognosis_service.assessment.windows import Window
from prognosis_service.health import NotEnoughDataError, RegimeBaseline, RegimeBinning

__all__ = ["CHANNELS", "VIBRATION_INDICATORS", "alarm_starts", "k_of_n", "run", "windows_of"]

CHANNELS: tuple[str, ...] = tuple(c.name for c in saltbush_asset("MAL-P1").channels)
"""Every channel of a Saltbush Flats pump, so the extractor gives its full indicator set."""
# 10 Hz × 0.25 s is fewer samples than the extractor's quality check accepts: the channel would
# be flagged "dropout" and the assessment would exclude every window. 1 s gives 10 samples.
CHANNEL_WINDOW_S = {"bearing_temp": 1.0}
CONFIG = AssessmentConfig()  # the assessment's defaults: regimes, min_regime_windows, alpha
VIBRATION_INDICATORS: tuple[str, ...] = tuple(
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


def windows_of(series: IndicatorSeries) -> list[Window]:
    """The series as the service's stored windows (values packed to float32 as it stores them)."""
    names = tuple(series.names)
    units = tuple(series.units) if series.units else ("",) * len(names)
    values = series.values.astype("<f4").astype(float)
    out = []
    for i, t in enumerate(series.times):
        speed, load = series.operating[i]
        out.append(
            Window(
                row_id=i + 1,
                message_id=uuid.UUID(int=i + 1),
                window_start=t,
                shaft_speed_hz=float(speed) if np.isfinite(speed) else None,
                load_fraction=float(load) if np.isfinite(load) else None,
                quality=series.quality[i] if series.quality else None,
                names=names,
                units=units,
                values=values[i],
            )
        )
    return out


def _service_verdicts(
    fitted: FittedBaseline,
    windows: list[Window],
    reasons: Counter[str] | None = None,
    *,
    base: list[Window] | None = None,
) -> NDArray:
    """Anomaly flag per window as the assessment scores it (no verdict counts as not anomalous).

    Windows the assessment excludes (quality flags, no operating point) are not scored; a
    scored window without a score (no baseline in its regime, indicators missing, a speed the
    baseline has not learned) has no verdict. Their reasons are counted into ``reasons``.

    With ``base`` (the windows ``fitted`` was fitted on), the baseline changes as the
    assessor's does. It matures (``_Run._grow_baseline``): each time as many windows have been
    scored since the last fit as the baseline holds, below ``mature_windows``, and fewer than
    ``detect_fraction`` of the last ``detect_windows`` verdicts are anomalous, it is refitted
    on every usable window so far but those at new speeds. And windows outside the learned
    speeds are learned into it (``_Run._extend_baseline``): once ``extend_windows`` of them wait
    (checked again every quarter of that) and no degradation is detected, the baseline is
    refitted on its windows plus every window learned so far. The rest is scored against the
    new baseline. The waiting windows themselves stay without a verdict here: the assessor
    rescores them but sends no alert readings for them, so they can raise no alarm.
    """
    anomaly = np.zeros(len(windows), dtype=bool)
    scored: list[bool] = []
    learned: list[Window] = []
    pending: list[Window] = []
    since: list[Window] = []  # usable windows after the last fit, not at new speeds
    n_scored = 0  # of them, those with a score
    start = 0

    def share_anomalous() -> float:
        recent = scored[-CONFIG.detect_windows :]
        return float(np.mean(recent)) if recent else 0.0

    while start < len(windows):
        rest = range(start, len(windows))
        usable = [i for i in rest if windows[i].excluded_reason is None]
        verdicts = dict(zip(usable, fitted.score([windows[i] for i in usable]), strict=True))
        start = len(windows)
        for i in rest:
            sc = verdicts.get(i)
            if sc is None:
                if reasons is not None:
                    reasons[_reason_kind(windows[i].excluded_reason or "")] += 1
                continue
            refit = None
            if sc.anomaly_score is not None and sc.control_limit is not None:
                anomaly[i] = sc.anomaly_score > sc.control_limit
                scored.append(bool(anomaly[i]))
                if base is None:
                    continue
                since.append(windows[i])
                n_scored += 1
                if CONFIG.growth_due(len(base), n_scored):
                    n_scored = 0
                    if share_anomalous() < CONFIG.detect_fraction:
                        try:
                            refit = CONFIG.fit_baseline([*base, *since, *learned])
                        except (NotEnoughDataError, ValueError):
                            pass
                        else:
                            base, since = [*base, *since], []
            else:
                if reasons is not None:
                    reasons[_reason_kind(sc.reason or "")] += 1
                if base is None:
                    continue
                if not (sc.reason or "").startswith(OUTSIDE_SPEED_RANGE):
                    since.append(windows[i])
                    continue
                pending.append(windows[i])
                if not CONFIG.extension_due(len(pending), share_anomalous()):
                    continue
                try:
                    refit = CONFIG.fit_baseline([*base, *learned, *pending])
                except (NotEnoughDataError, ValueError):
                    continue
                learned, pending = [*learned, *pending], []
            if refit is not None:
                fitted = refit
                start = i + 1
                break
    return anomaly


def _reason_kind(reason: str) -> str:
    """A no-verdict reason without its per-window details (channel names, regime number)."""
    return reason.split(":")[0].rstrip("0123456789 ")


def _fit_service(series: IndicatorSeries) -> tuple[FittedBaseline, list[Window]]:
    """The assessment's baseline on the usable windows, and those windows."""
    usable = [w for w in windows_of(series) if w.excluded_reason is None]
    return CONFIG.fit_baseline(usable), usable


def _fit_as_assessor(series: IndicatorSeries) -> tuple[FittedBaseline, list[Window]]:
    """The baseline the assessor itself would fit: its first ``baseline_windows`` usable windows,
    lengthened by a quarter of that while a regime lacks windows (as ``_Run._fit_baseline``).

    Returns the fit and the windows it used.
    """
    usable = [w for w in windows_of(series) if w.excluded_reason is None]
    target = CONFIG.baseline_windows
    while True:
        try:
            return CONFIG.fit_baseline(usable[:target]), usable[:target]
        except (NotEnoughDataError, ValueError):
            if target >= len(usable):
                raise
            target += max(1, CONFIG.baseline_windows // 4)


def _vibration(series: IndicatorSeries) -> tuple[NDArray, NDArray]:
    """(values of the vibration indicators, operating point) for the comparison model."""
    cols = [series.names.index(n) for n in VIBRATION_INDICATORS]
    return series.values[:, cols], series.operating


def _regime_verdicts(model: RegimeBaseline, series: IndicatorSeries) -> tuple[NDArray, NDArray]:
    """(anomaly flag, has a verdict) per window; rows with missing values get no verdict."""
    values, operating = _vibration(series)
    ok = np.isfinite(values).all(axis=1) & np.isfinite(operating).all(axis=1)
    anomaly = np.zeros(len(series.times), dtype=bool)
    verdict = np.zeros(len(series.times), dtype=bool)
    if ok.any():
        status = model.assess(values[ok], operating[ok]).status
        anomaly[ok] = status == "anomaly"
        verdict[ok] = status != "not_enough_data"
    return anomaly, verdict


def _hourly(start: datetime, hours: int) -> list[datetime]:
    return [start + timedelta(hours=k * WINDOW_H, minutes=3) for k in range(hours)]


def _fit_regime(series: IndicatorSeries) -> RegimeBaseline:
    values, operating = _vibration(series)
    ok = np.isfinite(values).all(axis=1) & np.isfinite(operating).all(axis=1)
    return RegimeBaseline(binning=RegimeBinning(speed_range_hz=SPEED_RANGE_HZ)).fit(
        values[ok], operating[ok]
    )


def _delay(times: list[datetime], flags: NDArray, onset: datetime) -> float | None:
    """Days from ``onset`` to the first window where the k-of-n alarm is raised (None: none)."""
    raised = np.flatnonzero(k_of_n(flags, K, N))
    return None if raised.size == 0 else (times[raised[0]] - onset) / timedelta(days=1)


def _delay_figure(
    fault: str, values: list[float | None], rule_text: str, cap_days: int, prefix: str = ""
) -> Figure:
    found = [v for v in values if v is not None]
    listed = ", ".join("not within cap" if v is None else f"{v:.2f} d" for v in values)
    return Figure(
        name=f"{prefix}detection delay, {fault.replace('_', ' ')} (median)",
        value=float(np.median(found)) if found else float("nan"),
        unit="d",
        notes=f"days from fault onset to the first raised alarm ({rule_text}; the earliest "
        f"possible is {K - 1} h after onset, 0.13 d); {len(found)} of {len(values)} detected "
        f"within {cap_days} d: {listed}",
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
    no_verdict: Counter[str] = Counter()
    alarms_rule = 0
    alarms_single = 0
    short_rule = 0
    short_flagged = 0
    short_used: list[int] = []
    cmp_flagged = 0
    cmp_no_verdict = 0
    cmp_rule = 0
    cmp_single = 0
    per_pump: list[str] = []
    delays: dict[str, list[float | None]] = {f: [] for f in faults}
    cmp_delays: dict[str, list[float | None]] = {f: [] for f in faults}
    for pump in pumps:
        hours = (baseline_days + scored_days) * 24
        healthy = simulate_indicators(
            pump.asset_id, FaultScenario(), _hourly(pump.start, hours), seed=pump.seed,
            channels=CHANNELS, channel_window_s=CHANNEL_WINDOW_S,
            progress=tick(f"{pump.asset_id} healthy"),
        )  # fmt: skip
        done += hours
        n_base = baseline_days * 24
        base, scored = healthy.head(n_base), healthy.tail(n_base)
        fitted, base_windows = _fit_service(base)
        anomaly = _service_verdicts(fitted, windows_of(scored), no_verdict, base=base_windows)
        rule = alarm_starts(anomaly, K, N).size
        single = alarm_starts(anomaly, 1, 1).size
        scored_h += anomaly.size
        flagged += int(anomaly.sum())
        alarms_rule += rule
        alarms_single += single
        short, short_base = _fit_as_assessor(base)
        # the assessor goes on from its baseline's last window; alarms count from day 30 on
        after = windows_of(healthy)[short_base[-1].row_id :]  # row ids count from 1
        short_anomaly = _service_verdicts(short, after, base=short_base)[-len(scored.times) :]
        short_rule += alarm_starts(short_anomaly, K, N).size
        short_flagged += int(short_anomaly.sum())
        short_used.append(len(short_base))
        model = _fit_regime(base)
        cmp_anomaly, cmp_verdict = _regime_verdicts(model, scored)
        cmp_flagged += int(cmp_anomaly.sum())
        cmp_no_verdict += int((~cmp_verdict).sum())
        cmp_rule += alarm_starts(cmp_anomaly, K, N).size
        cmp_single += alarm_starts(cmp_anomaly, 1, 1).size
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

            # Stop once both the service's score and the comparison model have alarmed.
            def alarmed(
                _k: int,
                partial: IndicatorSeries,
                f: FittedBaseline = fitted,
                b: list[Window] = base_windows,
                m: RegimeBaseline = model,
            ) -> bool:
                if not k_of_n(_service_verdicts(f, windows_of(partial), base=b), K, N).any():
                    return False
                return bool(k_of_n(_regime_verdicts(m, partial)[0], K, N).any())

            cap = cap_days * 24
            series = simulate_indicators(
                pump.asset_id, scenario, _hourly(onset, cap), seed=pump.seed, channels=CHANNELS,
                channel_window_s=CHANNEL_WINDOW_S, stop=alarmed, stop_every=12,
                progress=tick(f"{pump.asset_id} {fault}"),
            )  # fmt: skip
            done += cap
            flags = _service_verdicts(fitted, windows_of(series), base=base_windows)
            delays[fault].append(_delay(series.times, flags, onset))
            cmp_delays[fault].append(
                _delay(series.times, _regime_verdicts(model, series)[0], onset)
            )
    years = scored_h * WINDOW_H / HOURS_PER_YEAR
    rule_text = f"alarm when ≥ {K} of the last {N} hourly windows are anomalous"
    n_none = sum(no_verdict.values())
    why = "; ".join(f"{100 * c / max(scored_h, 1):.2f} % {r}" for r, c in no_verdict.most_common())
    cmp = "comparison, RegimeBaseline on 12 vibration indicators"
    figures = [
        Figure(
            name="healthy data scored",
            value=years,
            unit="asset-years",
            digits=3,
            notes=f"{len(pumps)} healthy pumps, one window per hour, the extractor's full "
            f"indicator set; baseline = the assessment's fit_baseline on each pump's first "
            f"{baseline_days} d ({CONFIG.n_speed_bands} speed × {CONFIG.n_load_bands} load "
            f"bands, ≥ {CONFIG.min_regime_windows} windows per regime, α = {CONFIG.alpha:g}); "
            + "; ".join(per_pump),
        ),
        Figure(
            name=f"false alarms on healthy pumps ({K}-of-{N} rule)",
            value=alarms_rule / years,
            unit="per asset-year",
            target=_RARE,
            notes=f"{alarms_rule} alarms raised in {years:.2f} asset-years; {rule_text} "
            "(anomalous: the assessment's anomaly score over its control limit)",
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
            notes=f"per-window false-alarm probability α = {100 * CONFIG.alpha:g} % by design "
            "of the T² limit",
        ),
        Figure(
            name="healthy windows without a verdict",
            value=100.0 * n_none / max(scored_h, 1),
            unit="%",
            notes=f"{n_none} of {scored_h} windows excluded or refused by the score"
            + (f" ({why})" if why else "")
            + "; these can raise no alarm",
        ),
    ]
    for fault, values in delays.items():
        figures.append(_delay_figure(fault, values, rule_text, cap_days))
    figures.append(
        Figure(
            name=f"false alarms, the assessor's own baseline length ({K}-of-{N} rule)",
            value=short_rule / years,
            unit="per asset-year",
            notes=f"{short_rule} alarms; the same score fitted as the assessor fits it, on the "
            f"first {CONFIG.baseline_windows} usable windows (lengthened while a regime lacks "
            f"windows; used {', '.join(map(str, short_used))}) and maturing to "
            f"{CONFIG.mature_windows} as the assessor's does, run on from its last window; "
            "alarms counted over the same days as above; "
            f"{100 * short_flagged / max(scored_h, 1):.2f} % windows anomalous",
        )
    )
    figures += [
        Figure(
            name=f"{cmp}: false alarms ({K}-of-{N} rule)",
            value=cmp_rule / years,
            unit="per asset-year",
            notes=f"{cmp_rule} alarms; the previous model of this benchmark (3 speed × 2 load "
            f"bands over the drive's range, T² per regime, no pressures) on the same windows",
        ),
        Figure(
            name=f"{cmp}: false alarms (single-window rule)",
            value=cmp_single / years,
            unit="per asset-year",
            notes=f"{cmp_single} alarms; {100 * cmp_flagged / max(scored_h, 1):.2f} % windows "
            f"anomalous, {100 * cmp_no_verdict / max(scored_h, 1):.2f} % without a verdict",
            digits=0,
        ),
    ]
    for fault, values in cmp_delays.items():
        figures.append(_delay_figure(fault, values, rule_text, cap_days, prefix=f"{cmp}: "))
    return figures


if __name__ == "__main__":
    from bench.__main__ import main

    raise SystemExit(main(["anomaly"]))
