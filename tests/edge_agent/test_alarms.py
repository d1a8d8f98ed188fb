"""Edge alarms: ISO 10816-3 zone changes, thresholds with hysteresis, persistent sensor faults."""

from __future__ import annotations

import uuid
from datetime import UTC, datetime, timedelta

from edge_agent.alarms import EdgeAlarmDetector
from edge_agent.config import AlarmConfig
from shared_schema import (
    ChannelQuality,
    EdgeAlarmKind,
    IndicatorLayout,
    IndicatorMessage,
    IndicatorSpec,
    QualityFlag,
)
from tests.edge_agent.helpers import small_asset

T0 = datetime(2026, 3, 1, tzinfo=UTC)
LAYOUT = IndicatorLayout(
    extractor_version="test",
    indicators=(
        IndicatorSpec(name="de_accel.velocity_rms", unit="mm/s", channel="de_accel"),
        IndicatorSpec(name="suction_pressure.mean", unit="kPa", channel="suction_pressure"),
    ),
)


def detector(**cfg: object) -> EdgeAlarmDetector:
    asset = small_asset("TST-P1")  # ISO 10816-3 group 2, rigid foundation (the default)
    return EdgeAlarmDetector(
        AlarmConfig.model_validate(cfg), {"TST-P1": asset}, {"TST-P1": LAYOUT},
        gateway_id="gw-test", site="test-site",
    )  # fmt: skip


def message(
    i: int, velocity: float, suction: float = 80.0, **quality: frozenset[QualityFlag]
) -> IndicatorMessage:
    return IndicatorMessage(
        message_id=uuid.uuid4(), gateway_id="gw-test", sequence=i, site="test-site",
        asset_id="TST-P1", window_start=T0 + timedelta(minutes=i), window_s=1.0,
        layout_digest=LAYOUT.digest, values=(velocity, suction),
        quality=tuple(ChannelQuality(channel=c, flags=f) for c, f in quality.items()),
    )  # fmt: skip


def test_zone_changes_follow_iso_10816_3_group_2_rigid_boundaries() -> None:
    # ISO 10816-3:2009 Annex A, group 2 rigid: A/B 1.4, B/C 2.8, C/D 4.5 mm/s
    # (secondary transcription, /work/shared/REFERENCES.md)
    d = detector(sensor_fault_windows=0)
    assert d.check(message(0, 1.0)) == []  # starts in A: nothing to report
    a = d.check(message(1, 1.5))
    assert [(x.zone_from, x.zone_to, x.cleared) for x in a] == [("A", "B", False)]
    assert a[0].threshold == 1.4 and a[0].kind is EdgeAlarmKind.ZONE_CHANGE
    assert d.check(message(2, 2.8)) == []  # on the boundary belongs to the lower zone
    assert [(x.zone_from, x.zone_to) for x in d.check(message(3, 4.6))] == [("B", "D")]
    # leaving D needs the value clear of 4.5 by the 5 % hysteresis
    assert d.check(message(4, 4.4)) == []
    back = d.check(message(5, 4.2))
    assert [(x.zone_from, x.zone_to, x.cleared) for x in back] == [("D", "C", True)]


def test_first_window_in_zone_c_or_d_raises_at_once() -> None:
    d = detector(sensor_fault_windows=0)
    first = d.check(message(0, 3.0))
    assert [(x.zone_from, x.zone_to) for x in first] == [(None, "C")]


def test_thresholds_raise_once_and_clear_past_the_hysteresis() -> None:
    d = detector(
        zone_change=False, sensor_fault_windows=0,
        thresholds={"suction_pressure.mean": {"low": 40.0, "hysteresis": 0.1}},
    )  # fmt: skip
    raised = [d.check(message(i, 1.0, s)) for i, s in enumerate([60, 39, 35, 42, 45])]
    assert [len(r) for r in raised] == [0, 1, 0, 0, 1]
    assert raised[1][0].value == 39 and raised[1][0].threshold == 40 and not raised[1][0].cleared
    assert raised[4][0].cleared  # 45 > 40 * 1.1


def test_sensor_fault_after_consecutive_flagged_windows() -> None:
    d = detector(zone_change=False, sensor_fault_windows=3)
    flat = frozenset({QualityFlag.FLATLINE})
    out = [d.check(message(i, 1.0, de_accel=flat)) for i in range(4)]
    assert [len(o) for o in out] == [0, 0, 1, 0]
    assert out[2][0].kind is EdgeAlarmKind.SENSOR_FAULT and out[2][0].channel == "de_accel"
    cleared = d.check(message(4, 1.0))
    assert len(cleared) == 1 and cleared[0].cleared
