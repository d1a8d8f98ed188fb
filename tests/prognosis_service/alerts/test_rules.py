"""Alert rules: hysteresis, de-duplication, lifecycle, rule settings."""

from __future__ import annotations

import json
import uuid
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pytest

from prognosis_service.alerts.rules import (
    AlertEngine,
    AlertKind,
    AlertRulesConfig,
    AlertRulesError,
    AlertState,
    AnomalyReading,
    AnomalyRule,
    ChangeKind,
    ChannelQualityReading,
    DiagnosisReading,
    LastHeardReading,
    RuleSet,
    TimeToFailureReading,
    ZoneReading,
    ZoneRule,
    load_rules,
    severity_zone,
)
from shared_schema.messages import AlertSeverity, FaultMode, QualityFlag

T0 = datetime(2026, 3, 1, 6, 0, tzinfo=UTC)
WINDOW = timedelta(minutes=10)


def anomaly(i: int, ratio: float, asset: str = "MAL-P1") -> AnomalyReading:
    return AnomalyReading(
        site="Mallee", asset_id=asset, at=T0 + i * WINDOW, score=10.0 * ratio, control_limit=10.0
    )


def run(engine: AlertEngine, state: AlertState, readings: list) -> list:
    changes = []
    for r in readings:
        changes.extend(engine.evaluate(state, r))
    return changes


def test_noise_around_the_limit_does_not_flap() -> None:
    # A ratio wandering around the raise limit, then around the clear limit: with hysteresis
    # the alert opens once and resolves once; a rule without hysteresis flaps many times.
    rng = np.random.default_rng(0)
    ratios = np.concatenate(
        [
            np.full(20, 1.5),
            1.0 + rng.normal(0, 0.05, 500),
            0.8 + rng.normal(0, 0.05, 500),
            np.full(20, 0.3),
        ]
    )
    readings = [anomaly(i, float(r)) for i, r in enumerate(ratios)]
    changes = run(AlertEngine(), AlertState(), readings)
    assert [c.change for c in changes] == [ChangeKind.OPENED, ChangeKind.RESOLVED]
    assert changes[1].alert.detail["resolved_by"] == "system"

    naive_rule = AnomalyRule(
        limit=1.0,
        clear_limit=0.999,
        windows_over=1,
        windows_considered=1,
        clear_windows=1,
        min_hold_s=0,
    )
    naive = AlertEngine(AlertRulesConfig(defaults=RuleSet(anomaly=naive_rule)))
    naive_changes = run(naive, AlertState(), readings)
    assert len(naive_changes) > 100  # the comparison shows the test can fail


def test_alert_storm_is_one_open_alert() -> None:
    engine = AlertEngine()
    state = AlertState()
    changes = run(engine, state, [anomaly(i, 1.5) for i in range(1000)])
    assert [c.change for c in changes] == [ChangeKind.OPENED]
    assert len(state.live_alerts()) == 1
    # escalation is one update, not a new alert
    more = run(engine, state, [anomaly(1000 + i, 2.5) for i in range(1000)])
    assert [c.change for c in more] == [ChangeKind.UPDATED]
    assert more[0].alert.alert_id == changes[0].alert.alert_id
    assert more[0].alert.severity is AlertSeverity.CRITICAL
    # severity does not fall back while the alert is live
    assert run(engine, state, [anomaly(2000 + i, 1.5) for i in range(50)]) == []


def test_n_of_m_windows() -> None:
    engine = AlertEngine()  # default: 3 over of the last 5
    state = AlertState()
    pattern = [1.2, 0.9, 1.2, 0.9, 0.9, 0.9, 1.2]  # never 3 over within 5
    assert run(engine, state, [anomaly(i, r) for i, r in enumerate(pattern)]) == []
    changes = run(engine, state, [anomaly(10 + i, r) for i, r in enumerate([1.2, 0.9, 1.2])])
    assert [c.change for c in changes] == [ChangeKind.OPENED]
    assert changes[0].alert.opened_at == T0 + 12 * WINDOW


