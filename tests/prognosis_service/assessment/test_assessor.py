"""The assessor over a real store (SQLite and PostgreSQL): simulated pumps through the whole chain.

Pumps are simulated (invented data, our Saltbush Flats scenario), extracted by the gateway's
extractor, encoded and stored by the service pipeline; every check is on behaviour.
"""

from __future__ import annotations

import random
import re
import uuid
from datetime import UTC, datetime, timedelta

import numpy as np
import pytest
from sqlalchemy import select

from edge_agent.simulator import FaultScenario
from prognosis_service.alerts.rules import (
    AnomalyReading,
    ChannelQualityReading,
    DiagnosisReading,
    Reading,
    TimeToFailureReading,
    ZoneReading,
)
from prognosis_service.assessment.assessor import (
    AssessmentConfig,
    _acquire,
    _aggregate,
    _bucket_width,
    _degradation_series,
    assess_asset,
    model_from_state,
)
from prognosis_service.assessment.baseline import OUTSIDE_SPEED_RANGE
from prognosis_service.assessment.diagnosis_model import load_classifier
from prognosis_service.assessment.models import (
    AssetAssessment,
    HealthPointRow,
    MaintenanceEventRow,
)
from prognosis_service.assessment.worker import AssessmentWorker, assets_due
from prognosis_service.prognosis import ExponentialDegradation, WienerDegradation
from prognosis_service.store.engine import Store
from shared_schema import ChannelQuality, IndicatorLayout, IndicatorMessage, QualityFlag
from tests.prognosis_service.assessment.simfleet import START, register, simulate, store_messages

HEALTHY = FaultScenario()
OUTER = FaultScenario(fault="outer_race", onset=START + timedelta(days=8), life_days=20.0)
EVERY_H = 3.0


def _assess_all(store: Store, asset_id: str, **kw: object) -> None:
    """Assess until nothing is left (the assessor takes bounded batches)."""
    for _ in range(50):
        out = assess_asset(store, asset_id, classifier=load_classifier(), **kw)  # type: ignore[arg-type]
        if not out.backlog:
            return
    raise AssertionError("assessment did not finish")


def _row(store: Store, asset_id: str) -> AssetAssessment:
    with store.read() as session:
        row = session.get(AssetAssessment, asset_id)
        assert row is not None
        return row


def _points(store: Store, asset_id: str) -> list[HealthPointRow]:
    with store.read() as session:
        return list(
            session.scalars(
                select(HealthPointRow)
                .where(HealthPointRow.asset_id == asset_id)
                .order_by(HealthPointRow.window_start, HealthPointRow.message_id)
            )
        )


def _event(store: Store, asset_id: str, at: datetime, kind: str, mode: str | None = None) -> None:
    with store.write() as session:
        session.add(
            MaintenanceEventRow(
                event_id=uuid.uuid4(),
                asset_id=asset_id,
                at=at,
                kind=kind,
                component="de bearing",
                failure_mode=mode,
                notes="",
                performed_by="test crew",
                recorded_at=datetime.now(UTC),
            )
        )


def test_a_healthy_pump_stays_below_its_limit(store: Store) -> None:
    layout, msgs = simulate("MAL-P1", HEALTHY, seed=11, hours=14 * 24, every_h=EVERY_H)
    register(store, "MAL-P1")
    store_messages(store, layout, msgs)
    _assess_all(store, "MAL-P1")
    row = _row(store, "MAL-P1")
    assert row.status == "no_degradation", row.message
    assert row.result is not None and row.result["model_state"] is None
    points = _points(store, "MAL-P1")
    scored = [p for p in points if p.anomaly_score is not None]
    # Every window scored (the baseline ones too) but the few at speeds the baseline never saw.
    outside = [p for p in points if (p.excluded_reason or "").startswith(OUTSIDE_SPEED_RANGE)]
    assert len(scored) + len(outside) == len(points) == len(msgs)
    assert len(outside) <= 0.05 * len(msgs), len(outside)
    over = np.mean([p.anomaly_score > p.control_limit for p in scored])  # type: ignore[operator]
    # alpha = 0.01 per window; the baseline windows are in-sample. Loose: under 5 %.
    assert over < 0.05, over
    diag = row.result["diagnosis"]
    assert diag["fault"] in ("healthy", "not_sure")


