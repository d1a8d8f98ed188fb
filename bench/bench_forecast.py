"""Forecast accuracy and cost of the degradation models (a benchmark: it measures, asserts nothing).

Fleets of run-to-failure histories are split into training units (the fleet prior is learned
from their complete histories) and held-out test units. Each test unit is forecast at
``tλ = tP + λ(tEoL − tP)`` for λ = 0.5 … 0.9 from the data observed up to ``tλ``, by

* the model chosen by evidence (``select_model`` over exponential and Wiener, fleet priors),
* the exponential model (Gebraeel et al. 2005) alone, the Wiener model alone,
* the naive baseline: a straight line through the last 20 daily points.

Scored with the service's own metrics: α-λ accuracy (α = 0.2, Saxena et al. 2010), the PHM08
penalty (Saxena et al. 2008; ``d`` in days, one observation per day playing the data set's
"cycle"), relative accuracy of the median and P10–P90 coverage. A unit with no forecast at some
λ (too few points, no significant trend, a model that does not apply) fails α-λ there; the other
metrics are over the forecasts made.

Fleets
    (a) ``exponential`` and ``wiener``: paths drawn from the models' own generative assumptions
    (unit-to-unit variation of the parameters, Brownian error, hourly paths observed daily; the
    end of life is the first hourly crossing of the threshold). (b) ``simulated pumps``: outer-race
    bearing defects on simulated Saltbush Flats pumps (the pump simulator + extractor), the
    health indicator being the daily median of ``de_accel.rms`` over its healthy level; the end of
    life is the simulator's failure time and the threshold the training units' median health
    indicator on their last day. ``tP`` is the fault onset (known in the simulation).

Cost
    Refit per message: ``select_model`` (two candidates) on 180 daily points, and on 4,320 hourly
    points. Forecast latency: refit plus the forecast summary (P10/P50/P90, failure probability
    within 1 d / 7 d / 30 d, latest maintenance time at 10 % risk); and from a stored fitted
    state (``from_state`` + the same summary).

Run: ``.venv/bin/python -m bench forecast`` (or ``python -m bench.bench_forecast``).
"""

from __future__ import annotations

import math
import time
from collections import Counter
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from datetime import timedelta
from typing import Any

import numpy as np
from numpy.typing import NDArray
from sklearn.base import clone

from bench.harness import Figure, Report, Target
from prognosis_service.prognosis import (
    ExponentialDegradation,
    FleetPrior,
    LinearTrendExtrapolation,
    NotEnoughDataError,
    WienerDegradation,
    alpha_lambda_accuracy,
    interval_coverage,
    phm08_penalty,
    relative_accuracy,
    select_model,
)

__all__ = ["Fleet", "Unit", "exponential_fleet", "run", "simulated_pump_fleet", "wiener_fleet"]

LAMBDAS = (0.5, 0.6, 0.7, 0.8, 0.9)
ALPHA = 0.2
DAY_H = 24.0
NAIVE_WINDOW_POINTS = 20

_ALPHA_LAMBDA_TARGET = Target(text="most units (> 50 %) at every λ = 0.5…0.9", op=">", value=50.0)
_COVERAGE_TARGET = Target(text="≈ 80 % (70–90 %)", op="between", value=70.0, upper=90.0)
_LATENCY_TARGET = Target(text="p99 ≤ 20 ms", op="<=", value=20.0)


@dataclass(frozen=True)
class Unit:
    """One run-to-failure history: daily observations before the end of life."""

    t: NDArray  # hours
    y: NDArray
    end_of_life_h: float
    prediction_start_h: float = 0.0


@dataclass(frozen=True)
class Fleet:
    """Training and test units with the threshold and model constants they share."""

    name: str
    description: str
    train: list[Unit]
    test: list[Unit]
    threshold: float
    offset: float = 0.0
    initial_level: float = 0.0


# -- fleets from the models' own assumptions -------------------------------------------------


def _daily_before_failure(
    path: NDArray, threshold: float, hours: int
) -> tuple[NDArray, NDArray, float] | None:
    crossed = np.flatnonzero(path >= threshold)
    if crossed.size == 0:
        return None
    eol = float(crossed[0] + 1)  # path[i] is the value at hour i + 1
    t = np.arange(DAY_H, eol, DAY_H)
    if t.size < 10:
        return None
    return t, path[t.astype(int) - 1], eol