def test_sustained_duration_mode() -> None:
    rule = AnomalyRule(sustain_s=3600)
    engine = AlertEngine(AlertRulesConfig(defaults=RuleSet(anomaly=rule)))
    state = AlertState()
    # over for 50 min, one dip, over again: the hour restarts at the dip
    ratios = [1.2] * 6 + [0.9] + [1.2] * 6
    assert run(engine, state, [anomaly(i, r) for i, r in enumerate(ratios)]) == []
    changes = run(engine, state, [anomaly(13, 1.2)])
    assert [c.change for c in changes] == [ChangeKind.OPENED]


def test_minimum_hold_time() -> None:
    rule = AnomalyRule(min_hold_s=6 * 3600)
    engine = AlertEngine(AlertRulesConfig(defaults=RuleSet(anomaly=rule)))
    state = AlertState()
    opened = run(engine, state, [anomaly(i, 1.5) for i in range(3)])
    assert [c.change for c in opened] == [ChangeKind.OPENED]
    # well below the clear limit, but before the hold time has passed: still open
    assert run(engine, state, [anomaly(3 + i, 0.2) for i in range(20)]) == []
    cleared = run(engine, state, [anomaly(40, 0.2)])
    assert [c.change for c in cleared] == [ChangeKind.RESOLVED]


def test_lifecycle_acknowledge_then_resolve_with_who_and_when() -> None:
    engine = AlertEngine()
    state = AlertState()
    (opened,) = run(engine, state, [anomaly(i, 1.5) for i in range(3)])
    alert_id = opened.alert.alert_id
    ack_at = T0 + timedelta(hours=1)
    ack = engine.acknowledge(state, alert_id, by="r.ngata", at=ack_at)
    assert ack.change is ChangeKind.ACKNOWLEDGED
    assert ack.alert.state == "acknowledged"
    assert ack.alert.detail["acknowledged_by"] == "r.ngata"
    assert ack.alert.detail["acknowledged_at"] == "2026-03-01T07:00:00Z"
    with pytest.raises(ValueError, match="only an open alert"):
        engine.acknowledge(state, alert_id, by="r.ngata", at=ack_at)
    res = engine.resolve(state, alert_id, by="j.moss", at=ack_at + WINDOW, note="bearing greased")
    assert res.alert.state == "resolved"
    assert res.alert.detail["resolved_by"] == "j.moss"
    assert res.alert.detail["resolution"] == "bearing greased"
    assert [ack.revision, res.revision] == [2, 3]
    assert len({opened.event_id, ack.event_id, res.event_id}) == 3
    with pytest.raises(KeyError):
        engine.resolve(state, alert_id, by="j.moss", at=ack_at)


def test_hand_resolve_rearms_after_clear_or_on_escalation() -> None:
    engine = AlertEngine()
    state = AlertState()
    (opened,) = run(engine, state, [anomaly(i, 1.5) for i in range(3)])
    engine.resolve(state, opened.alert.alert_id, by="j.moss", at=T0 + 3 * WINDOW)
    # still over: no new alert for the same severity
    assert run(engine, state, [anomaly(3 + i, 1.5) for i in range(10)]) == []
    # worse than what was resolved: a new alert
    (worse,) = run(engine, state, [anomaly(13, 2.5)])
    assert worse.change is ChangeKind.OPENED
    assert worse.alert.severity is AlertSeverity.CRITICAL
    assert worse.alert.alert_id != opened.alert.alert_id
    # clears, then rises again: yet another alert
    cleared = run(engine, state, [anomaly(200 + i, 0.1) for i in range(3)])
    assert [c.change for c in cleared] == [ChangeKind.RESOLVED]
    again = run(engine, state, [anomaly(300 + i, 1.5) for i in range(3)])
    assert [c.change for c in again] == [ChangeKind.OPENED]


def test_late_or_repeated_reading_is_ignored() -> None:
    engine = AlertEngine()
    state = AlertState()
    # a reading delivered three times counts once: 2 distinct windows over do not raise
    assert run(engine, state, [anomaly(0, 1.5)] * 3 + [anomaly(1, 1.5)] * 3) == []
    run(engine, state, [anomaly(2, 1.5)])
    assert run(engine, state, [anomaly(0, 0.1) for _ in range(5)]) == []
    assert len(state.live_alerts()) == 1


