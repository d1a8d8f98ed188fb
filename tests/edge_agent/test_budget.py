"""Bandwidth budget: report-by-exception, heartbeat, adaptation, and a simulated day on MQTT."""

from __future__ import annotations

import itertools
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest

from edge_agent.agent import Agent
from edge_agent.budget import BandwidthBudget, wire_bytes
from edge_agent.config import BudgetConfig
from shared_schema import (
    GatewayStatus,
    IndicatorLayout,
    IndicatorSpec,
    decode_json,
    parse_topic,
)
from tests.brokers import MosquittoBroker
from tests.edge_agent.helpers import Receiver, SyntheticSource, gateway_config

T0 = datetime(2026, 3, 1, tzinfo=UTC)
LAYOUT = IndicatorLayout(
    extractor_version="test",
    indicators=(
        IndicatorSpec(name="de_accel.velocity_rms", unit="mm/s", channel="de_accel"),
        IndicatorSpec(name="de_accel.kurtosis", unit="1", channel="de_accel"),
    ),
)


def budget(**kw: object) -> BandwidthBudget:
    cfg = BudgetConfig.model_validate({"bytes_per_day": 10_000_000, "adapt": False, **kw})
    return BandwidthBudget(cfg, {"A": LAYOUT})


def send(b: BandwidthBudget, values: tuple[float | None, ...], t: datetime) -> str:
    d = b.decide("A", values, t, size=100)
    if d.send:
        b.sent("A", values, t, quality=None)
        b.record(t, 100)
    return d.reason


def test_deadbands_absolute_and_relative() -> None:
    b = budget(deadbands={"de_accel.velocity_rms": {"absolute": 0.5}}, default_relative=0.1)
    assert send(b, (2.0, 3.0), T0) == "first"
    assert send(b, (2.4, 3.2), T0 + timedelta(minutes=1)) == "unchanged"  # 0.4 < 0.5; 6.7 % < 10 %
    assert send(b, (2.6, 3.2), T0 + timedelta(minutes=2)) == "change"  # 0.6 mm/s > 0.5 absolute
    # the reference is the last *sent* value, 3.2: 0.3 / 3.2 = 9.4 % is within 10 %
    assert send(b, (2.6, 3.5), T0 + timedelta(minutes=3)) == "unchanged"
    b2 = budget(default_relative=0.1)
    send(b2, (2.0, 3.0), T0)
    assert send(b2, (2.0, 3.29), T0 + timedelta(minutes=1)) == "unchanged"
    assert send(b2, (2.0, 3.31), T0 + timedelta(minutes=2)) == "change"
    assert send(b2, (2.0, None), T0 + timedelta(minutes=3)) == "change"  # a value vanished


def test_heartbeat_and_forced() -> None:
    b = budget(heartbeat_s=600)
    assert send(b, (1.0, 3.0), T0) == "first"
    assert send(b, (1.0, 3.0), T0 + timedelta(minutes=9)) == "unchanged"
    assert send(b, (1.0, 3.0), T0 + timedelta(minutes=10)) == "heartbeat"
    assert b.decide("A", (1.0, 3.0), T0 + timedelta(minutes=11), size=100, forced=True).send


def test_pace_cap_holds_routine_messages_and_day_rollover_resets() -> None:
    b = BandwidthBudget(
        BudgetConfig(bytes_per_day=24_000, reserve_fraction=0.0, adapt=False, heartbeat_s=7200),
        {"A": LAYOUT},
    )
    reasons = [send(b, (float(i), 3.0), T0 + timedelta(minutes=i)) for i in range(60)]
    # the allowance at minute i is 24000 * (i/1440 + 1/24) bytes; by minute 59 it is 1983 bytes,
    # so 19 messages of 100 bytes: the first 11 minutes, then one each time the allowance grows
    assert sum(r in ("first", "change") for r in reasons) == 19
    assert "over_budget" in reasons
    assert b.spent_today == 1900
    assert send(b, (99.0, 3.0), T0 + timedelta(days=1)) == "change"
    assert b.spent_today == 100


def test_adaptation_widens_deadbands_when_spending_runs_ahead() -> None:
    b = BandwidthBudget(BudgetConfig(bytes_per_day=50_000, adapt=True), {"A": LAYOUT})
    for i in range(600):
        send(b, (1.0 + 0.02 * (i % 7), 3.0), T0 + timedelta(minutes=i))
    assert b.scale > 1.0
    assert b.spent_today <= 50_000 * 0.9 * (600 / 1440 + 1 / 24)


@pytest.mark.broker
def test_a_simulated_day_stays_within_budget_and_every_alarm_goes_out(
    tmp_path: Path, mosquitto: MosquittoBroker
) -> None:
    per_day = 40_000
    gateway = "gw-budget"
    receiver = Receiver(mosquitto.host, mosquitto.port).start()
    cfg = gateway_config(
        tmp_path,
        mosquitto.url,
        budget={"bytes_per_day": per_day, "default_relative": 0.05, "adapt": True,
                "heartbeat_s": 3600},
        alarms={"zone_change": True, "thresholds": {"de_accel.velocity_rms": {"high": 8.0}}},
        schedule={"interval_s": 120},
    ).model_copy(update={"gateway_id": gateway})  # fmt: skip

    def scale(asset_id: str, t: datetime) -> float:
        loud = asset_id == "TST-P1" and (10 <= t.hour < 11 or 18 <= t.hour < 19)
        return 10.0 if loud else 1.0

    agent = Agent(cfg, source=SyntheticSource(scale=scale), max_windows=2 * 720)  # one day
    summary = agent.run()
    receiver.wait_for(lambda r: len(r.of_kind("status")) >= 2, 10)
    receiver.stop()
    mine = [m for m in receiver.snapshot() if parse_topic(m.topic).gateway_id == gateway]  # type: ignore[union-attr]
    sent = sum(wire_bytes(m.topic, m.payload) for m in mine)
    unlimited = 2 * 720 * wire_bytes(mine[-1].topic, b"x" * 90)
    assert sent <= per_day < unlimited / 2
    assert summary.suppressed > summary.queued
    # every alarm raised went out; two loud hours give crossings up and down, and zone changes
    alarms = receiver.alarms()
    assert len(alarms) == summary.alarms >= 4
    assert sum(a.kind.value == "threshold" and not a.cleared for a in alarms) == 2
    # only queued messages got sequence numbers: the receiver sees no gap
    seqs = sorted(m.sequence for m in receiver.indicators() if m.gateway_id == gateway)
    assert seqs == list(range(summary.queued))
    # the heartbeat held within the budget: no asset silent for much more than an hour
    for asset in ("TST-P1", "TST-P2"):
        times = sorted(m.window_start for m in receiver.indicators() if m.asset_id == asset
                       and m.gateway_id == gateway)  # fmt: skip
        assert max(b - a for a, b in itertools.pairwise(times)) <= timedelta(minutes=62)
    final = decode_json([m for m in mine if m.topic.endswith("/status")][-1].payload, GatewayStatus)
    assert final.budget_bytes_per_day == per_day
    assert final.bytes_sent_today is not None and final.bytes_sent_today <= per_day
    assert final.deadband_scale is not None and final.deadband_scale > 1