def exponential_fleet(rng: np.random.Generator, n_units: int) -> list[Unit]:
    """``S(t) = exp(θ′ + β′t + σB(t))``, failure at ``S ≥ 1``.

    ``θ′ ~ N(ln 0.1, 0.15²)`` (a tenth of the threshold when new), ``β′ ~ N(ln 10 / 2400 h,
    (20 %)²)`` (a median life of about 100 days), ``σ² = 3.75·10⁻⁵`` per hour (a spread of about
    0.3 in the log-signal over a life). Illustrative values.
    """
    units: list[Unit] = []
    beta_mean = math.log(10.0) / 2400.0
    sigma = math.sqrt(3.75e-5)
    hours = 24 * 400
    while len(units) < n_units:
        theta = rng.normal(math.log(0.1), 0.15)
        beta = rng.normal(beta_mean, 0.2 * beta_mean)
        if beta <= 0.2 * beta_mean:
            continue
        t = np.arange(1.0, hours + 1.0)
        path = np.exp(theta + beta * t + np.cumsum(rng.normal(0.0, sigma, hours)))
        got = _daily_before_failure(path, 1.0, hours)
        if got is not None:
            units.append(Unit(t=got[0], y=got[1], end_of_life_h=got[2]))
    return units


def wiener_fleet(rng: np.random.Generator, n_units: int) -> list[Unit]:
    """``y(t) = 0.1 + μt + σB(t)``, failure at ``y ≥ 1``.

    ``μ ~ N(0.9 / 2400 h, (20 %)²)``, ``σ² = 4·10⁻⁶`` per hour (a spread of about 0.1 over a
    life). Illustrative values.
    """
    units: list[Unit] = []
    mu_mean = 0.9 / 2400.0
    sigma = math.sqrt(4e-6)
    hours = 24 * 400
    while len(units) < n_units:
        mu = rng.normal(mu_mean, 0.2 * mu_mean)
        if mu <= 0.2 * mu_mean:
            continue
        t = np.arange(1.0, hours + 1.0)
        path = 0.1 + mu * t + np.cumsum(rng.normal(0.0, sigma, hours))
        got = _daily_before_failure(path, 1.0, hours)
        if got is not None and np.all(got[1] > 0):
            units.append(Unit(t=got[0], y=got[1], end_of_life_h=got[2]))
    return units


# -- fleet from the pump simulator -----------------------------------------------------------


def simulated_pump_fleet(
    n_train: int,
    n_test: int,
    *,
    windows_per_day: int,
    seed: int = 7,
    report: Callable[[int, int], None] | None = None,
) -> Fleet:
    """Outer-race defects on simulated pumps; health indicator ``de_accel.rms`` / healthy level."""
    from bench._pumps import simulate_indicators
    from edge_agent.simulator import (
        DEMO_START,
        SALTBUSH_ASSET_IDS,
        FaultScenario,
        draw_life_days,
    )

    rng = np.random.default_rng(seed)
    histories: list[tuple[NDArray, NDArray, float]] = []
    n = n_train + n_test
    healthy_days = 3
    for i in range(n):
        asset_id = SALTBUSH_ASSET_IDS[i % len(SALTBUSH_ASSET_IDS)]
        onset = DEMO_START + timedelta(days=healthy_days)
        life_days = draw_life_days(rng, median_days=90.0, dispersion=0.2)
        scenario = FaultScenario(fault="outer_race", onset=onset, life_days=life_days)
        step = timedelta(hours=DAY_H / windows_per_day)
        n_windows = int((healthy_days + life_days) * windows_per_day)
        times = [DEMO_START + k * step + timedelta(minutes=7) for k in range(n_windows)]
        series = simulate_indicators(
            asset_id,
            scenario,
            times,
            seed=1000 + i,
            channels=("de_accel",),
            indicators=["de_accel.rms"],
        )
        rms = series.column("de_accel.rms")
        hours = np.array([(t - onset) / timedelta(hours=1) for t in times])
        healthy = float(np.nanmedian(rms[hours < 0]))
        day = np.floor(hours / DAY_H).astype(int)
        days = np.arange(0, int(life_days))  # whole days after onset, all before failure
        hi = np.array([np.nanmedian(rms[day == d]) / healthy for d in days])
        keep = np.isfinite(hi)
        histories.append(((days[keep] + 1) * DAY_H, hi[keep], life_days * DAY_H))
        if report is not None:
            report(i + 1, n)
    threshold = float(np.median([h[1][-1] for h in histories[:n_train]]))
    units = [Unit(t=t, y=y, end_of_life_h=eol) for t, y, eol in histories]
    return Fleet(
        name="simulated pumps",
        description=(
            f"{n_train} training + {n_test} test outer-race defects on simulated pumps, "
            f"median life 90 d; daily median of {windows_per_day} windows of de_accel.rms "
            f"over the healthy level; threshold {threshold:.2f} (training units' median on "
            "their last day)"
        ),
        train=units[:n_train],
        test=units[n_train:],
        threshold=threshold,
        initial_level=1.0,  # the health indicator is a ratio to the healthy level
    )


