"""Hotelling's T² limits and scores, and the per-regime baseline."""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy import stats

from prognosis_service.health import (
    HotellingT2,
    InvalidParameterError,
    NotEnoughDataError,
    NotFittedError,
    RegimeBaseline,
    RegimeBinning,
    t2_control_limit,
)

COV = np.array([[1.0, 0.5, 0.0], [0.5, 1.0, 0.2], [0.0, 0.2, 1.0]])
MEAN = np.array([0.0, 1.0, 2.0])


def test_control_limits_match_nist_check_values():
    # NIST/SEMATECH e-Handbook 6.5.4.3; check values m=50, p=3, alpha=0.01
    # (REFERENCES.md, computed).
    assert t2_control_limit(50, 3, alpha=0.01, phase="II") == pytest.approx(13.488, abs=5e-4)
    assert t2_control_limit(50, 3, alpha=0.01, phase="I") == pytest.approx(10.399, abs=5e-4)
    # The chi-square approximation (11.345, same source) is what the exact limits converge to.
    assert t2_control_limit(100_000, 3, alpha=0.01) == pytest.approx(
        stats.chi2.ppf(0.99, 3), rel=1e-3
    )


def test_fitted_model_reports_the_limits_of_its_own_baseline_size():
    # Same NIST values through the estimator (non-robust path keeps m = 50 rows).
    X = np.random.default_rng(0).multivariate_normal(MEAN, COV, size=50)
    model = HotellingT2(robust=False).fit(X)
    assert model.n_samples_ == 50
    assert model.control_limit() == pytest.approx(13.488, abs=5e-4)
    assert model.control_limit(phase="I") == pytest.approx(10.399, abs=5e-4)


def test_false_alarm_rate_on_healthy_normal_data_is_close_to_alpha():
    # The Phase II limit is the (1 - alpha) quantile of T² for a new in-control observation
    # (NIST/SEMATECH 6.5.4.3), so the alarm rate on fresh healthy data should be about alpha.
    rng = np.random.default_rng(1)
    model = HotellingT2(alpha=0.01).fit(rng.multivariate_normal(MEAN, COV, size=300))
    assert model.estimator_ == "min_cov_det"
    rate = model.predict(rng.multivariate_normal(MEAN, COV, size=20_000)).mean()
    assert abs(rate - 0.01) < 0.005


def test_the_one_sided_score_alarms_on_rises_only_at_half_the_rate():
    # Follmann (1996), JASA 91, 854-861: "T² over its limit and the sum of the departures
    # positive" has half the two-sided test's false-alarm rate under a symmetric distribution,
    # as the sum's sign is independent of T²; the α limit therefore gives α / 2.
    rng = np.random.default_rng(1)
    model = HotellingT2(alpha=0.01, robust=False).fit(rng.multivariate_normal(MEAN, COV, 3000))
    fresh = rng.multivariate_normal(MEAN, COV, size=100_000)
    signed = model.signed_score_samples(fresh)
    np.testing.assert_allclose(np.abs(signed), model.score_samples(fresh), rtol=1e-12)
    limit = model.control_limit()
    assert abs((signed > limit).mean() - 0.005) < 0.0015
    assert abs((np.abs(signed) > limit).mean() - 0.01) < 0.002
    # the same shift up and down: the same T², one alarm
    std = np.sqrt(np.diag(model.covariance_))
    up, down = model.location_ + 4 * std, model.location_ - 4 * std
    s_up, s_down = model.signed_score_samples(np.vstack([up, down]))
    assert s_up == pytest.approx(-s_down) and s_up > limit
    # a mixed departure takes the sign of its standardised sum
    mixed = model.location_ + np.array([3.0, -1.0, -1.0]) * std
    assert model.signed_score_samples(mixed[None, :])[0] > 0


def test_small_baseline_falls_back_to_shrunk_covariance_and_stays_conservative():
    rng = np.random.default_rng(2)
    model = HotellingT2(alpha=0.01).fit(rng.multivariate_normal(MEAN, COV, size=20))
    assert model.estimator_ == "ledoit_wolf"
    rate = model.predict(rng.multivariate_normal(MEAN, COV, size=20_000)).mean()
    assert rate < 0.03


def test_shifted_mean_is_detected_at_the_noncentral_chi2_rate():
    # With a known shift delta, T² of shifted points is about noncentral chi²(p, delta' S⁻¹ delta);
    # detection rate from scipy.stats.ncx2 (reference library; large m keeps estimation error
    # small).
    rng = np.random.default_rng(3)
    model = HotellingT2(alpha=0.01).fit(rng.multivariate_normal(MEAN, COV, size=2000))
    shift = np.array([2.0, -2.0, 0.0])
    nc = float(shift @ np.linalg.inv(COV) @ shift)
    expected = stats.ncx2.sf(model.control_limit(), 3, nc)
    detected = model.predict(rng.multivariate_normal(MEAN + shift, COV, size=5000)).mean()
    assert expected > 0.7
    assert detected == pytest.approx(expected, abs=0.04)


