"""The combined diagnosis on hand-built windows (rules alone and with a classifier)."""

from __future__ import annotations

import numpy as np
import pytest

from prognosis_service.diagnosis import (
    ADVISORY,
    NOT_SURE,
    Diagnosis,
    FaultClassifier,
    IndicatorBaseline,
    diagnose,
    diagnostic_features,
    pool_diagnoses,
)

NAMES = ("de_accel.order_1x", "de_accel.order_2x", "de_accel.env_bpfo")
MEDIAN = np.array([0.8, 0.2, 3.0])
SPREAD = np.array([0.04, 0.02, 1.0])
BASELINE = IndicatorBaseline(NAMES, MEDIAN, SPREAD, shaft_speed_hz=29.5)


def values(o1: float = 0.8, o2: float = 0.2, bpfo: float = 3.0) -> dict[str, float | None]:
    return dict(zip(NAMES, (o1, o2, bpfo), strict=True))


def test_no_evidence_and_no_classifier_is_healthy() -> None:
    d = diagnose(values(), BASELINE)
    assert d.fault == "healthy"
    assert d.confidence == 1.0
    assert d.evidence == ()
    assert d.summary.startswith("Healthy")
    assert d.advisory == ADVISORY
    assert "do not replace" in ADVISORY or "does not replace" in ADVISORY


def test_strong_rule_evidence_names_the_fault() -> None:
    d = diagnose(values(bpfo=25.0), BASELINE, shaft_speed_hz=29.5, defect_orders={"bpfo": 3.58})
    assert d.fault == "outer_race"
    assert d.confidence == pytest.approx(1.0)
    assert d.sentences[0].startswith("drive-end envelope line at 3.58× shaft speed")
    assert "outer race bearing defect" in d.summary


def test_conflicting_evidence_is_not_sure_with_two_candidates() -> None:
    d = diagnose(values(o1=2.4, bpfo=25.0), BASELINE, min_confidence=0.6)
    assert d.fault == NOT_SURE
    assert set(d.candidates) == {"outer_race", "imbalance"}
    assert d.summary.startswith("Not sure")
    assert sum(d.probabilities.values()) == pytest.approx(1.0)


def _trained_classifier() -> FaultClassifier:
    rng = np.random.default_rng(0)
    rows, labels = [], []
    for mode, centre in {
        "healthy": (0.8, 0.2, 3.0),
        "imbalance": (2.4, 0.2, 3.0),
        "outer_race": (0.8, 0.2, 20.0),
    }.items():
        rows.append(np.array(centre) * rng.lognormal(0, 0.08, (30, 3)))
        labels += [mode] * 30
    names, F = diagnostic_features(NAMES, np.vstack(rows), MEDIAN)
    return FaultClassifier().fit(F, labels, feature_names=names)


def test_classifier_and_rules_combine() -> None:
    clf = _trained_classifier()
    d = diagnose(values(o1=2.3), BASELINE, classifier=clf)
    assert d.fault == "imbalance"
    assert d.classifier_probabilities is not None
    assert d.classifier_probabilities["imbalance"] > 0.9
    assert d.probabilities["imbalance"] == pytest.approx(d.confidence)
    # with all weight on the classifier the pooled answer is the classifier's own
    only = diagnose(values(o1=2.3), BASELINE, classifier=clf, rule_weight=0.0)
    assert only.probabilities["imbalance"] == pytest.approx(
        only.classifier_probabilities["imbalance"]  # type: ignore[index]
    )
    healthy = diagnose(values(), BASELINE, classifier=clf)
    assert healthy.fault == "healthy"


@pytest.mark.parametrize("kw", [{"rule_weight": 1.5}, {"min_confidence": -0.1}])
def test_bad_options_are_refused(kw: dict[str, float]) -> None:
    with pytest.raises(ValueError, match="must be a number in"):
        diagnose(values(), BASELINE, **kw)  # type: ignore[arg-type]


def _said(probabilities: dict[str, float]) -> Diagnosis:
    lead = max(probabilities, key=lambda m: probabilities[m])
    fault = lead if probabilities[lead] >= 0.5 else NOT_SURE
    return Diagnosis(fault, probabilities[lead], probabilities, None, (), (lead,), "")


def test_pooled_windows_name_the_fault_one_window_was_not_sure_of() -> None:
    sure = _said({"rolling_element": 0.7, "cage": 0.2, "healthy": 0.1})
    unsure = _said({"rolling_element": 0.45, "cage": 0.4, "healthy": 0.15})
    assert unsure.fault == NOT_SURE
    d = pool_diagnoses([sure, unsure])
    assert d.fault == "rolling_element"
    assert d.confidence == pytest.approx(0.575)
    assert d.probabilities == pytest.approx(
        {"rolling_element": 0.575, "cage": 0.3, "healthy": 0.125}
    )
    assert sum(d.probabilities.values()) == pytest.approx(1.0)
    assert list(d.probabilities) == ["rolling_element", "cage", "healthy"]  # best first


def test_pooled_windows_that_disagree_are_not_sure_with_both_candidates() -> None:
    one = _said({"imbalance": 0.6, "misalignment": 0.3, "healthy": 0.1})
    other = _said({"imbalance": 0.3, "misalignment": 0.6, "healthy": 0.1})
    d = pool_diagnoses([one, other])
    assert d.fault == NOT_SURE
    assert d.confidence == pytest.approx(0.45)
    assert set(d.candidates) == {"imbalance", "misalignment"}
    assert d.summary.startswith("Not sure")


def test_pooling_keeps_the_latest_windows_evidence_and_needs_a_diagnosis() -> None:
    older = diagnose(values(), BASELINE)
    latest = diagnose(
        values(bpfo=25.0), BASELINE, shaft_speed_hz=29.5, defect_orders={"bpfo": 3.58}
    )
    d = pool_diagnoses([older, latest])
    assert d.evidence == latest.evidence and d.evidence
    assert pool_diagnoses([latest]) is latest
    with pytest.raises(ValueError, match="at least one"):
        pool_diagnoses([])
