"""Prognostic metrics against their published definitions and check values."""

from __future__ import annotations

import numpy as np
import pytest

from prognosis_service.prognosis import (
    alpha_lambda_accuracy,
    interval_coverage,
    phm08_penalty,
    phm08_score,
    prognostic_horizon,
    relative_accuracy,
)


def test_phm08_check_values():
    # Saxena, Goebel, Simon & Eklund, PHM 2008; REFERENCES.md: d=-10 -> 1.15811, d=+10 -> 1.71828.
    assert phm08_penalty([90.0], [100.0])[0] == pytest.approx(1.15811, abs=5e-6)
    assert phm08_penalty([110.0], [100.0])[0] == pytest.approx(1.71828, abs=5e-6)
    assert phm08_penalty([100.0], [100.0])[0] == 0.0
    assert phm08_score([90.0, 110.0], [100.0, 100.0]) == pytest.approx(1.15811 + 1.71828, abs=1e-5)
    with pytest.raises(ValueError, match="same shape"):
        phm08_score([1.0, 2.0], [1.0])


def test_alpha_lambda_on_a_constructed_case():
    # Saxena et al., IJPHM 2010 (definition from memory): holds when
    # (1-alpha) r*(t_lambda) <= r(t_lambda) <= (1+alpha) r*(t_lambda),
    # with t_lambda = tP + lambda (tEoL - tP).
    # EoL 100 h, predictions every 10 h from tP = 0; truth at t is 100 - t.
    t = np.arange(0.0, 100.0, 10.0)
    truth = 100.0 - t
    est = truth.copy()
    est[5] = truth[5] * 1.25  # at t = 50 (lambda = 0.5): 25 % late -> fails alpha = 0.2
    est[6] = truth[6] * 0.85  # at t = 60 (lambda = 0.6): 15 % early -> passes alpha = 0.2
    est[8] = truth[8] * 1.2  # at t = 80: exactly on the bound -> passes (closed interval)
    got = alpha_lambda_accuracy(t, est, end_of_life=100.0, alpha=0.2, lambdas=[0.5, 0.6, 0.8, 0.85])
    # lambda = 0.85 -> t = 85: judged by the latest prediction (t = 80), which is on the bound
    assert got.tolist() == [False, True, True, True]
    assert alpha_lambda_accuracy(t, est, end_of_life=100.0, alpha=0.1, lambdas=[0.6]).tolist() == [
        False
    ]


def test_prognostic_horizon_and_relative_accuracy():
    # Saxena et al., IJPHM 2010 (definitions from memory). alpha-bounds r* +/- alpha tEoL = +/- 5 h.
    t = np.array([10.0, 30.0, 50.0, 70.0, 90.0])
    truth = 100.0 - t
    est = truth + np.array([20.0, 3.0, 8.0, -2.0, 1.0])
    assert prognostic_horizon(t, est, end_of_life=100.0, alpha=0.05) == 70.0
    assert prognostic_horizon(t, est, end_of_life=100.0, alpha=0.05, require_stay=True) == 30.0
    assert prognostic_horizon(t, truth + 50.0, end_of_life=100.0) == 0.0
    np.testing.assert_allclose(relative_accuracy(est, truth), 1 - np.abs(est - truth) / truth)
    assert relative_accuracy([45.0], [50.0])[0] == pytest.approx(0.9)


def test_interval_coverage_counts_truths_inside_closed_intervals():
    assert interval_coverage([0, 1, 2, 3], [1, 2, 3, np.inf], [1, 3, 2.5, 1e9]) == 0.75
    with pytest.raises(ValueError, match="must not exceed"):
        interval_coverage([2.0], [1.0], [1.5])