def test_a_degrading_pump_gets_an_ordered_forecast_and_the_right_fault(store: Store) -> None:
    layout, msgs = simulate("MAL-P2", OUTER, seed=3, hours=24 * 24, every_h=EVERY_H)
    register(store, "MAL-P2")
    store_messages(store, layout, msgs)
    outcome = assess_asset(store, "MAL-P2", classifier=load_classifier())
    assert outcome.processed == len(msgs)
    row = _row(store, "MAL-P2")
    assert row.status == "forecast", row.message
    result = row.result
    assert result is not None
    assert result["failure_mode"] == "outer_race"
    assert result["diagnosis"]["fault"] == "outer_race"
    assert any("outer race" in s for s in result["diagnosis"]["evidence"])
    model = model_from_state(result["model_state"])
    q10, q50, q90 = model.time_to_failure_quantiles((0.1, 0.5, 0.9))
    assert 0 < q10 < q50 < q90
    # Truth: failure at day 28, last window near day 24 -> about 96 h left. Loose: within a
    # factor of three of the median.
    assert 96 / 3 < q50 < 96 * 3, q50
    kinds = {type(r) for r in outcome.readings}
    assert {AnomalyReading, ZoneReading, TimeToFailureReading, DiagnosisReading} <= kinds


@pytest.mark.parametrize("mature", [384, 96])
def test_a_healthy_pumps_baseline_matures_in_doubling_steps(store: Store, mature: int) -> None:
    # 48 windows of baseline, then refits on 96 and 192 windows as as many are scored after it,
    # up to the mature size
    cfg = AssessmentConfig(mature_windows=mature)
    n = cfg.baseline_windows
    steps = [k * n for k in (2, 4) if k * n <= mature]
    layout, msgs = simulate("MAL-P1", HEALTHY, seed=11, hours=24 * 25, every_h=EVERY_H)
    register(store, "MAL-P1")
    store_messages(store, layout, msgs)
    _assess_all(store, "MAL-P1", config=cfg)
    points = _points(store, "MAL-P1")
    assert len(points) == len(msgs)
    judged = [p for p in points if not p.excluded]  # a few wait at new speeds, kept apart
    assert 4 * n < len(judged) < len(points)
    state = _row(store, "MAL-P1").state
    assert [g["windows"] for g in state["growths"]] == steps
    assert state["target"] == state["baseline"]["n_windows"] == steps[-1]
    assert state["baseline_end"][1] == judged[steps[-1] - 1].message_id.hex
    assert all(p.anomaly_score is not None for p in judged)


def test_a_degrading_pumps_baseline_does_not_grow_over_its_defect(store: Store) -> None:
    layout, msgs = simulate("MAL-P2", OUTER, seed=3, hours=24 * 24, every_h=EVERY_H)
    register(store, "MAL-P2")
    store_messages(store, layout, msgs)
    _assess_all(store, "MAL-P2")
    state = _row(store, "MAL-P2").state
    assert OUTER.onset is not None
    grown = [datetime.fromisoformat(g["key"][0]) for g in state.get("growths", [])]
    assert all(at < OUTER.onset for at in grown), grown


def test_a_repair_starts_a_new_life_segment(store: Store) -> None:
    repair = START + timedelta(days=24, hours=1)
    scenario = FaultScenario(
        fault="outer_race", onset=START + timedelta(days=8), life_days=20.0, repair=repair
    )
    layout, msgs = simulate("MAL-P2", scenario, seed=3, hours=32 * 24, every_h=EVERY_H)
    register(store, "MAL-P2")
    before = [m for m in msgs if m.window_start < repair]
    after = [m for m in msgs if m.window_start >= repair]
    store_messages(store, layout, before)
    _assess_all(store, "MAL-P2")
    assert _row(store, "MAL-P2").status == "forecast"
    _event(store, "MAL-P2", repair, "repair", "outer_race")
    store_messages(store, layout, after)
    _assess_all(store, "MAL-P2")
    row = _row(store, "MAL-P2")
    assert row.segment_start == repair
    assert row.status in ("no_degradation", "no_baseline"), row.message
    assert row.result is not None and row.result["model_state"] is None
    points = _points(store, "MAL-P2")
    old = [p for p in points if p.window_start < repair]
    new = [p for p in points if p.window_start >= repair]
    assert len(old) == len(before)  # the old segment's history is kept
    assert {p.segment_start for p in new} == {repair}
    scored = [p for p in new if p.anomaly_score is not None]
    assert scored and np.mean([p.anomaly_score < p.control_limit for p in scored]) > 0.9  # type: ignore[operator]