# -- forecasting and scoring -----------------------------------------------------------------

Forecaster = Callable[[NDArray, NDArray], tuple[float, float, float, str] | None]


def _quantiles(model: Any) -> tuple[float, float, float]:
    q10, q50, q90 = (float(v) for v in model.time_to_failure_quantiles((0.1, 0.5, 0.9)))
    return q10, q50, q90


def _forecasters(fleet: Fleet, prior: FleetPrior) -> dict[str, Forecaster]:
    exp = ExponentialDegradation(threshold=fleet.threshold, **prior.exponential_params())
    wie = WienerDegradation(threshold=fleet.threshold, **prior.wiener_params())
    naive = LinearTrendExtrapolation(threshold=fleet.threshold, window_points=NAIVE_WINDOW_POINTS)

    def evidence(t: NDArray, y: NDArray) -> tuple[float, float, float, str] | None:
        model, _ = select_model([exp, wie], t, y)
        return (*_quantiles(model), type(model).__name__)

    def alone(est: Any) -> Forecaster:
        def fit(t: NDArray, y: NDArray) -> tuple[float, float, float, str] | None:
            return (*_quantiles(clone(est).fit(t, y)), type(est).__name__)

        return fit

    return {
        "chosen by evidence": evidence,
        "exponential alone": alone(exp),
        "Wiener alone": alone(wie),
        "naive linear trend": alone(naive),
    }


@dataclass
class _Scores:
    made: int = 0
    asked: int = 0
    passed: NDArray | None = None  # (units, λ) bool
    rul_true: list[float] | None = None
    p10: list[float] | None = None
    p50: list[float] | None = None
    p90: list[float] | None = None
    chose_exponential: int = 0
    missing: Counter[str] = field(default_factory=Counter)


def _evaluate(
    fleet: Fleet, report: Callable[[float, str], None] | None = None
) -> dict[str, _Scores]:
    prior = FleetPrior(offset=fleet.offset, initial_level=fleet.initial_level).fit(
        [(u.t, u.y) for u in fleet.train]
    )
    methods = _forecasters(fleet, prior)
    scores = {
        m: _Scores(
            passed=np.zeros((len(fleet.test), len(LAMBDAS)), bool),
            rul_true=[],
            p10=[],
            p50=[],
            p90=[],
        )
        for m in methods
    }
    for i, unit in enumerate(fleet.test):
        t_p = unit.prediction_start_h
        for j, lam in enumerate(LAMBDAS):
            t_lam = t_p + lam * (unit.end_of_life_h - t_p)
            seen = unit.t <= t_lam
            t, y = unit.t[seen], unit.y[seen]
            truth = unit.end_of_life_h - float(t[-1])
            for name, forecast in methods.items():
                s = scores[name]
                s.asked += 1
                try:
                    got = forecast(t, y)
                except NotEnoughDataError as exc:
                    s.missing[exc.reason] += 1
                    continue
                except ValueError:
                    s.missing["not_applicable"] += 1
                    continue
                if got is None or not math.isfinite(got[1]):
                    s.missing["median_never_reached"] += 1
                    continue
                s.made += 1
                s.chose_exponential += got[3] == "ExponentialDegradation"
                s.passed[i, j] = bool(  # type: ignore[index]
                    alpha_lambda_accuracy(
                        [float(t[-1])], [got[1]], end_of_life=unit.end_of_life_h, alpha=ALPHA,
                        lambdas=[lam], prediction_start=t_p,
                    )[0]
                )  # fmt: skip
                s.rul_true.append(truth)  # type: ignore[union-attr]
                s.p10.append(got[0])  # type: ignore[union-attr]
                s.p50.append(got[1])  # type: ignore[union-attr]
                s.p90.append(got[2])  # type: ignore[union-attr]
        if report is not None:
            report((i + 1) / len(fleet.test), f"{fleet.name}: unit {i + 1}/{len(fleet.test)}")
    return scores


