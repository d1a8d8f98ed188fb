"""``wellspan train-diagnosis``: exit codes, bad input, the operator's labelled history, and the
built-in model reproduced from its seed."""

from __future__ import annotations

import json
import uuid
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pytest

from edge_agent.simulator import FaultScenario
from prognosis_service.assessment.assessor import assess_asset
from prognosis_service.assessment.diagnosis_model import (
    BUILTIN_MODEL,
    DiagnosisModelError,
    load_classifier,
)
from prognosis_service.assessment.models import MaintenanceEventRow
from prognosis_service.store.engine import Store
from tests.prognosis_service.assessment.simfleet import START, register, simulate, store_messages
from wellspan.cli import main


def test_the_built_in_model_is_reproduced_from_its_seed(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    out = tmp_path / "model.json"
    code = main(["train-diagnosis", "--simulated-only", "--output", str(out), "--json"])
    assert code == 0
    record = json.loads(capsys.readouterr().out)
    # Held-out units (grouped split): macro-F1 measured, not assumed; loose bound.
    assert record["held_out_macro_f1"] > 0.8, record
    fresh = json.loads(out.read_text())
    built_in = json.loads(BUILTIN_MODEL.read_text())
    assert fresh["trained"] == built_in["trained"]
    a, b = fresh["classifier"], built_in["classifier"]
    assert a["classes"] == b["classes"] and a["feature_names"] == b["feature_names"]
    np.testing.assert_allclose(a["coef"], b["coef"], rtol=1e-6, atol=1e-9)
    clf = load_classifier(str(out))
    assert clf is not None and "outer_race" in clf.classes_


@pytest.mark.parametrize(
    ("argv", "needle"),
    [
        (["--test-fraction", "1.5"], "--test-fraction"),
        (["--C", "0"], "--C"),
        (["--seed", "-1"], "--seed"),
        (["--output", "/nonexistent/dir/model.json"], "does not exist"),
    ],
)
def test_bad_input_exits_2_with_a_message(
    argv: list[str], needle: str, capsys: pytest.CaptureFixture[str]
) -> None:
    code = main(["train-diagnosis", "--simulated-only", *argv])
    assert code == 2
    assert needle in capsys.readouterr().err


def test_no_output_anywhere_is_a_usage_error(
    capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.delenv("WELLSPAN_DIAGNOSIS_MODEL_PATH", raising=False)
    monkeypatch.delenv("WELLSPAN_CONFIG", raising=False)
    assert main(["train-diagnosis", "--simulated-only"]) == 2
    assert "--output" in capsys.readouterr().err


def test_a_broken_model_file_is_reported(tmp_path: Path) -> None:
    bad = tmp_path / "bad.json"
    bad.write_text("{not json")
    with pytest.raises(DiagnosisModelError, match="not a saved diagnosis model"):
        load_classifier(str(bad))


def test_history_labelled_by_maintenance_events_is_added(
    store: Store, store_url: str, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    repair = START + timedelta(days=24, hours=1)
    scenario = FaultScenario(
        fault="outer_race", onset=START + timedelta(days=8), life_days=20.0, repair=repair
    )
    layout, msgs = simulate("MAL-P2", scenario, seed=3, hours=32 * 24, every_h=3.0)
    register(store, "MAL-P2")
    store_messages(store, layout, [m for m in msgs if m.window_start < repair])
    assess_asset(store, "MAL-P2")
    with store.write() as session:
        session.add(
            MaintenanceEventRow(
                event_id=uuid.uuid4(),
                asset_id="MAL-P2",
                at=repair,
                kind="repair",
                component="drive-end bearing",
                failure_mode="outer_race",
                notes="",
                performed_by="crew",
                recorded_at=datetime.now(UTC),
            )
        )
    out = tmp_path / "model.json"
    code = main(["train-diagnosis", "--database-url", store_url, "--output", str(out), "--json"])
    assert code == 0
    record = json.loads(capsys.readouterr().out)
    labelled = [n for n in record["notes"] if n.startswith("MAL-P2:")]
    # 14 days before the repair at 8 windows a day are labelled outer_race.
    assert labelled == ["MAL-P2: 112 labelled windows"], record["notes"]
    assert record["rows"] == 420 + 112
