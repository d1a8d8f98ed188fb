"""Baseline-relative features and the baseline container."""

from __future__ import annotations

import json

import numpy as np
import pytest
from scipy import stats

from prognosis_service.diagnosis import (
    DIFFERENTIAL_FEATURE,
    SUCTION_FEATURE,
    DiagnosisTable,
    IndicatorBaseline,
    diagnostic_features,
    window_features,
)

NAMES = (
    "de_accel.order_1x",
    "de_accel.env_bpfo",
    "de_accel.kurtosis",
    "de_accel.iso_zone",
    "bearing_temp.mean",
    "discharge_pressure.mean",
    "suction_pressure.mean",
)
MEDIAN = np.array([0.8, 3.0, 3.0, 1.0, 55.0, 650.0, 75.0])


def test_feature_values_follow_their_definitions() -> None:
    x = np.array([[1.6, 17.0, 6.0, 2.0, 60.0, 650.0, 75.0]])
    names, F = diagnostic_features(NAMES, x, MEDIAN)
    f = dict(zip(names, F[0], strict=True))
    assert f["de_accel.order_1x:db"] == pytest.approx(20 * np.log10(2.0))  # 6.02 dB (computed)
    assert f["de_accel.env_bpfo:db"] == pytest.approx(14.0)
    assert f["de_accel.kurtosis:log"] == pytest.approx(np.log(2.0))
    assert f["bearing_temp.mean:delta"] == pytest.approx(5.0)
    assert f[DIFFERENTIAL_FEATURE] == pytest.approx(0.0)
    assert f[SUCTION_FEATURE] == pytest.approx(0.0)
    assert not any(n.startswith("de_accel.iso_zone") for n in names)  # a zone is left out


def test_differential_pressure_is_scaled_by_the_affinity_laws() -> None:
    # Affinity laws (common practice): head ∝ n². Baseline 575 kPa at 25 Hz; at 27.5 Hz a
    # healthy pump gives 575 x 1.1² = 695.75 kPa, which is "no change".
    x = np.array([[0.8, 3.0, 3.0, 1.0, 55.0, 75.0 + 695.75, 75.0]])
    _, F = diagnostic_features(NAMES, x, MEDIAN, shaft_speed_hz=27.5, baseline_shaft_speed_hz=25.0)
    names, F_no_speed = diagnostic_features(NAMES, x, MEDIAN)
    i = names.index(DIFFERENTIAL_FEATURE)
    assert F[0, i] == pytest.approx(0.0, abs=1e-12)
    assert F_no_speed[0, i] == pytest.approx(0.21)


def test_suction_fall_is_relative_to_the_baseline_differential() -> None:
    x = np.array([[0.8, 3.0, 3.0, 1.0, 55.0, 650.0 - 57.5, 75.0 - 57.5]])
    names, F = diagnostic_features(NAMES, x, MEDIAN)
    assert F[0, names.index(SUCTION_FEATURE)] == pytest.approx(-0.1)  # 57.5 / 575
    assert F[0, names.index(DIFFERENTIAL_FEATURE)] == pytest.approx(0.0)


def test_missing_values_and_missing_baselines_give_no_change() -> None:
    x = np.array([[None, 17.0, 3.0, 1.0, 55.0, 650.0, 75.0]], dtype=object)
    median = MEDIAN.copy()
    median[1] = np.nan
    names, F = diagnostic_features(NAMES, x, median)
    assert np.all(np.isfinite(F))
    assert F[0, names.index("de_accel.order_1x:db")] == 0.0
    assert F[0, names.index("de_accel.env_bpfo:db")] == 0.0


def test_features_are_clipped() -> None:
    x = np.array([[1e9, 3.0, 3.0, 1.0, 55.0, 650.0, 75.0]])
    names, F = diagnostic_features(NAMES, x, MEDIAN)
    assert F[0, names.index("de_accel.order_1x:db")] == 60.0


def test_per_row_baselines_broadcast() -> None:
    x = np.array([[1.6, 3.0, 3.0, 1.0, 55.0, 650.0, 75.0]] * 2)
    median = np.vstack([MEDIAN, MEDIAN * np.array([2.0, 1, 1, 1, 1, 1, 1])])
    names, F = diagnostic_features(NAMES, x, median)
    col = F[:, names.index("de_accel.order_1x:db")]
    assert col == pytest.approx([20 * np.log10(2.0), 0.0])


@pytest.mark.parametrize(
    ("x", "median", "message"),
    [
        (np.zeros((2, 3)), MEDIAN, "X must have shape"),
        (np.zeros((2, 7)), MEDIAN[:3], "median must have shape"),
    ],
)
def test_shape_errors_name_the_argument(x: np.ndarray, median: np.ndarray, message: str) -> None:
    with pytest.raises(ValueError, match=message):
        diagnostic_features(NAMES, x, median)


def test_window_features_use_names_in_both_window_and_baseline() -> None:
    b = IndicatorBaseline(NAMES[:2], MEDIAN[:2], np.ones(2))
    names, f = window_features({"de_accel.order_1x": 1.6, "other.thing": 3.0}, b)
    assert names == ("de_accel.order_1x:db",)
    assert f == pytest.approx([20 * np.log10(2.0)])


def test_baseline_median_and_spread_match_scipy() -> None:
    """Spread is the normal-consistent MAD: scipy.stats.median_abs_deviation(scale="normal")."""
    rng = np.random.default_rng(0)
    X = rng.normal([0.8, 4.0], [0.05, 1.0], size=(41, 2))
    X[3, 0] = np.nan
    b = IndicatorBaseline.from_windows(("a.x", "a.y"), X, shaft_speed_hz=rng.uniform(29, 30, 41))
    for j in range(2):
        col = X[:, j][np.isfinite(X[:, j])]
        assert b.median[j] == pytest.approx(np.median(col))
        assert b.spread[j] == pytest.approx(stats.median_abs_deviation(col, scale="normal"))
    assert 29.0 < b.shaft_speed_hz < 30.0  # type: ignore[operator]


def test_baseline_state_round_trip_keeps_unknowns() -> None:
    b = IndicatorBaseline(("a.x", "a.y"), np.array([1.0, np.nan]), np.array([0.1, np.nan]), 25.0)
    back = IndicatorBaseline.from_state(json.loads(json.dumps(b.to_state())))
    assert back.names == b.names
    np.testing.assert_array_equal(back.median, b.median)
    np.testing.assert_array_equal(back.spread, b.spread)
    assert back.shaft_speed_hz == 25.0


def test_baseline_refuses_inconsistent_input() -> None:
    with pytest.raises(ValueError, match="median and spread must have shape"):
        IndicatorBaseline(("a.x",), np.zeros(2), np.zeros(2))
    with pytest.raises(ValueError, match="no healthy windows"):
        IndicatorBaseline.from_windows(("a.x",), np.zeros((0, 1)))


def test_table_checks_and_selects() -> None:
    r, u = np.array(["r"] * 3), np.array(["u"] * 3)
    t = DiagnosisTable(("f",), np.zeros((3, 1)), np.array(["healthy", "cage", "cage"]), r, u)
    assert len(t.select(t.y == "cage")) == 2
    assert len(DiagnosisTable.concatenate([t, t])) == 6
    with pytest.raises(ValueError, match="y must have shape"):
        DiagnosisTable(("f",), np.zeros((3, 1)), np.array(["healthy"]), r, u)
