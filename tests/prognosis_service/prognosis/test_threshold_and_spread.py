"""An uncertain failure threshold, the fleet's unit-to-unit spread, thresholds from failures."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import integrate, optimize, stats

from prognosis_service.assessment.assessor import AssessmentConfig, _failure_threshold
from prognosis_service.prognosis import (
    ExponentialDegradation,
    FleetPrior,
    InvalidParameterError,
    WienerDegradation,
)
from prognosis_service.prognosis.degradation import _spread_median


def _wiener_path(rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    t = 12.0 * np.arange(1, 31)
    return t, 0.002 * t + np.cumsum(rng.normal(0.0, math.sqrt(2e-5 * 12.0), t.size))


def test_uncertain_threshold_matches_a_monte_carlo_of_the_model():
    # Reference: the model's own law sampled with scipy — drift ~ N(posterior), failure level ~
    # normal truncated to above the last observation, first passage inverse Gaussian
    # (scipy.stats.invgauss; Chhikara & Folks 1989) for each drawn pair.
    rng = np.random.default_rng(3)
    t, y = _wiener_path(rng)
    model = WienerDegradation(threshold=1.0, threshold_sd=0.1, sigma2=2e-5).fit(t, y)
    n = 100_000
    mu = rng.normal(model.drift_mean_, math.sqrt(model.drift_var_), n)
    lo = (model.last_signal_ - 1.0) / 0.1
    level = stats.truncnorm.rvs(lo, np.inf, loc=1.0, scale=0.1, size=n, random_state=rng)
    d = level - model.last_signal_
    ok = mu > 0
    passage = np.full(n, np.inf)
    mean, shape = d[ok] / mu[ok], d[ok] ** 2 / model.sigma2_
    passage[ok] = stats.invgauss.rvs(mean / shape, scale=shape, random_state=rng)
    h = np.array([50.0, 100.0, 150.0, 200.0, 300.0])
    expected = [(passage <= x).mean() for x in h]  # MC sd < 0.002
    np.testing.assert_allclose(model.predict_failure_time_cdf(h), expected, atol=0.01)
    np.testing.assert_allclose(
        model.time_to_failure_quantiles(), np.quantile(passage, [0.1, 0.5, 0.9]), rtol=0.03
    )
    # the known-threshold forecast is narrower and the state keeps the spread
    known = WienerDegradation(threshold=1.0, sigma2=2e-5).fit(t, y)
    q_known, q = known.time_to_failure_quantiles(), model.time_to_failure_quantiles()
    assert q_known[2] - q_known[0] < q[2] - q[0]
    again = WienerDegradation.from_state(json.loads(json.dumps(model.to_state())))
    np.testing.assert_allclose(again.predict_failure_time_cdf(h), model.predict_failure_time_cdf(h))


def test_a_unit_past_an_uncertain_nominal_threshold_still_gets_a_forecast():
    rng = np.random.default_rng(5)
    t = 10.0 * np.arange(1, 41)
    L = -1.0 + 0.004 * t + 0.006 * np.cumsum(rng.normal(0.0, math.sqrt(10.0), t.size))
    y = np.exp(L)
    nominal = 0.9 * float(y[-1])  # the last observation is past the nominal level
    known = ExponentialDegradation(threshold=nominal).fit(t, y)
    assert known.threshold_crossed_
    assert known.time_to_failure_quantiles().tolist() == [0.0, 0.0, 0.0]
    uncertain = ExponentialDegradation(threshold=nominal, threshold_sd=0.2 * nominal).fit(t, y)
    assert not uncertain.threshold_crossed_
    q10, q50, q90 = uncertain.time_to_failure_quantiles()
    assert 0.0 < q10 < q50 < q90 < math.inf
    again = ExponentialDegradation.from_state(json.loads(json.dumps(uncertain.to_state())))
    assert again.time_to_failure_quantiles() == pytest.approx([q10, q50, q90])
    with pytest.raises(InvalidParameterError, match="threshold_sd"):
        WienerDegradation(threshold=1.0, threshold_sd=-0.1).fit(t, np.log(y) + 2.0)


def _spread_by_quadrature(b: np.ndarray, v: np.ndarray) -> float:
    """Posterior median of tau² (flat priors on mu and tau), by scipy quad and brentq."""

    def dens(tau: float) -> float:
        w = 1.0 / (tau * tau + v)
        mu = float((w * b).sum() / w.sum())
        return float(
            math.sqrt(1.0 / w.sum())
            * np.prod(np.sqrt(w))
            * np.exp(-0.5 * (w * (b - mu) ** 2).sum())
        )

    total = integrate.quad(dens, 0.0, np.inf, limit=200)[0]
    tau = optimize.brentq(lambda x: integrate.quad(dens, 0.0, x)[0] - 0.5 * total, 1e-12, 1e3)
    return tau * tau


def test_unit_to_unit_spread_is_the_hierarchical_posterior_median():
    # Hierarchical normal model with flat priors on the mean and on tau (Gelman, Carlin, Stern &
    # Rubin, Bayesian Data Analysis, from memory). With three equal estimates of equal noise v the
    # posterior of tau is proportional to 1/(tau² + v): its median is sqrt(v), so tau² = v.
    assert _spread_median(np.array([1.0, 1.0, 1.0]), np.full(3, 0.04)) == pytest.approx(
        0.04, rel=0.01
    )
    b = np.array([0.9, 1.3, 1.0, 1.6, 0.7])
    v = np.array([0.02, 0.05, 0.03, 0.04, 0.02])
    assert _spread_median(b, v) == pytest.approx(_spread_by_quadrature(b, v), rel=0.02)


def test_a_fleet_of_three_lookalike_units_does_not_overrule_a_new_unit():
    # Three past units whose rates agree within 1 % (closer than their estimation noise): the
    # moment estimate of the spread is 0 and a point-mass prior would hand a new unit the fleet's
    # rate whatever its own data say. The prior must leave room for the new unit's 30 % slower
    # rate to show.
    rng = np.random.default_rng(11)
    sigma = 0.004
    t = 10.0 * np.arange(1, 61)

    def path(beta: float) -> np.ndarray:
        return np.exp(-2.0 + beta * t + sigma * np.cumsum(rng.normal(0.0, math.sqrt(10.0), t.size)))

    fleet = [(t, path(b)) for b in (0.0040, 0.00402, 0.00398)]
    prior = FleetPrior().fit(fleet)
    assert prior.exponential_sigma2_ is not None and prior.exponential_cov_ is not None
    noise_sd = math.sqrt(prior.exponential_sigma2_ / float(t[-1] - t[0]))
    assert math.sqrt(prior.exponential_cov_[1, 1]) >= 0.5 * noise_sd
    slow = path(0.0028)
    model = ExponentialDegradation(threshold=1.0, **prior.exponential_params()).fit(t, slow)
    own = ExponentialDegradation(threshold=1.0).fit(t, slow)  # the documented default prior
    # the posterior rate lies well towards the unit's own estimate, not at the fleet's
    assert model.posterior_mean_[1] < 0.0040 - 0.5 * (0.0040 - own.posterior_mean_[1])


def test_threshold_from_recorded_failures_of_the_same_mode():
    cfg = AssessmentConfig()
    # fewer than min_fleet_failures: the severity class's level, no spread
    assert _failure_threshold([("outer_race", 1.2)], "outer_race", cfg) == (
        1.0,
        0.0,
        "severity class (health index 1)",
    )
    finals = [
        ("outer_race", 1.10),
        ("outer_race", 1.20),
        ("inner_race", 0.86),
        ("inner_race", 0.90),
        ("rolling_element", 0.80),
    ]
    thr, sd, source = _failure_threshold(finals, "inner_race", cfg)
    assert thr == pytest.approx(0.88)
    # pooled within-mode SD: (0.05² + 0.05² + 0.02² + 0.02²) / (1 + 1) = 0.0029
    assert sd == pytest.approx(math.sqrt(0.0029) * math.sqrt(1.0 + 1.0 / 2.0))
    assert "2 recorded inner_race failures" in source
    thr, sd, source = _failure_threshold(finals, "cage", cfg)  # no cage failure recorded
    assert thr == pytest.approx(0.90) and "5 recorded failures" in source
    # one failure per mode: no within-mode spread to pool, the class's spread bounds it
    single = [("outer_race", 1.16), ("inner_race", 0.92), ("rolling_element", 0.78)]
    thr, sd, _ = _failure_threshold(single, "outer_race", cfg)
    assert thr == pytest.approx(1.16)
    assert sd == pytest.approx(np.std([1.16, 0.92, 0.78], ddof=1) * math.sqrt(2.0))
