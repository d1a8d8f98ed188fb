"""The forecast benchmark's oracle: the true conditional RUL law of a simulated unit."""

from __future__ import annotations

import math

import numpy as np
import pytest

from bench.bench_forecast import (
    LAMBDAS,
    UnitTruth,
    _alpha_pass_probability,
    _best_alpha_pass_probability,
    _oracle_passes,
    _oracle_rul,
    _seen_at,
    exponential_fleet,
    wiener_fleet,
)
from prognosis_service.prognosis import random_drift_first_passage_cdf

WIENER = UnitTruth(drift=0.9 / 2400.0, diffusion_var=4e-6)
EXPONENTIAL = UnitTruth(drift=math.log(10.0) / 2400.0, diffusion_var=3.75e-5, log_signal=True)


def _hourly_first_crossing(
    truth: UnitTruth, y_now: float, n: int, hours: int, seed: int
) -> np.ndarray:
    """RUL (hours) of ``n`` hourly paths from ``y_now``, drawn as the benchmark's generators do."""
    rng = np.random.default_rng(seed)
    x0, x_fail = (math.log(y_now), 0.0) if truth.log_signal else (y_now, 1.0)
    steps = truth.drift + math.sqrt(truth.diffusion_var) * rng.standard_normal((n, hours))
    hit = x0 + np.cumsum(steps, axis=1) >= x_fail
    assert hit.any(axis=1).mean() > 0.99  # the horizon covers the quantiles compared below
    return np.where(hit.any(axis=1), hit.argmax(axis=1) + 1.0, np.inf)


def test_oracle_law_is_the_inverse_gaussian_of_the_remaining_distance():
    # Chhikara & Folks (1989): first passage of μt + σB(t) over d is inverse Gaussian with mean
    # d/μ and variance dσ²/μ³ (REFERENCES.md); cdf against the repo's closed form, itself checked
    # against scipy.stats.invgauss in tests/prognosis_service/prognosis/test_first_passage.py.
    y_now = 0.91
    d = (1.0 - y_now) + 0.5826 * math.sqrt(WIENER.diffusion_var)  # hourly monitoring shift
    law = _oracle_rul(WIENER, y_now, 1.0)
    mean, var = (float(v) for v in law.stats(moments="mv"))
    assert mean == pytest.approx(d / WIENER.drift, rel=1e-12)
    assert var == pytest.approx(d * WIENER.diffusion_var / WIENER.drift**3, rel=1e-12)
    h = np.linspace(50.0, 600.0, 23)
    closed = random_drift_first_passage_cdf(
        h, distance=d, drift_mean=WIENER.drift, drift_var=0.0, diffusion_var=WIENER.diffusion_var
    )
    np.testing.assert_allclose(law.cdf(h), closed, atol=1e-12)


@pytest.mark.parametrize(
    ("truth", "y_now", "hours"),
    [(WIENER, 0.91, 1200), (WIENER, 0.55, 2400), (EXPONENTIAL, math.exp(-0.23), 1200)],
)
def test_oracle_quantiles_match_hourly_monte_carlo(truth: UnitTruth, y_now: float, hours: int):
    # Monte Carlo of the generators' own hourly paths: the oracle's P10/P50/P90 agree within 2 %.
    rul = _hourly_first_crossing(truth, y_now, n=4000, hours=hours, seed=11)
    law = _oracle_rul(truth, y_now, 1.0)
    levels = [0.1, 0.5, 0.9]
    np.testing.assert_allclose(law.ppf(levels), np.quantile(rul, levels), rtol=0.02)
    median = float(law.median())
    mc_pass = float(np.mean((0.8 * rul <= median) & (median <= 1.2 * rul)))
    assert _alpha_pass_probability(law, median) == pytest.approx(mc_pass, abs=0.025)


def test_best_point_forecast_is_at_least_the_median():
    law = _oracle_rul(EXPONENTIAL, math.exp(-0.23), 1.0)
    at_median = _alpha_pass_probability(law, float(law.median()))
    best = _best_alpha_pass_probability(law)
    assert at_median <= best + 1e-9
    assert best < 0.5  # late in life ±20 % is a coin toss at best for this noise level


@pytest.mark.parametrize("fleet", [exponential_fleet, wiener_fleet])
def test_vectorised_oracle_agrees_with_the_per_forecast_law(fleet):
    units = fleet(np.random.default_rng(3), 6)
    passed = _oracle_passes(units, 1.0)
    for i, unit in enumerate(units):
        assert unit.truth is not None
        for j, lam in enumerate(LAMBDAS):
            t, y = _seen_at(unit, lam)
            median = float(_oracle_rul(unit.truth, float(y[-1]), 1.0).median())
            truth = unit.end_of_life_h - float(t[-1])
            assert passed[i, j] == (0.8 * truth <= median <= 1.2 * truth)