def _fingerprint(store: Store, asset_id: str) -> tuple[object, ...]:
    row = _row(store, asset_id)
    assert row.result is not None
    points = [
        (p.window_start, p.regime, p.anomaly_score, p.health, p.excluded_reason)
        for p in _points(store, asset_id)
    ]
    return (row.status, row.result["model_state"], row.result["failure_mode"], points)


def test_late_data_refits_to_the_in_order_result(store: Store, tmp_path: object) -> None:
    layout, msgs = simulate("MAL-P2", OUTER, seed=3, hours=24 * 24, every_h=EVERY_H)
    register(store, "MAL-P2")
    register(store, "MAL-P3")
    # In order: one asset gets everything at once.
    store_messages(store, layout, msgs)
    _assess_all(store, "MAL-P2")
    in_order = _fingerprint(store, "MAL-P2")

    # Out of order, for a copy under another asset id: late windows after the baseline, then
    # late windows inside the baseline period (which forces a reassessment of the segment).
    copy = [
        m.model_copy(
            update={
                "asset_id": "MAL-P3",
                "message_id": uuid.uuid5(m.message_id, "copy"),
                "gateway_id": "gw-copy",
            }
        )
        for m in msgs
    ]
    # Late windows at a speed outside the baseline's force a reassessment too (in window order
    # they might have brought an extension of the baseline forward): leave them in order here.
    outside = {
        p.window_start
        for p in _points(store, "MAL-P2")
        if (p.excluded_reason or "").startswith(OUTSIDE_SPEED_RANGE)
    }
    rng = random.Random(5)
    in_range = [i for i in range(80, len(copy)) if copy[i].window_start not in outside]
    late_after = set(rng.sample(in_range, 30))
    late_inside = set(rng.sample(range(5, 40), 5))
    first = [m for i, m in enumerate(copy) if i not in late_after | late_inside]
    store_messages(store, layout, first)
    _assess_all(store, "MAL-P3")
    store_messages(store, layout, [copy[i] for i in sorted(late_after, reverse=True)])
    out = assess_asset(store, "MAL-P3", classifier=load_classifier())
    assert out.late == len(late_after) and not out.reset
    store_messages(store, layout, [copy[i] for i in sorted(late_inside)])
    out = assess_asset(store, "MAL-P3", classifier=load_classifier())
    assert out.reset
    _assess_all(store, "MAL-P3")
    assert _fingerprint(store, "MAL-P3") == in_order


def test_flagged_windows_are_excluded_visibly(store: Store) -> None:
    layout, msgs = simulate("MAL-P1", HEALTHY, seed=11, hours=10 * 24, every_h=EVERY_H)
    register(store, "MAL-P1")
    flagged = {3, 50, 60}
    bad = ChannelQuality(channel="de_accel", flags=frozenset({QualityFlag.CLIPPED}))
    fixed = ChannelQuality(
        channel="nde_accel", flags=frozenset({QualityFlag.SPIKES_REMOVED}), spikes_removed=2
    )
    changed = [
        m.model_copy(update={"quality": (bad,)})
        if i in flagged
        else m.model_copy(update={"quality": (fixed,)})
        if i == 61
        else m
        for i, m in enumerate(msgs)
    ]
    store_messages(store, layout, changed)
    outcome = assess_asset(store, "MAL-P1", classifier=load_classifier())
    points = _points(store, "MAL-P1")
    excluded = [
        p for p in points if p.excluded and not p.excluded_reason.startswith(OUTSIDE_SPEED_RANGE)
    ]
    assert [p.window_start for p in excluded] == [msgs[i].window_start for i in sorted(flagged)]
    assert all(p.excluded_reason == "quality flags: de_accel clipped" for p in excluded)
    assert all(p.anomaly_score is None and p.health is None for p in excluded)
    spiky = next(p for p in points if p.window_start == msgs[61].window_start)
    assert not spiky.excluded  # removed spikes are a repair, not a reason to drop the window
    quality = [r for r in outcome.readings if isinstance(r, ChannelQualityReading)]
    assert {(r.channel, frozenset(r.flags)) for r in quality} == {
        ("de_accel", frozenset({QualityFlag.CLIPPED})),
        ("nde_accel", frozenset({QualityFlag.SPIKES_REMOVED})),
    }


def test_not_enough_data_says_so_in_plain_words(store: Store) -> None:
    layout, msgs = simulate("MAL-P1", HEALTHY, seed=11, hours=36, every_h=EVERY_H)
    register(store, "MAL-P1")
    store_messages(store, layout, msgs)
    assess_asset(store, "MAL-P1", classifier=None)
    row = _row(store, "MAL-P1")
    assert row.status == "no_baseline"
    assert row.message.startswith(f"not enough data yet: {len(msgs)} healthy windows of the 48")


