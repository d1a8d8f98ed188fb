"""Forecast accuracy and cost of the degradation models (a benchmark: it measures, asserts nothing).

Fleets of run-to-failure histories are split into training units (the fleet prior is learned
from their complete histories) and held-out test units. Each test unit is forecast at
``tλ = tP + λ(tEoL − tP)`` for λ = 0.5 … 0.9 from the data observed up to ``tλ``, by

* the model chosen by evidence (``select_model`` over exponential and Wiener, fleet priors),
* the exponential model (Gebraeel et al. 2005) alone, the Wiener model alone,
* the naive baseline: a straight line through the last 20 daily points,
* on the fleets drawn from known parameters, an **oracle**: the median of the true conditional
  RUL law given the unit's true drift, diffusion, threshold and present value (inverse Gaussian
  first passage of the remaining distance, in ``ln y`` for exponential paths, with the
  discrete-monitoring shift of hourly paths). It knows everything except the future noise, so
  its α-λ accuracy is the ceiling for any forecaster that sees only the path. It carries no
  target; its share is also measured on further units from the same generator, for a ceiling
  with less sampling noise, and each model's α-λ row gives its share of the oracle's.

What the oracle shows (full run: 200 test units, 1000 further units per fleet): its α-λ accuracy
falls with λ too, because the spread of the first passage relative to the remaining life grows as
the remaining life shrinks (the inverse Gaussian's coefficient of variation is ``σ/√(μd)``). At
λ = 0.9 even the oracle is within ±20 % for only about 42 % of the exponential units and 46 % of
the Wiener units, so the "> 50 % at every λ" target is not reachable on these fleets' noise at
late λ, and the honest comparison is a model's share of the oracle's: 93–94 % (exponential
fleet) and 81–94 % (Wiener fleet) at every λ for the model chosen by evidence. Checked once, not
a figure here: the models' medians lie within 2 % of the oracle's (median ratio per λ), so the
shortfall is the scatter of not knowing a unit's own drift, not a bias late in life. The
oracle's law treats ``tλ`` as a time fixed in advance, but ``tλ`` is set by the true end of life;
that selection makes the realised RUL a little shorter than the law says, costing the oracle
1–2 points of α-λ accuracy at λ = 0.9 (also checked once, on 3000 units).

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
    health indicator being the daily median of ``de_accel.high_band_rms`` over its healthy level
    (the indicator the service's bearing health index follows; broadband ``de_accel.rms`` gave
    α-λ 8 % at worst λ and P10–P90 coverage 54 % in the full run, the high band 21 % and 74 %);
    the end of life is the simulator's failure time and the threshold the training units'
    median health indicator on their last day. ``tP`` is the fault onset (known in the
    simulation).

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
from scipy import optimize, stats
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
class UnitTruth:
    """The parameters a simulated unit's path was drawn with (what only the oracle knows).

    ``x(t) = x₀ + drift·t + σB(t)`` with ``σ² = diffusion_var``, per hour; ``x`` is the signal
    itself (Wiener paths) or its logarithm (exponential paths, ``log_signal=True``).
    """

    drift: float
    diffusion_var: float
    log_signal: bool = False


@dataclass(frozen=True)
class Unit:
    """One run-to-failure history: daily observations before the end of life."""

    t: NDArray  # hours
    y: NDArray
    end_of_life_h: float
    prediction_start_h: float = 0.0
    truth: UnitTruth | None = None  # simulated from known parameters: the oracle applies


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
    ceiling: list[Unit] = field(default_factory=list)  # further units, for the oracle only


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
            truth = UnitTruth(drift=beta, diffusion_var=sigma**2, log_signal=True)
            units.append(Unit(t=got[0], y=got[1], end_of_life_h=got[2], truth=truth))
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
            truth = UnitTruth(drift=mu, diffusion_var=sigma**2)
            units.append(Unit(t=got[0], y=got[1], end_of_life_h=got[2], truth=truth))
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
    """Outer-race defects on simulated pumps; ``de_accel.high_band_rms`` over its healthy level."""
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
            indicators=["de_accel.high_band_rms"],
        )
        rms = series.column("de_accel.high_band_rms")
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
            f"median life 90 d; daily median of {windows_per_day} windows of "
            "de_accel.high_band_rms "
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


# A path checked every Δt crosses the threshold later than its continuous version, about as if the
# threshold were higher by ζ·σ√Δt with ζ = −ζ_R(1/2)/√(2π) ≈ 0.5826 (Broadie, Glasserman & Kou,
# "A continuity correction for discrete barrier options", Math. Finance 7 (1997); from memory).
# The fleets' end of life is the first hourly crossing.
_DISCRETE_MONITORING_SHIFT = 0.5826
ORACLE = "oracle (true parameters)"


def _oracle_rul(truth: UnitTruth, y_now: float, threshold: float, step_h: float = 1.0) -> Any:
    """The true conditional RUL distribution (hours) of a simulated unit, as a frozen scipy law.

    The generator's paths are Markov and observed without measurement noise, so given the true
    drift μ and diffusion σ², the remaining life from the current value is the first passage of
    ``x(t) = μt + σB(t)`` over the remaining distance ``d`` (in ``ln y`` for exponential paths):
    inverse Gaussian with mean ``d/μ`` and shape ``d²/σ²`` (Chhikara & Folks 1989), here as
    ``scipy.stats.invgauss(mean/shape, scale=shape)``, ``d`` raised by the discrete-monitoring
    shift. No forecaster that sees only the path can know more; the future noise stays unknown.
    """
    mean, shape = _oracle_mean_shape(truth, y_now, threshold, step_h)
    return stats.invgauss(mean / shape, scale=shape)


def _oracle_mean_shape(
    truth: UnitTruth, y_now: float, threshold: float, step_h: float = 1.0
) -> tuple[float, float]:
    distance = math.log(threshold / y_now) if truth.log_signal else threshold - y_now
    distance += _DISCRETE_MONITORING_SHIFT * math.sqrt(truth.diffusion_var * step_h)
    return distance / truth.drift, distance * distance / truth.diffusion_var


def _seen_at(unit: Unit, lam: float) -> tuple[NDArray, NDArray]:
    t_lam = unit.prediction_start_h + lam * (unit.end_of_life_h - unit.prediction_start_h)
    seen = unit.t <= t_lam
    return unit.t[seen], unit.y[seen]


def _oracle_passes(units: Sequence[Unit], threshold: float) -> NDArray:
    """(units, λ) bool: is the oracle's median within ±α of the true RUL (vectorised)?"""
    mean, shape, truth = (np.zeros((len(units), len(LAMBDAS))) for _ in range(3))
    for i, unit in enumerate(units):
        assert unit.truth is not None
        for j, lam in enumerate(LAMBDAS):
            t, y = _seen_at(unit, lam)
            mean[i, j], shape[i, j] = _oracle_mean_shape(unit.truth, float(y[-1]), threshold)
            truth[i, j] = unit.end_of_life_h - float(t[-1])
    median = stats.invgauss.ppf(0.5, mean / shape, scale=shape)
    return np.asarray(((1 - ALPHA) * truth <= median) & (median <= (1 + ALPHA) * truth))


