"""Benchmark of the diagnosis: macro-F1 on held-out simulated pumps across operating regimes.

    .venv/bin/python -m bench diagnosis            # through the report
    .venv/bin/python -m bench.bench_diagnosis      # the figures alone

The service's built-in classifier (``prognosis_service/assessment/diagnosis_model.json``,
trained by ``wellspan train-diagnosis --simulated-only``: seed 2026, the first four Saltbush
Flats pumps, three training operating points) is judged on pumps it never saw: the other eight
units (their own bearing geometries), another seed, and three operating points none of the
training points share (``HELD_OUT_POINTS``). Each window goes through the real chain: simulator
→ extractor → diagnostic features against the unit's healthy baseline at the same point. The
figures: macro-F1 of the classifier alone and of the combined diagnosis the service reports
(rule evidence from the defect frequencies and orders, plus the classifier), overall and in the
worst regime, beside the rule evidence alone. Macro-F1 is scikit-learn's ``f1_score(...,
average="macro")``. Simulated data: evidence about the method, not a guarantee for a real
machine; diagnoses are advisory.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
from sklearn.metrics import f1_score

from edge_agent.simulator import SALTBUSH_ASSET_IDS
from prognosis_service.assessment.diagnosis_model import load_classifier
from prognosis_service.diagnosis import FaultClassifier, diagnose
from wellspan.training_data import HELD_OUT_POINTS, SimulatedCase, cases_table, simulate_cases

HELD_OUT_SEED = 4242
TRAINED_UNITS = 4  # the built-in model's units are SALTBUSH_ASSET_IDS[:4]


def held_out_cases(*, quick: bool) -> list[SimulatedCase]:
    units = SALTBUSH_ASSET_IDS[TRAINED_UNITS:]
    return simulate_cases(
        seed=HELD_OUT_SEED,
        asset_ids=units[:2] if quick else units,
        points=HELD_OUT_POINTS,
        severities=(0.4, 0.7) if quick else (0.2, 0.4, 0.7, 1.0),
        baseline_windows=6,
        healthy_windows=2 if quick else 4,
    )


def _predict_all(cases: Sequence[SimulatedCase], clf: FaultClassifier | None) -> np.ndarray:
    answers = [
        diagnose(
            c.values_by_name(), c.baseline, classifier=clf,
            shaft_speed_hz=c.shaft_speed_hz, defect_orders=c.defect_orders,
        ).fault
        for c in cases
    ]  # fmt: skip
    return np.array(answers)


def _macro_f1(y: np.ndarray, pred: np.ndarray) -> float:
    """Over the true classes: a "not sure" answer counts against the class it missed."""
    labels = sorted(set(y.tolist()))
    return float(f1_score(y, pred, labels=labels, average="macro", zero_division=0.0))


def _scores(y: np.ndarray, pred: np.ndarray, regime: np.ndarray) -> tuple[float, float, str]:
    overall = _macro_f1(y, pred)
    per = {r: _macro_f1(y[regime == r], pred[regime == r]) for r in sorted(set(regime.tolist()))}
    worst = min(per, key=lambda r: per[r])
    return overall, per[worst], worst


def run(*, quick: bool = False, report: Callable[..., None] | None = None) -> list[Any]:
    from bench.harness import Figure

    if report is not None:
        report(0, 4, "simulating held-out pumps")
    cases = held_out_cases(quick=quick)
    table = cases_table(cases)
    clf = load_classifier()
    if clf is None:
        raise RuntimeError("the built-in diagnosis model is missing")
    y, regime = table.y, table.regime
    n_units = len(set(table.unit_id.tolist()))
    note = (
        f"{len(y)} held-out windows: {n_units} unseen pumps × {len(HELD_OUT_POINTS)} unseen "
        f"operating points × {len(set(y.tolist()))} classes (healthy and 8 fault modes), seed "
        f"{HELD_OUT_SEED}"
    )
    figs: list[Any] = []
    steps: list[tuple[str, Callable[[], np.ndarray]]] = [
        ("classifier alone", lambda: clf.predict(clf.align(table.feature_names, table.X))),
        ("combined (as the service reports)", lambda: _predict_all(cases, clf)),
        ("rule evidence alone", lambda: _predict_all(cases, None)),
    ]
    for i, (label, predict) in enumerate(steps, start=1):
        if report is not None:
            report(i, 4, label)
        pred = predict()
        overall, worst, worst_regime = _scores(y, pred, regime)
        figs.append(Figure(name=f"diagnosis macro-F1, {label}", value=overall, unit="",
                           digits=3, notes=note))  # fmt: skip
        figs.append(Figure(name=f"diagnosis macro-F1, {label}, worst regime", value=worst,
                           unit="", digits=3, notes=f"worst of {len(HELD_OUT_POINTS)} regimes: "
                           f"{worst_regime}"))  # fmt: skip
        note = "the same windows"
    return figs


def main() -> int:
    for f in run():
        print(f"{f.name}: {f.value:.3f}  {f.notes}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