def test_state_round_trips_through_json() -> None:
    engine = AlertEngine()
    readings = [anomaly(i, r) for i, r in enumerate([1.2, 0.9, 1.2, 1.3, 0.7, 0.5, 0.1, 0.1])]
    straight = AlertState()
    expected = run(engine, straight, readings)
    persisted = AlertState()
    got = []
    for r in readings:
        got += engine.evaluate(persisted, r)
        persisted = AlertState.from_dict(json.loads(json.dumps(persisted.to_dict())))
    assert [(c.change, c.alert, c.event_id) for c in got] == [
        (c.change, c.alert, c.event_id) for c in expected
    ]
    assert [c.change for c in got] == [ChangeKind.OPENED, ChangeKind.RESOLVED]


def test_ids_are_deterministic() -> None:
    a = run(AlertEngine(), AlertState(), [anomaly(i, 1.5) for i in range(3)])
    b = run(AlertEngine(), AlertState(), [anomaly(i, 1.5) for i in range(3)])
    assert a[0].alert.alert_id == b[0].alert.alert_id
    assert a[0].event_id == b[0].event_id
    assert isinstance(a[0].event_id, uuid.UUID)


# ------------------------------------------------------------------------------ each cause


def zone(i: int, v: float) -> ZoneReading:
    return ZoneReading(
        site="Gibber",
        asset_id="GIB-P2",
        at=T0 + i * WINDOW,
        velocity_rms_mm_s=v,
        channel="de_accel",
    )


def test_iso_10816_3_zone_boundaries() -> None:
    # ISO 10816-3:2009 Annex A, group 2 (15–300 kW), rigid foundation: A/B 1.4, B/C 2.8,
    # C/D 4.5 mm/s (secondary transcription, see /work/shared/REFERENCES.md).
    rule = ZoneRule()
    assert [severity_zone(v, rule) for v in (1.0, 1.4, 2.79, 2.8, 4.49, 4.5, 9.0)] == list(
        "ABBCCDD"
    )


def test_zone_change_opens_escalates_and_clears() -> None:
    engine = AlertEngine()
    state = AlertState()
    assert run(engine, state, [zone(i, 2.0) for i in range(5)]) == []  # zone B: no alert
    opened = run(engine, state, [zone(5 + i, 3.1) for i in range(3)])
    assert [c.change for c in opened] == [ChangeKind.OPENED]
    assert opened[0].alert.kind == AlertKind.SEVERITY_ZONE
    assert opened[0].alert.severity is AlertSeverity.WARNING
    assert (opened[0].alert.detail["zone_from"], opened[0].alert.detail["zone_to"]) == ("B", "C")
    up = run(engine, state, [zone(8 + i, 4.8) for i in range(3)])
    assert [c.change for c in up] == [ChangeKind.UPDATED]
    assert up[0].alert.severity is AlertSeverity.CRITICAL
    assert (up[0].alert.detail["zone_from"], up[0].alert.detail["zone_to"]) == ("C", "D")
    # 2.6 mm/s is zone B but above the clear level (0.9 × 2.8 = 2.52): stays open
    assert run(engine, state, [zone(20 + i, 2.6) for i in range(10)]) == []
    cleared = run(engine, state, [zone(40 + i, 2.0) for i in range(3)])
    assert [c.change for c in cleared] == [ChangeKind.RESOLVED]


def ttf(i: int, days: float | None, risk: float = 0.1) -> TimeToFailureReading:
    return TimeToFailureReading(
        site="Spinifex",
        asset_id="SPI-P3",
        at=T0 + i * timedelta(hours=1),
        risk=risk,
        time_to_failure_s=None if days is None else days * 86400,
    )


def test_time_to_failure_shorter_than_crew_lead_time() -> None:
    engine = AlertEngine()  # lead time 7 d, risk 0.1, clear above 1.25 × 7 d
    state = AlertState()
    assert run(engine, state, [ttf(i, 10.0) for i in range(5)]) == []
    opened = run(engine, state, [ttf(5 + i, 6.0) for i in range(2)])
    assert [c.change for c in opened] == [ChangeKind.OPENED]
    assert opened[0].alert.severity is AlertSeverity.WARNING
    crit = run(engine, state, [ttf(7 + i, 3.0) for i in range(2)])
    assert [c.change for c in crit] == [ChangeKind.UPDATED]
    assert run(engine, state, [ttf(20 + i, 8.0) for i in range(5)]) == []  # inside the band
    cleared = run(engine, state, [ttf(40 + i, None) for i in range(2)])
    assert [c.change for c in cleared] == [ChangeKind.RESOLVED]
    with pytest.raises(ValueError, match=r"risk .* must be the rule's risk = 0\.1, got 0\.5"):
        engine.evaluate(state, ttf(60, 1.0, risk=0.5))