def _figures(fleet: Fleet, scores: dict[str, _Scores]) -> list[Figure]:
    n_units = len(fleet.test)
    lives = np.array([u.end_of_life_h - u.prediction_start_h for u in fleet.test]) / DAY_H
    figures = [
        Figure(
            name=f"{fleet.name} · test units",
            value=float(n_units),
            unit="units",
            notes=f"{fleet.description}; {len(fleet.train)} training units for the fleet prior; "
            f"test lives {np.percentile(lives, 10):.0f}–{np.percentile(lives, 90):.0f} d (P10–P90)",
            digits=0,
        )
    ]
    for method, s in scores.items():
        assert s.passed is not None and s.rul_true is not None
        share = 100.0 * s.passed.mean(axis=0)
        per_lambda = ", ".join(f"{lam:g}: {v:.0f} %" for lam, v in zip(LAMBDAS, share, strict=True))
        made = f"{s.made} of {s.asked} forecasts made"
        if s.missing:
            made += " (none: " + ", ".join(f"{n} {r}" for r, n in s.missing.most_common()) + ")"
        chose = (
            f"; evidence chose exponential in {100.0 * s.chose_exponential / s.made:.0f} %"
            if method == "chosen by evidence" and s.made
            else ""
        )
        figures.append(
            Figure(
                name=f"{fleet.name} · {method} · α-λ accuracy (α = 0.2), worst λ",
                value=float(share.min()),
                unit="%",
                target=_ALPHA_LAMBDA_TARGET,
                notes=f"share of {n_units} test units within ±20 % of the true RUL at λ = "
                f"{per_lambda}; {made}{chose}",
                digits=0,
            )
        )
        if not s.made:
            continue
        true = np.asarray(s.rul_true)
        p10, p50, p90 = (np.asarray(v) for v in (s.p10, s.p50, s.p90))
        with np.errstate(over="ignore"):  # a forecast years late overflows exp(d/10): inf
            penalty = phm08_penalty(p50 / DAY_H, true / DAY_H)
        figures.append(
            Figure(
                name=f"{fleet.name} · {method} · PHM08 penalty, mean per forecast",
                value=float(np.mean(penalty)),
                unit="1",
                notes=f"d = median − true RUL in days (late costs more); lower is better; median "
                f"penalty {np.median(penalty):.2f}; {made}",
            )
        )
        figures.append(
            Figure(
                name=f"{fleet.name} · {method} · relative accuracy of the median, mean",
                value=100.0 * float(np.mean(relative_accuracy(p50, true))),
                unit="%",
                notes=f"RA = 1 − |r* − r| / r*; 100 % is perfect; {made}",
                digits=1,
            )
        )
        naive = method.startswith("naive")
        figures.append(
            Figure(
                name=f"{fleet.name} · {method} · P10–P90 coverage",
                value=100.0 * interval_coverage(p10, p90, true),
                unit="%",
                target=None if naive else _COVERAGE_TARGET,
                notes=(
                    "no interval (P10 = P90): the naive baseline carries no uncertainty"
                    if naive
                    else f"share of true RULs inside [P10, P90]; {made}"
                ),
                digits=1,
            )
        )
    return figures


# -- cost ------------------------------------------------------------------------------------


def _percentiles(samples_s: Sequence[float]) -> tuple[float, float]:
    ms = np.asarray(samples_s) * 1e3
    return float(np.percentile(ms, 50)), float(np.percentile(ms, 99))