def test_a_leased_asset_is_left_to_its_holder(store: Store) -> None:
    layout, msgs = simulate("MAL-P1", HEALTHY, seed=11, hours=36, every_h=EVERY_H)
    register(store, "MAL-P1")
    store_messages(store, layout, msgs)
    assert _acquire(store, "MAL-P1", "other-process", 300.0)
    out = assess_asset(store, "MAL-P1", owner="this-process")
    assert not out.leased and out.processed == 0
    assert not _acquire(store, "MAL-P1", "this-process", 300.0)
    assert _acquire(store, "MAL-P1", "other-process", 300.0)  # the holder renews


def test_batches_are_bounded_and_resume(store: Store) -> None:
    layout, msgs = simulate("MAL-P1", HEALTHY, seed=11, hours=14 * 24, every_h=EVERY_H)
    register(store, "MAL-P1")
    store_messages(store, layout, msgs)
    cfg = AssessmentConfig(batch_windows=40)
    out = assess_asset(store, "MAL-P1", config=cfg)
    assert out.processed == 40 and out.backlog
    assert assets_due(store, limit=10) == ["MAL-P1"]
    while out.backlog:
        out = assess_asset(store, "MAL-P1", config=cfg)
    assert len(_points(store, "MAL-P1")) == len(msgs)
    assert assets_due(store, limit=10) == []


def test_the_worker_assesses_in_the_background_and_survives_errors(store: Store) -> None:
    layout, msgs = simulate("MAL-P1", HEALTHY, seed=11, hours=10 * 24, every_h=EVERY_H)
    register(store, "MAL-P1")
    store_messages(store, layout, msgs)
    got: list[Reading] = []
    calls = {"n": 0}

    def on_readings(readings: list[Reading]) -> None:
        calls["n"] += 1
        if calls["n"] == 1:
            raise RuntimeError("the alert service is down")
        got.extend(readings)

    worker = AssessmentWorker(store, interval_s=0.05, on_readings=on_readings)
    worker.start()
    try:
        for _ in range(400):
            if _row_or_none(store, "MAL-P1") is not None and calls["n"] >= 1:
                break
            worker._stop.wait(0.05)
        # New windows after the failed callback are still assessed and delivered.
        more = simulate("MAL-P1", HEALTHY, seed=11, hours=12 * 24, every_h=EVERY_H)[1]
        store_messages(store, layout, more[len(msgs) :])
        for _ in range(400):
            if got:
                break
            worker._stop.wait(0.05)
    finally:
        worker.stop()
    assert worker.errors >= 1
    assert any(isinstance(r, ZoneReading) for r in got)
    assert len(_points(store, "MAL-P1")) == len(more)


def _row_or_none(store: Store, asset_id: str) -> AssetAssessment | None:
    with store.read() as session:
        return session.get(AssetAssessment, asset_id)


@pytest.mark.parametrize("kind", ["inspection"])
def test_an_inspection_keeps_the_life_segment(store: Store, kind: str) -> None:
    layout, msgs = simulate("MAL-P1", HEALTHY, seed=11, hours=10 * 24, every_h=EVERY_H)
    register(store, "MAL-P1")
    store_messages(store, layout, msgs)
    _assess_all(store, "MAL-P1")
    start = _row(store, "MAL-P1").segment_start
    _event(store, "MAL-P1", START + timedelta(days=5), kind)
    out = assess_asset(store, "MAL-P1")
    assert not out.reset and _row(store, "MAL-P1").segment_start == start


def test_a_change_of_operating_regime_alone_raises_no_anomaly(store: Store) -> None:
    # The same healthy unit at two drive speeds (common practice: vibration grows with speed).
    hours = 24 * 12
    layout, slow = simulate(
        "MAL-P1", HEALTHY, seed=11, hours=hours, every_h=EVERY_H, constant_speed_rpm=1250.0
    )
    _, fast = simulate(
        "MAL-P1",
        HEALTHY,
        seed=11,
        hours=hours,
        every_h=EVERY_H,
        constant_speed_rpm=1700.0,
        first_sequence=10_000,
    )
    n_base = AssessmentConfig().baseline_windows
    mixed = [(slow if i % 2 == 0 else fast)[i] for i in range(n_base)]
    mixed += list(fast[n_base:])  # then it runs fast only
    register(store, "MAL-P1")
    store_messages(store, layout, mixed)
    _assess_all(store, "MAL-P1")
    row = _row(store, "MAL-P1")
    assert row.status == "no_degradation", row.message
    later = [p for p in _points(store, "MAL-P1") if p.window_start >= fast[n_base].window_start]
    assert len({p.regime for p in later}) == 1
    scores = [p for p in later if p.anomaly_score is not None]
    assert len(scores) == len(later)
    assert np.mean([p.anomaly_score > p.control_limit for p in scores]) < 0.05  # type: ignore[operator]
    raw = np.array([m.values[3] for m in slow[:n_base]]), np.array([m.values[3] for m in fast])
    assert layout.indicators[3].name == "de_accel.velocity_rms"
    assert np.median(raw[1]) > 1.2 * np.median(raw[0])  # the raw level did move with speed