def diag(i: int, mode: FaultMode, confidence: float = 0.9) -> DiagnosisReading:
    return DiagnosisReading(
        site="Coolibah",
        asset_id="COO-P1",
        at=T0 + i * WINDOW,
        fault_mode=mode,
        confidence=confidence,
    )


def test_diagnosis_change_is_confirmed_followed_and_cleared() -> None:
    engine = AlertEngine()  # 3 confident windows confirm a mode
    state = AlertState()
    seq = [FaultMode.HEALTHY] * 3 + [FaultMode.OUTER_RACE] * 2 + [FaultMode.HEALTHY]
    assert run(engine, state, [diag(i, m) for i, m in enumerate(seq)]) == []
    # an unsure diagnosis neither confirms nor breaks a run
    assert run(engine, state, [diag(6, FaultMode.CAVITATION, confidence=0.3)]) == []
    opened = run(engine, state, [diag(7 + i, FaultMode.OUTER_RACE) for i in range(3)])
    assert [c.change for c in opened] == [ChangeKind.OPENED]
    assert opened[0].alert.detail["fault_mode"] == "outer_race"
    assert opened[0].alert.detail["fault_mode_before"] == "healthy"
    moved = run(engine, state, [diag(10 + i, FaultMode.INNER_RACE) for i in range(3)])
    assert [c.change for c in moved] == [ChangeKind.UPDATED]
    assert moved[0].alert.detail["fault_mode"] == "inner_race"
    assert moved[0].alert.detail["fault_mode_before"] == "outer_race"
    cleared = run(engine, state, [diag(200 + i, FaultMode.HEALTHY) for i in range(3)])
    assert [c.change for c in cleared] == [ChangeKind.RESOLVED]


def test_gateway_and_asset_silence() -> None:
    engine = AlertEngine()  # silent after 1 h
    state = AlertState()
    heard = T0

    def gw(minutes: int, last: datetime | None) -> LastHeardReading:
        return LastHeardReading(
            site="Mallee",
            gateway_id="mallee-gw1",
            at=T0 + timedelta(minutes=minutes),
            last_heard_at=last,
        )

    assert run(engine, state, [gw(30, heard)]) == []
    (opened,) = run(engine, state, [gw(61, heard), gw(90, heard)])
    assert opened.alert.kind == AlertKind.GATEWAY_SILENT
    assert opened.alert.gateway_id == "mallee-gw1" and opened.alert.asset_id is None
    (cleared,) = run(engine, state, [gw(95, T0 + timedelta(minutes=94))])
    assert cleared.change is ChangeKind.RESOLVED
    asset = LastHeardReading(
        site="Mallee", asset_id="MAL-P2", at=T0 + timedelta(hours=5), last_heard_at=None
    )
    (never,) = engine.evaluate(state, asset)
    assert never.alert.kind == AlertKind.ASSET_SILENT
    assert "never heard" in never.alert.summary


def test_sensor_fault_is_per_channel() -> None:
    engine = AlertEngine()
    state = AlertState()

    def q(i: int, channel: str, *flags: QualityFlag) -> ChannelQualityReading:
        return ChannelQualityReading(
            site="Gibber",
            asset_id="GIB-P1",
            at=T0 + i * WINDOW,
            channel=channel,
            flags=frozenset(flags),
        )

    readings = []
    for i in range(5):
        readings.append(q(i, "de_accel", QualityFlag.FLATLINE))
        readings.append(q(i, "nde_accel", QualityFlag.CLIPPED))
        readings.append(q(i, "motor_current", QualityFlag.SPIKES_REMOVED))  # not a fault flag
    changes = run(engine, state, readings)
    assert sorted(c.alert.detail["channel"] for c in changes) == ["de_accel", "nde_accel"]
    assert all(c.alert.kind == AlertKind.SENSOR_FAULT for c in changes)


