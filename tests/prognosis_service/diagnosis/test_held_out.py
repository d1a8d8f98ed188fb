"""Diagnosis of held-out simulated units through the real chain (simulator -> extractor ->
features -> classifier and rules).

The held-out units are other pumps (other bearing geometries), another seed and other operating
points than the training units (see conftest.py). Macro-F1 is checked against
``sklearn.metrics.f1_score`` (scikit-learn reference implementation; Pedregosa et al., JMLR 12
(2011) 2825-2830).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from sklearn.metrics import f1_score

from edge_agent.simulator import FAULT_MODES
from prognosis_service.diagnosis import DiagnosisTable, FaultClassifier, diagnose
from wellspan.training_data import (
    HELD_OUT_POINTS,
    OperatingPoint,
    SimulatedCase,
    cases_table,
    simulate_cases,
)

from .conftest import HELD_OUT_SEED, HELD_OUT_UNITS


def _macro_f1(y_true: np.ndarray, y_pred: np.ndarray) -> float:
    """Macro-F1 by its definition: the mean over classes (in y_true or y_pred) of 2PR/(P+R)."""
    scores = []
    for c in np.union1d(y_true, y_pred):
        tp = np.sum((y_pred == c) & (y_true == c))
        fp = np.sum((y_pred == c) & (y_true != c))
        fn = np.sum((y_pred != c) & (y_true == c))
        scores.append(0.0 if tp == 0 else 2 * tp / (2 * tp + fp + fn))
    return float(np.mean(scores))


def test_held_out_units_are_diagnosed_in_every_regime(
    classifier: FaultClassifier, held_out_table: DiagnosisTable
) -> None:
    t = held_out_table
    assert set(t.y) == set(FAULT_MODES)
    assert not set(t.unit_id) & {"MAL-P1#2026", "MAL-P3#2026", "GIB-P1#2026"}
    pred = classifier.predict(classifier.align(t.feature_names, t.X))
    macro = _macro_f1(t.y, pred)
    assert macro == pytest.approx(f1_score(t.y, pred, average="macro"))
    assert macro >= 0.9
    for mode in FAULT_MODES:
        accuracy = np.mean(pred[t.y == mode] == mode)
        assert accuracy >= 0.75, (mode, accuracy)
    assert len(set(t.regime)) == len(HELD_OUT_POINTS)
    for regime in set(t.regime):
        m = t.regime == regime
        assert np.mean(pred[m] == t.y[m]) >= 0.85, regime


def test_combined_diagnosis_names_the_held_out_faults(
    classifier: FaultClassifier, held_out_cases: list[SimulatedCase]
) -> None:
    answers = [
        diagnose(
            c.values_by_name(), c.baseline, classifier=classifier,
            shaft_speed_hz=c.shaft_speed_hz, defect_orders=c.defect_orders,
        ).fault
        for c in held_out_cases
    ]  # fmt: skip
    truth = np.array([c.fault for c in held_out_cases])
    assert np.mean(np.array(answers) == truth) >= 0.9
    healthy = [a for a, c in zip(answers, held_out_cases, strict=True) if c.fault == "healthy"]
    assert healthy and all(a == "healthy" for a in healthy)


def test_outer_race_evidence_names_the_multiple_of_the_faulty_bearing(
    held_out_cases: list[SimulatedCase],
) -> None:
    outer = [c for c in held_out_cases if c.fault == "outer_race"]
    assert outer
    for c in outer:
        channel = "de_accel" if c.faulty_bearing == "de" else "nde_accel"
        d = diagnose(
            c.values_by_name(), c.baseline, shaft_speed_hz=c.shaft_speed_hz,
            defect_orders=c.defect_orders,
        )  # fmt: skip
        multiple = f"{c.defect_orders[channel]['bpfo']:.2f}× shaft speed"
        found = [e for e in d.evidence if e.mode == "outer_race" and channel in e.indicators[0]]
        assert found, [e.sentence for e in d.evidence]
        assert multiple in found[0].sentence
        assert "outer race defect frequency" in found[0].sentence


def test_regime_change_alone_is_diagnosed_healthy(
    classifier: FaultClassifier, held_out_cases: list[SimulatedCase]
) -> None:
    """A healthy held-out unit moved within its regime band (+5 % speed, warmer fluid, lower
    tank) and compared with the baseline taken at the band's centre stays healthy."""
    point = HELD_OUT_POINTS[1]
    centre = next(c for c in held_out_cases if c.regime == point.label)
    shifted = OperatingPoint(
        speed_rpm=point.speed_rpm * 1.05,
        fluid_temperature_c=point.fluid_temperature_c + 4.0,
        supply_pressure_kpa=point.supply_pressure_kpa - 3.0,
    )
    moved = simulate_cases(
        seed=HELD_OUT_SEED, asset_ids=(centre.asset_id,), points=(shifted,),
        faults=("healthy",), baseline_windows=3, healthy_windows=3,
    )  # fmt: skip
    for c in moved:
        against_centre = replace(c, baseline=centre.baseline)
        d = diagnose(
            against_centre.values_by_name(), centre.baseline, classifier=classifier,
            shaft_speed_hz=c.shaft_speed_hz, defect_orders=c.defect_orders,
        )  # fmt: skip
        assert d.fault == "healthy", (d.summary, d.probabilities)
    table = cases_table([replace(c, baseline=centre.baseline) for c in moved])
    pred = classifier.predict(classifier.align(table.feature_names, table.X))
    assert pred.tolist() == ["healthy"] * len(moved)


def test_simulated_cases_are_reproducible_from_the_seed() -> None:
    kw = dict(
        asset_ids=(HELD_OUT_UNITS[0],), points=HELD_OUT_POINTS[:1],
        faults=("healthy", "imbalance"), severities=(1.0,), baseline_windows=3,
        healthy_windows=1,
    )  # fmt: skip
    a = simulate_cases(seed=5, **kw)  # type: ignore[arg-type]
    b = simulate_cases(seed=5, **kw)  # type: ignore[arg-type]
    c = simulate_cases(seed=6, **kw)  # type: ignore[arg-type]
    assert [x.fault for x in a] == ["healthy", "imbalance"]
    for x, y in zip(a, b, strict=True):
        np.testing.assert_array_equal(x.values, y.values)
        np.testing.assert_array_equal(x.baseline.median, y.baseline.median)
    assert not np.array_equal(a[1].values, c[1].values, equal_nan=True)


def test_training_table_shape(training_table: DiagnosisTable) -> None:
    t = training_table
    assert set(t.y) == set(FAULT_MODES)
    assert t.X.shape == (len(t), len(t.feature_names))
    assert np.all(np.isfinite(t.X))
    assert len(set(t.unit_id)) == 3 and len(set(t.regime)) == 3
    assert not any("iso_zone" in n or n.endswith(":hz") for n in t.feature_names)


def test_bad_generator_options_are_refused() -> None:
    with pytest.raises(ValueError, match="faults must be among"):
        simulate_cases(seed=1, faults=("spalling",))
    with pytest.raises(ValueError, match="severities must be"):
        simulate_cases(seed=1, severities=(0.0,))
    with pytest.raises(ValueError, match="speed_rpm must lie"):
        OperatingPoint(speed_rpm=900.0)