def _alpha_pass_probability(rul: Any, estimate: float, alpha: float = ALPHA) -> float:
    """P((1 − α)·RUL ≤ estimate ≤ (1 + α)·RUL) under the RUL law ``rul``."""
    return float(rul.cdf(estimate / (1.0 - alpha)) - rul.cdf(estimate / (1.0 + alpha)))


def _best_alpha_pass_probability(rul: Any, alpha: float = ALPHA) -> float:
    """The largest α-λ pass probability any point forecast can have under the RUL law ``rul``."""
    lo, hi = (float(v) for v in rul.ppf([0.001, 0.999]))
    best = optimize.minimize_scalar(
        lambda r: -_alpha_pass_probability(rul, r, alpha), bounds=(lo, hi), method="bounded"
    )
    return float(-best.fun)


def _constant_forecast(q10: float, q50: float, q90: float) -> Forecaster:
    def forecast(t: NDArray, y: NDArray) -> tuple[float, float, float, str]:
        return q10, q50, q90, ORACLE

    return forecast


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
    # oracle only, (units, λ): P(pass) of its median and the best any point forecast can have
    expected_pass: NDArray | None = None
    best_pass: NDArray | None = None
    ceiling_passed: NDArray | None = None  # (further units, λ) bool


def _evaluate(
    fleet: Fleet, report: Callable[[float, str], None] | None = None
) -> dict[str, _Scores]:
    prior = FleetPrior(offset=fleet.offset, initial_level=fleet.initial_level).fit(
        [(u.t, u.y) for u in fleet.train]
    )
    methods = _forecasters(fleet, prior)
    with_oracle = all(u.truth is not None for u in fleet.test)
    shape = (len(fleet.test), len(LAMBDAS))
    scores = {
        m: _Scores(passed=np.zeros(shape, bool), rul_true=[], p10=[], p50=[], p90=[])
        for m in [*methods, *([ORACLE] if with_oracle else [])]
    }
    expected_pass, best_pass = np.zeros(shape), np.zeros(shape)
    if with_oracle:
        scores[ORACLE].expected_pass, scores[ORACLE].best_pass = expected_pass, best_pass
        if fleet.ceiling:
            scores[ORACLE].ceiling_passed = _oracle_passes(fleet.ceiling, fleet.threshold)
    for i, unit in enumerate(fleet.test):
        t_p = unit.prediction_start_h
        for j, lam in enumerate(LAMBDAS):
            t, y = _seen_at(unit, lam)
            truth = unit.end_of_life_h - float(t[-1])
            forecasts = dict(methods)
            if with_oracle:
                assert unit.truth is not None
                law = _oracle_rul(unit.truth, float(y[-1]), fleet.threshold)
                q10, q50, q90 = (float(v) for v in law.ppf([0.1, 0.5, 0.9]))
                forecasts[ORACLE] = _constant_forecast(q10, q50, q90)
                expected_pass[i, j] = _alpha_pass_probability(law, q50)
                best_pass[i, j] = _best_alpha_pass_probability(law)
            for name, forecast in forecasts.items():
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

    def per_lambda(values: NDArray) -> str:
        return ", ".join(f"{lam:g}: {v:.0f} %" for lam, v in zip(LAMBDAS, values, strict=True))

    oracle = scores.get(ORACLE)
    oracle_share = None if oracle is None else 100.0 * oracle.passed.mean(axis=0)  # type: ignore[union-attr]
    for method, s in scores.items():
        assert s.passed is not None and s.rul_true is not None
        share = 100.0 * s.passed.mean(axis=0)
        made = f"{s.made} of {s.asked} forecasts made"
        if s.missing:
            made += " (none: " + ", ".join(f"{n} {r}" for r, n in s.missing.most_common()) + ")"
        chose = (
            f"; evidence chose exponential in {100.0 * s.chose_exponential / s.made:.0f} %"
            if method == "chosen by evidence" and s.made
            else ""
        )
        is_oracle = method == ORACLE
        headline = share
        if is_oracle:
            assert s.expected_pass is not None and s.best_pass is not None
            gain = 100.0 * float(np.max(np.mean(s.best_pass - s.expected_pass, axis=0)))
            notes = (
                "the ceiling, no target: the median of the true conditional RUL law (inverse "
                "Gaussian from each unit's true drift, diffusion, threshold and present value; "
                f"only the future noise unknown); share of {n_units} test units within ±20 % at "
                f"λ = {per_lambda(share)}"
            )
            ceiling = share
            if s.ceiling_passed is not None:
                ceiling = 100.0 * s.ceiling_passed.mean(axis=0)
                se = 100.0 * np.sqrt(ceiling * (100.0 - ceiling) / 1e4 / len(s.ceiling_passed))
                notes += (
                    f"; the value is from {len(s.ceiling_passed)} further units from the same "
                    "generator, with less sampling noise (± 1 standard error): "
                    + ", ".join(
                        f"{lam:g}: {v:.0f} ± {e:.0f} %"
                        for lam, v, e in zip(LAMBDAS, ceiling, se, strict=True)
                    )
                )
            notes += (
                f"; the best point forecast under the law would add at most {gain:.1f} "
                "percentage points over its median"
            )
            headline = ceiling
            missed = [lam for lam, v in zip(LAMBDAS, ceiling, strict=True) if v <= 50.0]
            notes += (
                "; even the oracle misses ±20 % for half the units or more at λ = "
                + ", ".join(f"{lam:g}" for lam in missed)
                + ": the > 50 % target is not reachable on this fleet's noise level there, "
                "and the honest comparison is the models' share of the oracle's"
                if missed
                else "; the > 50 % target is within the oracle's reach at every λ"
            )
        else:
            of_oracle = (
                ""
                if oracle_share is None
                else "; share of the oracle's on the same units at λ = "
                + ", ".join(
                    f"{lam:g}: {100.0 * v / o:.0f} %" if o > 0 else f"{lam:g}: n/a"
                    for lam, v, o in zip(LAMBDAS, share, oracle_share, strict=True)
                )
            )
            notes = (
                f"share of {n_units} test units within ±20 % of the true RUL at λ = "
                f"{per_lambda(share)}; {made}{chose}{of_oracle}"
            )
        figures.append(
            Figure(
                name=f"{fleet.name} · {method} · α-λ accuracy (α = 0.2), worst λ",
                value=float(headline.min()),
                unit="%",
                target=None if is_oracle else _ALPHA_LAMBDA_TARGET,
                notes=notes,
                digits=0,
            )
        )
        if not s.made:
            continue
        true = np.asarray(s.rul_true)
        p10, p50, p90 = (np.asarray(v) for v in (s.p10, s.p50, s.p90))
        with np.errstate(over="ignore"):  # a forecast years late overflows exp(d/10): inf
            penalty = phm08_penalty(p50 / DAY_H, true / DAY_H)
        phm08_note = (
            "; the law's median is not the penalty's best point (late costs more), so a "
            "forecast biased early can score lower"
            if is_oracle
            else ""
        )
        figures.append(
            Figure(
                name=f"{fleet.name} · {method} · PHM08 penalty, mean per forecast",
                value=float(np.mean(penalty)),
                unit="1",
                notes=f"d = median − true RUL in days (late costs more); lower is better; median "
                f"penalty {np.median(penalty):.2f}; {made}{phm08_note}",
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
                target=None if naive or method == ORACLE else _COVERAGE_TARGET,
                notes=(
                    "no interval (P10 = P90): the naive baseline carries no uncertainty"
                    if naive
                    else f"share of true RULs inside [P10, P90]; {made}"
                    + (
                        "; calibrated by construction: a check of the simulation, no target"
                        if method == ORACLE
                        else ""
                    )
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
    ceiling_rng = np.random.default_rng([2026, 1])  # apart, so the fleets stay as they were
    n_ceiling = 100 if quick else 1000
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
            ceiling=exponential_fleet(ceiling_rng, n_ceiling),
        ),
        Fleet(
            name="Wiener",
            description="linear-drift (Wiener) paths from 0.1 to the threshold 1",
            train=wiener_fleet(rng, n_train),
            test=wiener_fleet(rng, n_test),
            threshold=1.0,
            initial_level=0.1,
            ceiling=wiener_fleet(ceiling_rng, n_ceiling),
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