def test_unknown_reading_type_is_refused() -> None:
    with pytest.raises(TypeError, match="reading must be one of"):
        AlertEngine().evaluate(AlertState(), "not a reading")  # type: ignore[arg-type]


def test_naive_time_is_refused() -> None:
    with pytest.raises(ValueError, match="timezone-aware"):
        AnomalyReading(
            site="Mallee", asset_id="MAL-P1", at=datetime(2026, 3, 1), score=1, control_limit=1
        )


# ----------------------------------------------------------------------------- rule settings


def test_per_site_and_class_settings(tmp_path: Path) -> None:
    path = tmp_path / "alert_rules.toml"
    path.write_text(
        """
[defaults.anomaly]
windows_over = 2
windows_considered = 4

[asset_classes.end_suction_pump.severity_zone]
bc_boundary_mm_s = 4.5
cd_boundary_mm_s = 7.1

[sites.Coolibah.severity_zone]
cd_boundary_mm_s = 6.0

[sites.Mallee.time_to_failure]
crew_lead_time_s = 1209600.0
"""
    )
    cfg = load_rules(path)
    assert cfg.for_asset("Gibber").anomaly.windows_over == 2
    assert cfg.for_asset("Gibber").severity_zone.bc_boundary_mm_s == 2.8
    pump = cfg.for_asset("Gibber", "end_suction_pump").severity_zone
    assert (pump.bc_boundary_mm_s, pump.cd_boundary_mm_s) == (4.5, 7.1)
    site = cfg.for_asset("Coolibah", "end_suction_pump").severity_zone
    assert (site.bc_boundary_mm_s, site.cd_boundary_mm_s) == (4.5, 6.0)  # site wins
    assert cfg.for_asset("Mallee").time_to_failure.crew_lead_time_s == 14 * 86400


@pytest.mark.parametrize(
    ("toml", "message"),
    [
        ("[defaults.anomaly]\nwindow_over = 3\n", r"line 2: defaults\.anomaly\.window_over"),
        ("[defaults.anomaly]\nclear_limit = 1.5\n", r"clear_limit must be below limit"),
        (
            "[sites.Mallee.anomaly]\nwindows_over = 9\n",
            r"line 1: sites\.Mallee\.anomaly: windows_over must be <= windows_considered = 5, "
            r"got 9",
        ),
        ("[sites.Mallee.anomalyy]\nlimit = 2\n", r"sites\.Mallee\.anomalyy"),
        ("[defaults.anomaly\n", r"not valid TOML"),
    ],
)
def test_bad_settings_name_file_key_and_line(tmp_path: Path, toml: str, message: str) -> None:
    path = tmp_path / "alert_rules.toml"
    path.write_text(toml)
    with pytest.raises(AlertRulesError, match=message) as info:
        load_rules(path)
    assert str(path) in str(info.value)


def test_rules_can_be_replaced_at_run_time() -> None:
    engine = AlertEngine()
    state = AlertState()
    assert run(engine, state, [anomaly(i, 1.2) for i in range(2)]) == []
    engine.rules = AlertRulesConfig(defaults=RuleSet(anomaly=AnomalyRule(limit=1.5)))
    assert run(engine, state, [anomaly(2 + i, 1.2) for i in range(5)]) == []  # below 1.5 now
    with pytest.raises(TypeError, match="rules must be an AlertRulesConfig"):
        engine.rules = {"defaults": {}}  # type: ignore[assignment]


def test_sample_settings_file_documents_every_key_with_its_default() -> None:
    import re

    import prognosis_service.alerts as alerts_pkg

    sample = Path(alerts_pkg.__file__).with_name("alert_rules.sample.toml")
    assert load_rules(sample) == AlertRulesConfig()
    text = sample.read_text()
    for section, field in RuleSet.model_fields.items():
        block = text.split(f"[defaults.{section}]", 1)[1].split("\n[", 1)[0]
        for key in field.annotation.model_fields:  # type: ignore[union-attr]
            assert re.search(rf"^#? ?{key} =", block, flags=re.M), f"{section}.{key} undocumented"
