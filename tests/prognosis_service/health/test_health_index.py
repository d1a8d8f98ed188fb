"""Health index per failure mode against a per-regime baseline."""

from __future__ import annotations

import json

import numpy as np
import pytest

from prognosis_service.health import HealthIndex, NotFittedError, RegimeBinning

NAMES = [
    "de_accel.env_bpfo",
    "nde_accel.env_bpfo",
    "de_accel.env_bpfi",
    "de_accel.order_1x",
    "de_accel.high_band_rms",
    "suction_pressure.mean",
    "discharge_pressure.mean",
]
BINNING = RegimeBinning(n_speed_bands=2, n_load_bands=1, speed_range_hz=(19.0, 30.0))


def _healthy(rng: np.random.Generator, n: int, speed_hz: float) -> tuple[np.ndarray, np.ndarray]:
    """Healthy indicators whose amplitudes and pressures both rise with speed."""
    k = speed_hz / 20.0
    amp = np.array([0.02, 0.015, 0.01, 1.2, 0.3]) * k**2
    amplitudes = amp * rng.lognormal(0.0, 0.08, size=(n, 5))
    pressures = rng.normal([150.0 * k, 600.0 * k**2], [3.0, 6.0], size=(n, 2))
    op = np.column_stack([np.full(n, speed_hz), np.full(n, 0.8)])
    return np.hstack([amplitudes, pressures]), op


def _fitted(rng: np.random.Generator) -> HealthIndex:
    slow, op_slow = _healthy(rng, 300, 20.0)
    fast, op_fast = _healthy(rng, 300, 29.0)
    return HealthIndex(binning=BINNING).fit(
        NAMES, np.vstack([slow, fast]), np.vstack([op_slow, op_fast])
    )


def test_healthy_samples_score_near_zero_in_every_regime():
    rng = np.random.default_rng(0)
    hi = _fitted(rng)
    assert hi.failure_modes_ == [
        "bearing_outer_race",
        "bearing_inner_race",
        "imbalance",
        "cavitation",
        "impeller_wear",
    ]
    for speed in (20.0, 29.0):
        X, op = _healthy(rng, 500, speed)
        med = np.median(hi.transform(NAMES, X, op), axis=0)
        assert np.all(np.abs(med) < 0.05)


def test_failure_threshold_maps_to_one_and_other_modes_stay_healthy():
    # By construction of the scale (0 = baseline, 1 = failure level: 10x the baseline envelope
    # amplitude; the level itself is common practice, no source).
    rng = np.random.default_rng(1)
    hi = _fitted(rng)
    X, op = _healthy(rng, 200, 29.0)
    base = np.median(hi.transform(NAMES, X, op), axis=0)
    worn = X.copy()
    worn[:, 1] *= 10.0  # non-drive-end outer race: the worst channel counts
    out = hi.transform(NAMES, worn, op)
    j = hi.failure_modes_.index("bearing_outer_race")
    assert np.median(out[:, j]) - base[j] == pytest.approx(1.0, abs=0.05)
    others = np.delete(np.median(out, axis=0), j)
    assert np.all(np.abs(others) < 0.05)


def test_mode_index_is_the_mean_over_its_rules_and_falling_pressure_counts():
    rng = np.random.default_rng(2)
    hi = _fitted(rng)
    X, op = _healthy(rng, 300, 20.0)
    low_suction = X.copy()
    low_suction[:, 5] -= 6.0 * 3.0  # 6 baseline sigmas below: the suction rule reaches 1
    j = hi.failure_modes_.index("cavitation")
    # high-band RMS is at baseline (rule ~0), so the two-rule mean is about 0.5
    assert np.median(hi.transform(NAMES, low_suction, op)[:, j]) == pytest.approx(0.5, abs=0.08)


def test_column_order_does_not_matter_and_missing_indicators_are_named():
    rng = np.random.default_rng(3)
    hi = _fitted(rng)
    X, op = _healthy(rng, 20, 29.0)
    order = np.random.default_rng(9).permutation(len(NAMES))
    np.testing.assert_allclose(
        hi.transform([NAMES[i] for i in order], X[:, order], op), hi.transform(NAMES, X, op)
    )
    with pytest.raises(ValueError, match=r"suction_pressure\.mean"):
        hi.transform(NAMES[:5] + NAMES[6:], np.delete(X, 5, axis=1), op)
    with pytest.raises(ValueError, match="no indicator name matches"):
        HealthIndex().fit(["motor_current.rms"], np.ones((40, 1)), np.ones((40, 2)))


def test_regime_without_baseline_gives_nan_and_state_round_trips():
    rng = np.random.default_rng(4)
    X, op = _healthy(rng, 100, 20.0)
    hi = HealthIndex(binning=BINNING).fit(NAMES, X, op)
    fast, op_fast = _healthy(rng, 5, 29.0)
    assert np.all(np.isnan(hi.transform(NAMES, fast, op_fast)))
    again = HealthIndex.from_state(json.loads(json.dumps(hi.to_state())))
    np.testing.assert_allclose(again.transform(NAMES, X, op), hi.transform(NAMES, X, op))
    assert again.failure_modes_ == hi.failure_modes_
    with pytest.raises(NotFittedError):
        HealthIndex().transform(NAMES, X, op)
