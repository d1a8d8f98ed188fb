"""Labels from maintenance history and the history training table."""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import numpy as np
import pytest

from prognosis_service.diagnosis import IndicatorBaseline, label_maintenance_history
from shared_schema import MaintenanceEvent
from wellspan.training_data import history_training_table

T0 = datetime(2026, 3, 1, tzinfo=UTC)


def day(d: float) -> datetime:
    return T0 + timedelta(days=d)


def event(d: float, kind: str, mode: str | None = None, asset: str = "GIB-P1") -> MaintenanceEvent:
    return MaintenanceEvent.model_validate(
        {"asset_id": asset, "at": day(d), "kind": kind, "failure_mode": mode}
    )


def test_windows_before_a_failure_and_after_a_repair() -> None:
    times = [day(d) for d in (0, 5, 16, 19.5, 20.5, 22, 30, 36, 60)]
    events = [event(20, "failure", "inner_race"), event(21, "repair")]
    labels = label_maintenance_history(times, events)
    assert labels.tolist() == [
        None, None, "inner_race", "inner_race", None, "healthy", "healthy", None, None
    ]  # fmt: skip


def test_healthy_span_after_a_repair_stops_where_the_next_fault_span_starts() -> None:
    # the replacement at day 10 would label days 11-25 healthy, but the failure at day 20
    # labels days 10-20 with its mode, and after the failure the pump is not healthy
    times = [day(d) for d in (12, 18, 24)]
    events = [event(10, "replacement"), event(20, "failure", "cavitation")]
    labels = label_maintenance_history(times, events)
    assert labels.tolist() == ["cavitation", "cavitation", None]


def test_a_window_two_events_disagree_on_is_left_unlabelled() -> None:
    times = [day(d) for d in (8, 12, 22)]
    events = [event(20, "failure", "cavitation"), event(25, "repair", "impeller_wear")]
    labels = label_maintenance_history(times, events)
    assert labels.tolist() == ["cavitation", None, "impeller_wear"]


def test_fault_span_never_reaches_back_past_the_previous_repair() -> None:
    times = [day(d) for d in (8, 12)]
    events = [event(10, "repair"), event(14, "repair", "imbalance")]
    labels = label_maintenance_history(times, events, settle=timedelta(days=5))
    assert labels.tolist() == [None, "imbalance"]


def test_inspections_and_other_modes_label_nothing_before_them() -> None:
    times = [day(d) for d in (5, 9)]
    events = [event(10, "inspection", "outer_race"), event(10, "failure", "other")]
    assert label_maintenance_history(times, events).tolist() == [None, None]


def test_bad_history_input_is_refused() -> None:
    with pytest.raises(ValueError, match="timezone-aware"):
        label_maintenance_history([datetime(2026, 3, 1)], [])
    with pytest.raises(ValueError, match="several assets"):
        label_maintenance_history([day(0)], [event(1, "repair"), event(2, "repair", asset="X1")])
    with pytest.raises(ValueError, match="lookback must be a timedelta >= 0"):
        label_maintenance_history([day(0)], [], lookback=timedelta(days=-1))
    only = label_maintenance_history(
        [day(9)], [event(10, "repair", "cage"), event(10, "repair", "imbalance", asset="X1")],
        asset_id="GIB-P1",
    )  # fmt: skip
    assert only.tolist() == ["cage"]


def test_history_table_keeps_only_labelled_windows() -> None:
    names = ("de_accel.order_1x", "de_accel.env_bpfi")
    baseline = IndicatorBaseline(names, np.array([0.8, 4.0]), np.array([0.05, 1.0]))
    times = [day(d) for d in (0, 15, 19, 22, 25, 50)]
    X = np.array([[0.8, 4.0], [0.8, 12.0], [0.9, 20.0], [0.8, 4.5], [0.8, 3.5], [0.8, 4.0]])
    table = history_training_table(
        names, X, times, [event(20, "repair", "inner_race")], baseline=baseline,
        unit_id="GIB-P1",
    )  # fmt: skip
    assert table.y.tolist() == ["inner_race", "inner_race", "healthy", "healthy"]
    assert table.unit_id.tolist() == ["GIB-P1"] * 4
    bpfi = table.X[:, table.feature_names.index("de_accel.env_bpfi:db")]
    assert bpfi.tolist() == [8.0, 16.0, 0.5, -0.5]
    with pytest.raises(ValueError, match="vectors must have shape"):
        history_training_table(names, X[:2], times, [], baseline=baseline, unit_id="GIB-P1")