def test_the_fit_is_bounded_in_points(store: Store) -> None:
    layout, msgs = simulate("MAL-P2", OUTER, seed=3, hours=24 * 24, every_h=EVERY_H)
    register(store, "MAL-P2")
    store_messages(store, layout, msgs)
    assess_asset(store, "MAL-P2", config=AssessmentConfig(max_fit_points=20))
    result = _row(store, "MAL-P2").result
    assert result is not None and result["model"] is not None
    assert result["model"]["n_points"] <= 20
    span_h = (msgs[-1].window_start - msgs[0].window_start).total_seconds() / 3600
    assert result["model"]["bucket_h"] == pytest.approx(
        span_h / 20
    )  # wider buckets, no data dropped


def test_a_daily_regime_offset_does_not_hide_a_steady_rise_from_the_fit() -> None:
    # A health index rising 0.006 a day, every 3 h, 0.1 higher in the morning regime (06-12 h)
    # than in the rest of the day (invented): a defect raises the index by a different amount
    # in each operating regime. The half-day buckets alternate (one holds the morning, the
    # next does not); the trend test used to read that as Brownian noise and found no rise.
    rng = np.random.default_rng(0)
    start = datetime(2026, 3, 1, tzinfo=UTC)
    times = [start + timedelta(hours=3.0 * i) for i in range(8 * 120)]
    ages_d = np.array([(t - start).total_seconds() / 86400.0 for t in times])
    morning = np.array([6 <= t.hour < 12 for t in times])
    y = 0.006 * ages_d + 0.1 * morning + rng.normal(0.0, 0.02, ages_d.size)
    points = list(zip(times, y.tolist(), strict=True))
    cfg = AssessmentConfig()
    t, med = _aggregate(points, start, _bucket_width(points, start, cfg))
    tf, yf, _ = _degradation_series(t, med, cfg.onset_health_index / 2.0)
    d = np.diff(np.log(yf + 1.0))
    assert np.corrcoef(d[:-1], d[1:])[0, 1] < -0.6  # the buckets do alternate
    for model in (
        ExponentialDegradation(threshold=1.0, offset=-1.0),
        WienerDegradation(threshold=1.0),
    ):
        fitted = model.fit(tf, yf)  # raised NotEnoughDataError("no significant rise") before
        assert fitted.trend_z_ > 1.645  # one-sided 5 % (the models' default trend test)
        q10, q50, q90 = fitted.time_to_failure_quantiles((0.1, 0.5, 0.9))
        assert 0 < q10 < q50 < q90


def _slow_then_fast(
    cfg: AssessmentConfig, n_fast: int
) -> tuple[IndicatorLayout, list[IndicatorMessage]]:
    """A healthy pump's baseline windows at 1,250 rpm, then ``n_fast`` windows at 1,700 rpm."""
    n_base = cfg.baseline_windows
    _, slow = simulate("MAL-P1", HEALTHY, seed=11, hours=24 * 16, every_h=EVERY_H,
                       constant_speed_rpm=1250.0)  # fmt: skip
    layout, fast = simulate("MAL-P1", HEALTHY, seed=11, hours=24 * 16, every_h=EVERY_H,
                            constant_speed_rpm=1700.0, first_sequence=10_000)  # fmt: skip
    return layout, [*slow[:n_base], *fast[n_base : n_base + n_fast]]