def test_gross_outliers_in_the_baseline_are_screened_out():
    # Common practice, no source: a robust baseline should not be inflated by a few bad rows.
    rng = np.random.default_rng(4)
    clean = rng.multivariate_normal(MEAN, COV, size=300)
    dirty = clean.copy()
    dirty[:15] += rng.normal(0.0, 15.0, size=(15, 3))
    robust = HotellingT2().fit(dirty)
    naive = HotellingT2(robust=False).fit(dirty)
    assert robust.n_screened_out_ >= 12
    test = rng.multivariate_normal(MEAN, COV, size=5000) + np.array([2.0, 2.0, 0.0])
    assert robust.predict(test).mean() > 2 * naive.predict(test).mean()


def test_state_round_trips_through_json():
    X = np.random.default_rng(5).multivariate_normal(MEAN, COV, size=120)
    model = HotellingT2(alpha=0.05).fit(X)
    again = HotellingT2.from_state(json.loads(json.dumps(model.to_state())))
    Y = X[:10] + 1.0
    np.testing.assert_allclose(again.score_samples(Y), model.score_samples(Y), rtol=1e-12)
    assert again.control_limit() == model.control_limit()


def test_hyper_parameter_messages_name_parameter_allowed_set_and_value():
    X = np.zeros((10, 2))
    with pytest.raises(InvalidParameterError) as err:
        HotellingT2(alpha=1.5).fit(X)
    assert (
        str(err.value) == "The 'alpha' parameter of HotellingT2 must be in (0, 1); got 1.5 instead."
    )
    with pytest.raises(
        InvalidParameterError, match=r"'phase' parameter of HotellingT2 must be one of"
    ):
        HotellingT2(phase="III").fit(X)
    with pytest.raises(ValueError, match="NaN or infinite"):
        HotellingT2().fit(np.array([[1.0, np.nan]] * 10))


def test_scoring_before_fit_raises_not_fitted():
    with pytest.raises(NotFittedError):
        HotellingT2().score_samples(np.zeros((2, 3)))


def test_too_few_baseline_rows_say_so():
    with pytest.raises(NotEnoughDataError) as err:
        HotellingT2().fit(np.random.default_rng(0).normal(size=(4, 3)))
    assert err.value.reason == "too_few_samples"


def _two_regime_data(rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Healthy indicators whose level and spread grow with speed (20 Hz vs 29 Hz)."""
    slow = rng.normal([1.0, 0.2, 0.05], [0.1, 0.02, 0.005], size=(n, 3))
    fast = rng.normal([2.5, 0.6, 0.12], [0.25, 0.06, 0.012], size=(n, 3))
    op = np.vstack(
        [
            np.column_stack([np.full(n, 20.0), np.full(n, 0.8)]),
            np.column_stack([np.full(n, 29.0), np.full(n, 0.8)]),
        ]
    )
    return np.vstack([slow, fast]), op


def test_regime_change_alone_raises_no_anomaly_but_a_fault_does():
    # Common practice, no source: compare like with like (per operating regime).
    rng = np.random.default_rng(6)
    X, op = _two_regime_data(rng, 400)
    binning = RegimeBinning(n_speed_bands=2, n_load_bands=1, speed_range_hz=(19.0, 30.0))
    baseline = RegimeBaseline(binning=binning).fit(X, op)
    new_fast = rng.normal([2.5, 0.6, 0.12], [0.25, 0.06, 0.012], size=(2000, 3))
    op_fast = np.column_stack([np.full(2000, 29.0), np.full(2000, 0.8)])
    verdict = baseline.assess(new_fast, op_fast)
    assert set(verdict.status) <= {"normal", "anomaly"}
    assert verdict.is_anomaly.mean() < 0.025
    # The same healthy samples against a baseline of the slow regime only are nearly all flagged,
    # so the check above can fail.
    slow_only = HotellingT2().fit(X[:400])
    assert slow_only.predict(new_fast).mean() > 0.95
    faulty = new_fast.copy()
    faulty[:, 2] += 6 * 0.012  # outer-race envelope amplitude up by six baseline sigmas
    assert baseline.assess(faulty, op_fast).is_anomaly.mean() > 0.9


def test_regime_without_enough_baseline_says_not_enough_data():
    rng = np.random.default_rng(7)
    X, op = _two_regime_data(rng, 200)
    X, op = X[:220], op[:220]  # only 20 fast samples
    binning = RegimeBinning(n_speed_bands=2, n_load_bands=1, speed_range_hz=(19.0, 30.0))
    baseline = RegimeBaseline(binning=binning, min_samples_per_regime=30).fit(X, op)
    assert baseline.has_baseline(0) and not baseline.has_baseline(1)
    assert baseline.n_samples_per_regime_ == {0: 200, 1: 20}
    verdict = baseline.assess(X[200:], op[200:])
    assert np.all(verdict.status == "not_enough_data")
    assert np.all(np.isnan(verdict.t2))
    assert np.all(np.isnan(baseline.transform(X[200:], op[200:])))


def test_regime_baseline_state_round_trips_through_json():
    rng = np.random.default_rng(8)
    X, op = _two_regime_data(rng, 100)
    binning = RegimeBinning(n_speed_bands=3, n_load_bands=1, speed_range_hz=(19.0, 30.0))
    baseline = RegimeBaseline(binning=binning).fit(X, op)
    again = RegimeBaseline.from_state(json.loads(json.dumps(baseline.to_state())))
    a, b = baseline.assess(X, op), again.assess(X, op)
    np.testing.assert_allclose(a.t2, b.t2, rtol=1e-12)
    assert list(a.status) == list(b.status)
    assert again.n_samples_per_regime_ == baseline.n_samples_per_regime_