def _cost_figures(rng: np.random.Generator, repeats: int) -> list[Figure]:
    train = exponential_fleet(rng, 20)
    prior = FleetPrior().fit([(u.t, u.y) for u in train])
    cands = [
        ExponentialDegradation(threshold=1.0, **prior.exponential_params()),
        WienerDegradation(threshold=1.0, **prior.wiener_params()),
    ]
    # Histories of realistic length: 180 daily points (half a year) and the same hourly.
    beta = math.log(10.0) / 6000.0
    hourly_t = np.arange(1.0, 24 * 180 + 1.0)

    def history(hourly: bool) -> tuple[NDArray, NDArray]:
        L = (
            math.log(0.1)
            + beta * hourly_t
            + np.cumsum(rng.normal(0, math.sqrt(3.75e-5), hourly_t.size))
        )
        t, y = hourly_t, np.exp(L)
        return (t, y) if hourly else (t[23::24], y[23::24])

    daily = [history(False) for _ in range(16)]
    hourly = [history(True) for _ in range(4)]

    def summary(model: Any) -> None:
        model.time_to_failure_quantiles((0.1, 0.5, 0.9))
        for h in (24.0, 168.0, 720.0):
            model.prob_failure_within(h)
        model.failure_probability_ever()
        model.latest_maintenance_time(0.1)

    refit, refit_hourly, full, stored = [], [], [], []
    for k in range(repeats):
        t, y = daily[k % len(daily)]
        t0 = time.perf_counter()
        model, _ = select_model(cands, t, y)
        t1 = time.perf_counter()
        summary(model)
        t2 = time.perf_counter()
        refit.append(t1 - t0)
        full.append(t2 - t0)
        state = model.to_state()
        t3 = time.perf_counter()
        type(model).from_state(state)
        summary(type(model).from_state(state))
        stored.append(time.perf_counter() - t3)
    for k in range(max(repeats // 10, 5)):
        t, y = hourly[k % len(hourly)]
        t0 = time.perf_counter()
        select_model(cands, t, y)
        refit_hourly.append(time.perf_counter() - t0)
    rows = []
    for name, samples, target, note in (
        ("refit per message, 180 daily points", refit, None,
         "select_model over exponential + Wiener with fleet priors; per message when the "
         "service refits on every new daily point"),
        ("refit per message, 4,320 hourly points", refit_hourly, None,
         "the same fit on half a year of hourly windows (the models want daily aggregates)"),
        ("forecast latency (refit + forecast summary)", full, _LATENCY_TARGET,
         "select_model + P10/P50/P90 + P(failure within 1/7/30 d) + latest maintenance time"),
        ("forecast latency from a stored fit", stored, _LATENCY_TARGET,
         "from_state + the same forecast summary (the HTTP read path when fits are cached)"),
    ):  # fmt: skip
        p50, p99 = _percentiles(samples)
        rows.append(Figure(name=f"{name}, p50", value=p50, unit="ms", notes=f"{len(samples)} runs"))
        rows.append(
            Figure(
                name=f"{name}, p99",
                value=p99,
                unit="ms",
                target=target,
                notes=f"{note}; {len(samples)} runs",
            )
        )
    return rows


# -- entry point -----------------------------------------------------------------------------


def run(*, quick: bool = False, report: Report | None = None) -> list[Figure]:
    """Measure forecast accuracy on three fleets and the refit/forecast cost."""
    rng = np.random.default_rng(2026)
    n_train, n_test = (6, 10) if quick else (30, 200)
    sim_train, sim_test, per_day = (3, 3, 1) if quick else (12, 24, 3)
    stages = 4.0
    done = 0.0

    def stage(what: str) -> Callable[[float, str], None]:
        def step(frac: float, detail: str = "") -> None:
            if report is not None:
                report(done + frac, stages, detail or what)

        return step

    figures: list[Figure] = []
    fleets = [
        Fleet(
            name="exponential",
            description="exponential degradation paths from the model's assumptions, threshold 1",
            train=exponential_fleet(rng, n_train),
            test=exponential_fleet(rng, n_test),
            threshold=1.0,
        ),
        Fleet(
            name="Wiener",
            description="linear-drift (Wiener) paths from 0.1 to the threshold 1",
            train=wiener_fleet(rng, n_train),
            test=wiener_fleet(rng, n_test),
            threshold=1.0,
            initial_level=0.1,
        ),
    ]
    for fleet in fleets:
        figures += _figures(fleet, _evaluate(fleet, stage(fleet.name)))
        done += 1
    sim_step = stage("simulated pumps")
    sim = simulated_pump_fleet(
        sim_train, sim_test, windows_per_day=per_day,
        report=lambda k, n: sim_step(0.8 * k / n, f"simulating pump {k}/{n}"),
    )  # fmt: skip
    figures += _figures(sim, _evaluate(sim, lambda f, d: sim_step(0.8 + 0.2 * f, d)))
    done += 1
    stage("refit and latency")(0.0, "refit and latency")
    figures += _cost_figures(rng, 60 if quick else 500)
    return figures


def main() -> int:
    from bench.__main__ import main as harness_main

    return harness_main(["forecast"])


if __name__ == "__main__":
    raise SystemExit(main())
