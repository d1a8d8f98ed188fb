"""Simulated training and held-out data, generated once per test session (nothing cached on disk).

Training units and held-out units differ in asset (bearing geometry), seed (unit traits and every
window) and operating points, so the held-out checks test generalisation to new pumps and new
regimes, not recall.
"""

from __future__ import annotations

import pytest

from prognosis_service.diagnosis import DiagnosisTable, FaultClassifier
from wellspan.training_data import (
    HELD_OUT_POINTS,
    TRAINING_POINTS,
    SimulatedCase,
    cases_table,
    simulate_cases,
)

TRAINING_UNITS = ("MAL-P1", "MAL-P3", "GIB-P1")
HELD_OUT_UNITS = ("SPI-P2", "COO-P1")
TRAINING_SEED = 2026
HELD_OUT_SEED = 77


@pytest.fixture(scope="session")
def training_table() -> DiagnosisTable:
    return cases_table(
        simulate_cases(
            seed=TRAINING_SEED,
            asset_ids=TRAINING_UNITS,
            points=TRAINING_POINTS,
            severities=(0.5, 1.0),
            baseline_windows=4,
            healthy_windows=2,
        )
    )


@pytest.fixture(scope="session")
def held_out_cases() -> list[SimulatedCase]:
    return simulate_cases(
        seed=HELD_OUT_SEED,
        asset_ids=HELD_OUT_UNITS,
        points=HELD_OUT_POINTS,
        severities=(0.7,),
        baseline_windows=4,
        healthy_windows=2,
    )


@pytest.fixture(scope="session")
def held_out_table(held_out_cases: list[SimulatedCase]) -> DiagnosisTable:
    return cases_table(held_out_cases)


@pytest.fixture(scope="session")
def classifier(training_table: DiagnosisTable) -> FaultClassifier:
    return FaultClassifier().fit(
        training_table.X, training_table.y, feature_names=training_table.feature_names
    )
