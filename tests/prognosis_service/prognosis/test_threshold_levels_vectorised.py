"""All threshold levels of an uncertain failure level evaluated in one call of the passage law."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import optimize, stats
from scipy.special import log_ndtr, ndtr

from prognosis_service.prognosis import (
    ExponentialDegradation,
    WienerDegradation,
    random_drift_failure_probability,
    random_drift_first_passage_cdf,
)

_N_LEVELS = 16


def _one_level_cdf(h: np.ndarray, d: float, m: float, s2: float, v: float) -> np.ndarray:
    # The closed form of random_drift_first_passage_cdf for one distance, written out per level
    # (the per-level loop the models used before the levels were broadcast).
    out = np.zeros_like(h)
    pos = h > 0
    hp = h[pos]
    root = np.sqrt(hp * (v + s2 * hp))
    first = ndtr((m * hp - d) / root)
    log_second = (
        2.0 * m * d / v
        + 2.0 * s2 * d * d / (v * v)
        + log_ndtr(-(d + m * hp + 2.0 * s2 * d * hp / v) / root)
    )
    out[pos] = np.clip(first + np.exp(np.minimum(log_second, 0.0)), 0.0, 1.0)
    return out


def _levels(threshold: float, sd: float, last: float) -> np.ndarray:
    # Equal-probability levels of the normal failure level truncated to above the last value
    # (scipy.stats.truncnorm, reference library), as the models document.
    u = (np.arange(_N_LEVELS) + 0.5) / _N_LEVELS
    drawn = stats.truncnorm.ppf(u, (last - threshold) / sd, np.inf, loc=threshold, scale=sd)
    return np.maximum(drawn, last + 1e-9 * (1.0 + sd))


def _fitted(kind: str, sd: float) -> ExponentialDegradation | WienerDegradation:
    rng = np.random.default_rng(11)
    t = 24.0 * np.arange(1, 61)
    if kind == "wiener":
        y = 0.1 + 3e-4 * t + np.cumsum(rng.normal(0.0, math.sqrt(2e-6 * 24.0), t.size))
        return WienerDegradation(threshold=1.0, threshold_sd=sd, trend_significance=None).fit(t, y)
    L = -2.3 + 9e-4 * t + np.cumsum(rng.normal(0.0, math.sqrt(2e-5 * 24.0), t.size))
    return ExponentialDegradation(
        threshold=1.0, threshold_sd=sd, predictive=kind, trend_significance=None
    ).fit(t, np.exp(L))


def _per_level_cdf(model: ExponentialDegradation | WienerDegradation, h: np.ndarray) -> np.ndarray:
    sd = float(model.threshold_sd)
    levels = _levels(1.0, sd, model.last_signal_) if sd > 0 else np.array([1.0])
    rows = []
    for level in levels:
        if isinstance(model, WienerDegradation):
            d, m, s2 = level - model.last_signal_, model.drift_mean_, model.drift_var_
            rows.append(_one_level_cdf(h, d, m, s2, model.sigma2_))
            continue
        mn, C = model.posterior_mean_, model.posterior_cov_
        log_level = math.log(level - float(model.offset))
        if model.predictive == "first_passage":
            d = log_level - model.last_log_signal_
            rows.append(_one_level_cdf(h, d, mn[1], C[1, 1], model.sigma2_))
            continue
        f0 = float(ndtr(_gebraeel_g(model, np.array([model.last_time_]), log_level)[0]))
        f = ndtr(_gebraeel_g(model, model.last_time_ + h, log_level))
        rows.append(np.clip((f - f0) / (1.0 - f0), 0.0, 1.0))
    return np.mean(rows, axis=0)


def _gebraeel_g(model: ExponentialDegradation, s: np.ndarray, log_level: float) -> np.ndarray:
    # Gebraeel et al. (2005) predictive g(h), as in the model's docstring (truncated to T > 0
    # by the caller)
    mn, C = model.posterior_mean_, model.posterior_cov_
    var = C[0, 0] + C[1, 1] * s * s + 2.0 * C[0, 1] * s + model.sigma2_ * s
    return (mn[0] + mn[1] * s - log_level) / np.sqrt(var)


def test_array_of_distances_broadcasts_against_the_times():
    h = np.array([0.0, -1.0, 0.5, 5.0, 20.0, 60.0, 200.0, 1e4])
    d = np.array([0.5, 3.0, 10.0, 25.0])
    kw = {"drift_mean": 0.4, "drift_var": 0.01, "diffusion_var": 0.09}
    got = random_drift_first_passage_cdf(h, distance=d[:, None], **kw)
    assert got.shape == (d.size, h.size)
    for row, di in zip(got, d, strict=True):
        np.testing.assert_allclose(row, _one_level_cdf(h, float(di), 0.4, 0.01, 0.09), rtol=1e-12)
        np.testing.assert_array_equal(row, random_drift_first_passage_cdf(h, distance=di, **kw))
    assert np.all(got[:, :2] == 0.0)
    assert random_drift_first_passage_cdf(20.0, distance=d, **kw).shape == d.shape


@pytest.mark.parametrize("kind", ["wiener", "first_passage", "gebraeel"])
@pytest.mark.parametrize("sd", [0.1, 0.0])
def test_model_cdf_equals_the_average_of_per_level_passage_laws(kind: str, sd: float):
    model = _fitted(kind, sd)
    h = np.array([0.0, 1.0, 24.0, 168.0, 500.0, 720.0, 1000.0, 1500.0, 2500.0, 5000.0, 2e4])
    np.testing.assert_allclose(
        model.predict_failure_time_cdf(h), _per_level_cdf(model, h), rtol=1e-12, atol=1e-300
    )
    assert model.prob_failure_within(720.0) == pytest.approx(
        float(_per_level_cdf(model, np.array([720.0]))[0]), rel=1e-12
    )
    grid = np.array([[24.0, 720.0], [1000.0, 5000.0]])
    np.testing.assert_allclose(
        model.predict_failure_time_cdf(grid),
        _per_level_cdf(model, grid.ravel()).reshape(2, 2),
        rtol=1e-12,
    )


@pytest.mark.parametrize("kind", ["wiener", "first_passage"])
def test_failure_probability_ever_equals_the_per_level_average(kind: str):
    model = _fitted(kind, 0.1)
    levels = _levels(1.0, 0.1, model.last_signal_)
    if isinstance(model, WienerDegradation):
        d = levels - model.last_signal_
        m, s2 = model.drift_mean_, model.drift_var_
    else:
        d = np.log(levels) - model.last_log_signal_
        m, s2 = model.posterior_mean_[1], model.posterior_cov_[1, 1]
    expected = np.mean(
        [
            random_drift_failure_probability(
                distance=float(di), drift_mean=m, drift_var=s2, diffusion_var=model.sigma2_
            )
            for di in d
        ]
    )
    assert model.failure_probability_ever() == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("kind", ["wiener", "first_passage", "gebraeel"])
@pytest.mark.parametrize("sd", [0.1, 0.0])
def test_quantiles_match_a_doubling_search_with_tight_brent(kind: str, sd: float):
    # Reference: the first bracket of a doubling search from last_time/1000 h, then scipy brentq
    # to 1e-9 h; hours need 1e-3 relative, the model keeps to 1e-6.
    model = _fitted(kind, sd)
    qs = (0.01, 0.1, 0.5, 0.9, 0.99)

    def cdf(x: float) -> float:
        return float(model.predict_failure_time_cdf(np.array([x]))[0])

    expected = []
    for level in qs:
        lo, hi = 0.0, model.last_time_ * 1e-3
        while cdf(hi) < level:
            lo, hi = hi, 2.0 * hi
        expected.append(
            optimize.brentq(lambda x, q=level: cdf(x) - q, lo, hi, xtol=1e-9, rtol=1e-12)
        )
    got = model.time_to_failure_quantiles(qs)
    np.testing.assert_allclose(got, expected, rtol=1e-6)
    np.testing.assert_allclose([cdf(x) for x in got], qs, atol=1e-6)


def _invgauss_cdf(h: np.ndarray, mu: float, sigma: float, w: np.ndarray) -> np.ndarray:
    # scipy.stats.invgauss (reference library): mean w/mu, shape w²/sigma² (REFERENCES.md).
    mean, shape = w / mu, w**2 / sigma**2
    return stats.invgauss.cdf(h, mean / shape, scale=shape)


def test_distances_with_a_known_drift_match_scipy_invgauss():
    # Fixed drift (drift_var = 0): each level's passage time is inverse Gaussian (scipy).
    h = np.linspace(2.0, 60.0, 30)
    w = np.array([5.0, 8.0, 10.0, 12.5])
    got = random_drift_first_passage_cdf(
        h, distance=w[:, None], drift_mean=0.5, drift_var=0.0, diffusion_var=0.09
    )
    np.testing.assert_allclose(got, _invgauss_cdf(h, 0.5, 0.3, w[:, None]), atol=1e-12)


@pytest.mark.parametrize("sd", [0.0, 1.0])
def test_wiener_model_with_a_sharp_drift_prior_matches_a_scipy_invgauss_mixture(sd: float):
    # Reference: scipy.stats.invgauss for each equal-probability level of the scipy truncnorm
    # failure level, averaged; with sd = 0 the single inverse Gaussian (mean 20 h, var 7.2).
    t = np.arange(1.0, 21.0)
    model = WienerDegradation(
        threshold=20.0,
        threshold_sd=sd,
        prior_drift_mean=0.5,
        prior_drift_var=1e-14,
        sigma2=0.09,
        trend_significance=None,
    ).fit(t, 0.5 * t)
    levels = _levels(20.0, sd, 10.0) if sd > 0 else np.array([20.0])
    h = np.array([8.0, 15.0, 20.0, 25.0, 35.0])
    expected = _invgauss_cdf(h, 0.5, 0.3, levels[:, None] - 10.0).mean(axis=0)
    np.testing.assert_allclose(model.predict_failure_time_cdf(h), expected, atol=1e-6)
    if sd == 0:
        ref = stats.invgauss(mu=20.0 / (100.0 / 0.09), scale=100.0 / 0.09)
        np.testing.assert_allclose(
            model.time_to_failure_quantiles((0.1, 0.5, 0.9)), ref.ppf([0.1, 0.5, 0.9]), rtol=1e-6
        )