def test_speeds_the_baseline_never_saw_wait_without_a_verdict_then_are_learned(
    store: Store,
) -> None:
    # The baseline runs slow; then the duty moves to a speed outside it and stays there (the
    # way a pump's duty drifts with the season). Vibration grows with speed (common practice,
    # no source), so judging the new speed against the slow baseline would raise false alarms.
    cfg = AssessmentConfig()
    n_base = cfg.baseline_windows
    layout, msgs = _slow_then_fast(cfg, cfg.extend_windows + 8)
    waiting = cfg.extend_windows - 12
    register(store, "MAL-P1")
    store_messages(store, layout, msgs[: n_base + waiting])
    _assess_all(store, "MAL-P1")
    later = [p for p in _points(store, "MAL-P1") if p.window_start >= msgs[n_base].window_start]
    assert len(later) == waiting
    assert all(p.excluded and p.anomaly_score is None for p in later)
    assert all(p.excluded_reason.startswith(OUTSIDE_SPEED_RANGE) for p in later)
    said = re.search(
        r": ([\d.]+) Hz, the baseline was learned at ([\d.]+)-([\d.]+) Hz", later[0].excluded_reason
    )
    assert said is not None, later[0].excluded_reason
    speed, lo, hi = map(float, said.groups())  # 1700 rpm less slip; 1250 rpm less slip
    assert 27.5 < speed < 1700 / 60 and 20.0 < lo <= hi < 1250 / 60
    assert _row(store, "MAL-P1").state.get("extensions") is None

    store_messages(store, layout, msgs[n_base + waiting :])
    _assess_all(store, "MAL-P1")
    row = _row(store, "MAL-P1")
    assert row.status == "no_degradation", row.message
    (extension,) = row.state["extensions"]
    assert extension["windows"] == cfg.extend_windows
    lo, hi = extension["speed_range_hz"]
    assert lo < 1250 / 60 < 1700 / 60 <= hi * 1.01
    points = _points(store, "MAL-P1")
    assert len(points) == len(msgs)  # the waiting windows were rescored, not added twice
    later = [p for p in points if p.window_start >= msgs[n_base].window_start]
    assert all(p.anomaly_score is not None for p in later)
    assert np.mean([p.anomaly_score > p.control_limit for p in later]) < 0.05  # type: ignore[operator]


def test_waiting_windows_are_counted_when_they_arrive_one_at_a_time(store: Store) -> None:
    # A gateway sends one window per assessment run: each run only adds to the waiting list,
    # and every addition must be kept (the list once lost them, and the learning came late).
    cfg = AssessmentConfig()
    n_base = cfg.baseline_windows
    layout, msgs = _slow_then_fast(cfg, cfg.extend_windows + 4)
    register(store, "MAL-P1")
    store_messages(store, layout, msgs[:n_base])
    _assess_all(store, "MAL-P1")
    for k, msg in enumerate(msgs[n_base:], start=1):
        store_messages(store, layout, [msg])
        _assess_all(store, "MAL-P1")
        state = _row(store, "MAL-P1").state
        if k < cfg.extend_windows:
            assert len(state["outside_speed_windows"]) == k
    (extension,) = _row(store, "MAL-P1").state["extensions"]
    assert extension["windows"] == cfg.extend_windows
    assert extension["key"][1] == msgs[n_base + cfg.extend_windows - 1].message_id.hex


def test_a_degrading_pump_does_not_learn_new_speeds_into_its_baseline(store: Store) -> None:
    # The outer race defect grows at the slow speed until it is detected; then the speed moves
    # outside the baseline. Learning those windows as healthy would hide the defect.
    cfg = AssessmentConfig()
    switch = 160  # window index at day 20, the defect well grown (onset day 8)
    _, slow = simulate("MAL-P2", OUTER, seed=3, hours=24 * 33, every_h=EVERY_H,
                       constant_speed_rpm=1250.0)  # fmt: skip
    layout, fast = simulate("MAL-P2", OUTER, seed=3, hours=24 * 33, every_h=EVERY_H,
                            constant_speed_rpm=1700.0, first_sequence=10_000)  # fmt: skip
    msgs = [*slow[:switch], *fast[switch : switch + cfg.extend_windows + 24]]
    register(store, "MAL-P2")
    store_messages(store, layout, msgs)
    _assess_all(store, "MAL-P2")
    row = _row(store, "MAL-P2")
    assert "extensions" not in row.state
    later = [p for p in _points(store, "MAL-P2") if p.window_start >= msgs[switch].window_start]
    assert len(later) == cfg.extend_windows + 24
    assert all(p.excluded_reason.startswith(OUTSIDE_SPEED_RANGE) for p in later)
    assert len(row.state["outside_speed_windows"]) == len(later)
    assert f"{len(later)} windows at speeds outside the baseline's have no verdict" in row.message
