"""A simulated fleet: forecasts judged with α-λ accuracy and P10–P90 coverage.

Paths are drawn from the exponential model of Gebraeel, Lawley, Li & Ryan (2005) itself
(log-signal θ′ + β′t + σB(t), unit-to-unit normal θ′, β′), so a calibrated forecast should cover the
true remaining life with its P10–P90 interval about 80 % of the time; α-λ accuracy with α = 0.2
(Saxena et al., IJPHM 2010) should hold on most units at λ = 0.5 … 0.9. Invented data, checked
against the model's own law.
"""

from __future__ import annotations

import numpy as np
import pytest

from prognosis_service.prognosis import (
    ExponentialDegradation,
    FleetPrior,
    alpha_lambda_accuracy,
    interval_coverage,
)

THETA, BETA, SIGMA = (-3.0, 0.3), (0.004, 0.0006), 0.006  # per hour; failure at S = 1
LAMBDAS = np.array([0.5, 0.6, 0.7, 0.8, 0.9])
OBS_EVERY_H = 10.0


def _unit(rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray, float]:
    """One run to failure on a 1 h grid, observed every 10 h; returns (t, y, end of life)."""
    theta, beta = rng.normal(*THETA), rng.normal(*BETA)
    t = np.arange(1.0, 6000.0)
    L = theta + beta * t + SIGMA * np.cumsum(rng.normal(0.0, 1.0, t.size))
    eol = float(t[np.flatnonzero(L >= 0.0)[0]])
    seen = (t % OBS_EVERY_H == 0) & (t < eol)
    return t[seen], np.exp(L[seen]), eol


def _evaluate(predictive: str) -> tuple[np.ndarray, float]:
    rng = np.random.default_rng(11)
    prior = FleetPrior().fit([_unit(rng)[:2] for _ in range(20)])
    passes, lower, upper, truth = [], [], [], []
    for _ in range(30):
        t, y, eol = _unit(rng)
        t_p = t[4]  # first forecast once min_points observations exist
        when, median = [], []
        for t_lam in t_p + LAMBDAS * (eol - t_p):
            k = int(np.searchsorted(t, t_lam, side="right"))
            model = ExponentialDegradation(
                threshold=1.0, predictive=predictive, **prior.exponential_params()
            ).fit(t[:k], y[:k])
            q10, q50, q90 = model.time_to_failure_quantiles((0.1, 0.5, 0.9))
            when.append(t[k - 1])
            median.append(q50)
            lower.append(q10)
            upper.append(q90)
            truth.append(eol - t[k - 1])
        passes.append(
            alpha_lambda_accuracy(
                when, median, end_of_life=eol, alpha=0.2, lambdas=LAMBDAS, prediction_start=t_p
            )
        )
    return np.mean(passes, axis=0), interval_coverage(lower, upper, truth)


def test_first_passage_forecasts_meet_alpha_lambda_and_are_calibrated():
    pass_rate, coverage = _evaluate("first_passage")
    assert np.all(pass_rate >= 0.6), pass_rate  # "most units" at every lambda
    assert coverage == pytest.approx(0.8, abs=0.1)  # 150 intervals: binomial sd about 0.033


def test_published_predictive_is_accurate_but_conservative():
    # Gebraeel's Phi(g) ignores the observed error path, so its intervals are too wide: coverage
    # at or above the nominal 80 % (conservative), median still accurate on most units.
    pass_rate, coverage = _evaluate("gebraeel")
    assert np.mean(pass_rate) >= 0.7, pass_rate
    assert coverage >= 0.8
