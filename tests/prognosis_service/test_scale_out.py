"""Scale-out: two ``wellspan ingest`` processes on one MQTT v5 shared subscription, one
PostgreSQL.

Real processes, a private Mosquitto (tests/brokers.py) and the test PostgreSQL: 20,000 indicator
messages over 40 assets of four gateways, published by a real MQTT client, are each stored
exactly once, and both consumers took a share of the work (the broker spreads a shared
subscription's messages over its members, MQTT v5 section 4.8.2).
"""

from __future__ import annotations

import os
import re
import signal
import subprocess
import sys
import time
import uuid
from collections import Counter
from collections.abc import Sequence
from datetime import timedelta
from pathlib import Path
from typing import Any

import numpy as np
import paho.mqtt.client as mqtt
import pytest
from sqlalchemy import delete, func, select

from edge_agent.simulator import FaultScenario
from prognosis_service.assessment.assessor import assess_asset
from prognosis_service.assessment.diagnosis_model import load_classifier
from prognosis_service.assessment.models import AssetAssessment, HealthPointRow
from prognosis_service.domain.assets import AssetSpec, register_asset
from prognosis_service.ingest.pipeline import Inbound, Pipeline
from prognosis_service.store.engine import Store
from prognosis_service.store.migrate import upgrade
from prognosis_service.store.models import MessageRow
from shared_schema import (
    IndicatorLayout,
    IndicatorMessage,
    LayoutAnnouncement,
    encode_indicators,
    encode_json,
    indicators_topic,
    layout_topic,
)
from tests.brokers import MosquittoBroker
from tests.prognosis_service import factories as f
from tests.prognosis_service.assessment.simfleet import (
    SITE,
    START,
    register,
    simulate,
    store_messages,
)

pytestmark = [pytest.mark.broker, pytest.mark.postgres, pytest.mark.slow]

ROOT = Path(__file__).resolve().parents[2]
WAIT_S = 180.0  # hang guard for the waits below, not a timing check
GATEWAYS = [f"scale-gw{i}" for i in range(4)]
ASSETS_PER_GATEWAY = 10
MESSAGES = 20_000


def _asset(gateway: str, k: int) -> str:
    return f"{gateway.upper()}-P{k}"


def _wait(cond: object, what: str, timeout: float = WAIT_S) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if cond():  # type: ignore[operator]
            return
        time.sleep(0.1)
    raise AssertionError(f"timed out waiting for {what}")


def _spawn(
    url: str, broker: MosquittoBroker, client_id: str, log: Path, **settings: str
) -> subprocess.Popen[bytes]:
    env = {k: v for k, v in os.environ.items() if not k.startswith("WELLSPAN_")}
    env.update(
        WELLSPAN_DATABASE_URL=url,
        WELLSPAN_MQTT_URL=broker.url,
        WELLSPAN_MQTT_SHARE_GROUP="ingest",
        WELLSPAN_INGEST_BATCH_MAX="200",
        **settings,
    )
    fh = log.open("ab")
    return subprocess.Popen(
        [sys.executable, "-m", "wellspan", "ingest", "--client-id", client_id],
        cwd=ROOT,
        env=env,
        stdout=fh,
        stderr=fh,
        start_new_session=True,
    )


def _tear_down(
    publisher: mqtt.Client, procs: dict[str, subprocess.Popen[bytes]], store: Store
) -> None:
    publisher.disconnect()
    publisher.loop_stop()
    for proc in procs.values():
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    store.dispose()


def _assert_both_took_a_share(logs: dict[str, Path]) -> None:
    batches = {}
    for name, log in logs.items():
        m = re.search(rb"ingest stopped after (\d+) batches", log.read_bytes())
        assert m is not None, log.read_text()
        batches[name] = int(m.group(1))
    assert all(n > 0 for n in batches.values()), batches


def _stored(store: Store) -> int:
    with store.read() as s:
        return int(s.scalar(select(func.count()).select_from(MessageRow)) or 0)


@pytest.mark.parametrize("store_url", ["postgresql"], indirect=True)
def test_two_ingest_processes_on_a_shared_subscription_store_each_message_once(
    store_url: str, private_mosquitto: MosquittoBroker, tmp_path: Path
) -> None:
    store = Store(store_url)
    pipe = Pipeline()
    with store.write() as s:
        for gw in GATEWAYS:
            for k in range(ASSETS_PER_GATEWAY):
                register_asset(s, pipe, AssetSpec(asset_id=_asset(gw, k), site=f.SITE))
            pipe.handle(s, [Inbound(f.announcement_topic(gateway_id=gw),
                                    f.announcement(gateway_id=gw), f.T0)])  # fmt: skip
    procs: dict[str, subprocess.Popen[bytes]] = {}
    logs = {name: tmp_path / f"{name}.log" for name in ("ingest-a", "ingest-b")}
    publisher = mqtt.Client(
        mqtt.CallbackAPIVersion.VERSION2,
        client_id=f"scale-pub-{uuid.uuid4().hex[:8]}",
        protocol=mqtt.MQTTv5,
    )
    try:
        for name, log in logs.items():
            procs[name] = _spawn(store_url, private_mosquitto, name, log)
        _wait(
            lambda: all(b"ingest connected" in log.read_bytes() for log in logs.values()),
            "both consumers to connect",
        )
        time.sleep(0.5)  # let both SUBACKs land before publishing (a new shared group)
        publisher.max_inflight_messages_set(1000)
        publisher.max_queued_messages_set(0)
        publisher.connect("127.0.0.1", private_mosquitto.port)
        publisher.loop_start()
        per_gateway = MESSAGES // len(GATEWAYS)
        expected: Counter[str] = Counter()
        infos = []
        for seq in range(per_gateway):
            for gw in GATEWAYS:
                asset = _asset(gw, seq % ASSETS_PER_GATEWAY)
                msg = f.message(
                    seq, asset_id=asset, gateway_id=gw,
                    window_start=f.T0 + timedelta(minutes=10 * seq),
                )  # fmt: skip
                infos.append(publisher.publish(f.topic(asset, gateway_id=gw), f.frame(msg), qos=1))
                expected[asset] += 1
        for info in infos:
            info.wait_for_publish(WAIT_S)
        _wait(lambda: _stored(store) >= MESSAGES, f"{MESSAGES} messages stored")
        for proc in procs.values():
            proc.send_signal(signal.SIGTERM)
        for proc in procs.values():
            assert proc.wait(30) == 0
        with store.read() as s:
            rows = s.execute(
                select(
                    MessageRow.gateway_id, MessageRow.sequence, MessageRow.asset_id,
                    MessageRow.window_start, MessageRow.values_f32,
                )
            ).all()  # fmt: skip
        assert len(rows) == MESSAGES
        assert {(r[0], r[1]) for r in rows} == {
            (gw, q) for gw in GATEWAYS for q in range(per_gateway)
        }
        assert Counter(r[2] for r in rows) == expected
        # each asset's history is what a single consumer stores: the published windows and values
        for gw, seq, asset, window_start, blob in rows:
            sent = f.message(seq, asset_id=asset, gateway_id=gw)
            assert asset == _asset(gw, seq % ASSETS_PER_GATEWAY)
            assert window_start == f.T0 + timedelta(minutes=10 * seq)
            assert np.frombuffer(blob, dtype="<f4").tolist() == list(sent.values)
        _assert_both_took_a_share(logs)
    finally:
        _tear_down(publisher, procs, store)


# -- fits: two consumers, out of order, against one consumer in order -------------------------

# Four simulated pumps (simulator → extractor, the realistic layout the assessor needs), each
# copied onto COPIES gateways so many assets share the consumers without simulating each one.
PUMPS = (
    (
        "MAL-P2",
        FaultScenario(fault="outer_race", onset=START + timedelta(days=8), life_days=20.0),
        3,
    ),
    (
        "GIB-P1",
        FaultScenario(fault="inner_race", onset=START + timedelta(days=9), life_days=22.0),
        2,
    ),
    ("SPI-P1", FaultScenario(fault="healthy"), 5),
    ("COO-P1", FaultScenario(fault="healthy"), 6),
)
COPIES = 4
FIT_HOURS = 24.0 * 26
FIT_EVERY_H = 3.0
SHUFFLE_BLOCK = 64  # publication order is shuffled within blocks of this many messages
PUBLISH_CHUNK, PUBLISH_PAUSE_S = 40, 0.05


def _fleet() -> tuple[IndicatorLayout, dict[str, list[IndicatorMessage]]]:
    """Asset id → its messages in window order, over COPIES gateways."""
    fleet: dict[str, list[IndicatorMessage]] = {}
    layout = None
    for copy in range(COPIES):
        gateway = f"fit-gw{copy}"
        for k, (pump, scenario, seed) in enumerate(PUMPS):
            layout, msgs = simulate(pump, scenario, seed=seed, hours=FIT_HOURS, every_h=FIT_EVERY_H)
            asset = f"{pump}-C{copy}"
            fleet[asset] = [
                m.model_copy(
                    update={
                        "asset_id": asset,
                        "gateway_id": gateway,
                        "sequence": k * 100_000 + i,
                        "message_id": uuid.uuid5(uuid.NAMESPACE_URL, f"fit/{asset}/{i}"),
                    }
                )
                for i, m in enumerate(msgs)
            ]
    assert layout is not None
    return layout, fleet


def _register_fleet(store: Store, layout: IndicatorLayout, assets: list[str]) -> None:
    pipe = Pipeline()
    with store.write() as s:
        for asset in assets:
            register_asset(s, pipe, AssetSpec(asset_id=asset, site=SITE,
                                              asset_class="end-suction-centrifugal"))  # fmt: skip
        for copy in range(COPIES):
            gw = f"fit-gw{copy}"
            ann = LayoutAnnouncement(gateway_id=gw, site=SITE, published_at=START,
                                     layouts=(layout,))  # fmt: skip
            pipe.handle(s, [Inbound(layout_topic(SITE, gw), encode_json(ann), START)])


def _fits(store: Store) -> dict[str, Any]:
    """Per asset: the assessment's status, message and result (forecast, model and its fitted
    state, diagnosis), and its health points keyed by message. The wall-clock time of the fit
    is left out: it says when, not what."""
    out: dict[str, Any] = {}
    with store.read() as s:
        for row in s.scalars(select(AssetAssessment)):
            result = dict(row.result or {})
            if result.get("model"):
                result["model"] = {k: v for k, v in result["model"].items() if k != "fitted_at"}
            out[row.asset_id] = {"status": row.status, "message": row.message,
                                 "result": result, "state": row.state}  # fmt: skip
        for p in s.scalars(select(HealthPointRow)):
            out[p.asset_id].setdefault("points", {})[str(p.message_id)] = (
                p.window_start, p.segment_start, p.regime, p.anomaly_score, p.control_limit,
                p.health, p.excluded, p.excluded_reason,
            )  # fmt: skip
    return out


def _assessed_everything(store: Store) -> bool:
    with store.read() as s:
        newest = dict(
            s.execute(
                select(MessageRow.asset_id, func.max(MessageRow.id)).group_by(MessageRow.asset_id)
            ).all()
        )
        rows = {r.asset_id: r for r in s.scalars(select(AssetAssessment))}
    return len(newest) == len(PUMPS) * COPIES and all(
        a in rows and rows[a].cursor_id >= top and not rows[a].backlog for a, top in newest.items()
    )


@pytest.mark.parametrize("store_url", ["postgresql"], indirect=True)
def test_fits_from_two_consumers_equal_a_single_consumer_run(
    store_url: str, private_mosquitto: MosquittoBroker, tmp_path: Path
) -> None:
    layout, fleet = _fleet()
    assets = sorted(fleet)
    total = sum(len(m) for m in fleet.values())
    # the reference: one consumer, every message in window order, then the assessor to the end
    reference = Store(f"sqlite:///{tmp_path / 'single.db'}")
    upgrade(str(reference.engine.url))
    _register_fleet(reference, layout, assets)
    pipe = Pipeline()
    for asset in assets:
        with reference.write() as s:
            out = pipe.handle(s, [Inbound(indicators_topic(SITE, m.gateway_id, asset),
                                          encode_indicators(m, layout), START)
                                  for m in fleet[asset]])  # fmt: skip
        assert out.stored == len(fleet[asset]) and not out.quarantined
    clf = load_classifier()
    for asset in assets:
        while assess_asset(reference, asset, classifier=clf).backlog:
            pass
    expected = _fits(reference)
    reference.dispose()
    assert {v["status"] for v in expected.values()} >= {"forecast"}, expected  # degrading ones

    # two consumers on one shared subscription, publication shuffled, assessing as they go
    store = Store(store_url)
    _register_fleet(store, layout, assets)
    order = [m for i in range(len(fleet[assets[0]])) for a in assets for m in fleet[a][i : i + 1]]
    rng = np.random.default_rng(7)
    for lo in range(0, len(order), SHUFFLE_BLOCK):
        block = order[lo : lo + SHUFFLE_BLOCK]
        order[lo : lo + SHUFFLE_BLOCK] = [block[j] for j in rng.permutation(len(block))]
    logs = {name: tmp_path / f"{name}.log" for name in ("fit-a", "fit-b")}
    procs: dict[str, subprocess.Popen[bytes]] = {}
    publisher = mqtt.Client(
        mqtt.CallbackAPIVersion.VERSION2,
        client_id=f"fit-pub-{uuid.uuid4().hex[:8]}",
        protocol=mqtt.MQTTv5,
    )
    try:
        for name, log in logs.items():
            procs[name] = _spawn(store_url, private_mosquitto, name, log,
                                 WELLSPAN_ASSESS_INTERVAL_S="0.2")  # fmt: skip
        _wait(lambda: all(b"ingest connected" in log.read_bytes() for log in logs.values()),
              "both consumers to connect")  # fmt: skip
        time.sleep(0.5)  # let both SUBACKs land before publishing (a new shared group)
        publisher.max_inflight_messages_set(200)
        publisher.max_queued_messages_set(0)
        publisher.connect("127.0.0.1", private_mosquitto.port)
        publisher.loop_start()
        # paced, so the consumers' assessors run while windows are still arriving
        for lo in range(0, len(order), PUBLISH_CHUNK):
            infos = [
                publisher.publish(indicators_topic(SITE, m.gateway_id, m.asset_id),
                                  encode_indicators(m, layout), qos=1)
                for m in order[lo : lo + PUBLISH_CHUNK]
            ]  # fmt: skip
            for info in infos:
                info.wait_for_publish(WAIT_S)
            time.sleep(PUBLISH_PAUSE_S)
        _wait(lambda: _stored(store) >= total, f"{total} messages stored")
        _wait(lambda: _assessed_everything(store), "every stored window assessed")
        for proc in procs.values():
            proc.send_signal(signal.SIGTERM)
        for proc in procs.values():
            assert proc.wait(30) == 0
        assert _stored(store) == total
        got = _fits(store)
    finally:
        _tear_down(publisher, procs, store)
    _assert_both_took_a_share(logs)
    assert sorted(got) == sorted(expected)
    for asset in assets:
        for key in ("status", "message", "state", "points", "result"):
            assert got[asset].get(key) == expected[asset].get(key), (asset, key)


@pytest.mark.parametrize("store_url", ["postgresql"], indirect=True)
def test_windows_committed_after_a_later_batch_are_still_assessed(
    store_url: str, tmp_path: Path
) -> None:
    """Two consumers' transactions commit in another order than their row ids: the one holding
    older windows and lower ids commits after the assessor has read past the other's. The fit
    must still take in every window, as a single consumer's run does."""
    pump, scenario, seed = PUMPS[0]
    layout, sim = simulate(pump, scenario, seed=seed, hours=FIT_HOURS, every_h=FIT_EVERY_H)
    clf = load_classifier()
    first, held, after = 120, 140, 160  # after the baseline (48 windows) and after onset
    # The held windows come through a second gateway of the same site (each transaction then
    # locks its own gateway row, as two consumers' transactions for two gateways do).
    spare = "gw-spare"
    msgs = [
        m.model_copy(update={"gateway_id": spare}) if first <= i < held else m
        for i, m in enumerate(sim)
    ]

    def frames(part: Sequence[IndicatorMessage]) -> list[Inbound]:
        return [
            Inbound(indicators_topic(SITE, m.gateway_id, m.asset_id),
                    encode_indicators(m, layout), START)
            for m in part
        ]  # fmt: skip

    def assess_all(store: Store) -> None:
        while assess_asset(store, pump, classifier=clf).backlog:
            pass

    reference = Store(f"sqlite:///{tmp_path / 'single.db'}")
    upgrade(str(reference.engine.url))
    register(reference, pump)
    store_messages(reference, layout, msgs)
    assess_all(reference)
    expected = _fits(reference)
    reference.dispose()

    store = Store(store_url)
    try:
        register(store, pump)
        store_messages(store, layout, msgs[first:held])  # announces the spare's layout
        with store.write() as s:
            s.execute(delete(MessageRow))
        store_messages(store, layout, msgs[:first])
        assess_all(store)
        with store.write() as slow:  # consumer A: older windows, lower ids, commits last
            assert Pipeline().handle(slow, frames(msgs[first:held])).stored == held - first
            with store.write() as fast:  # consumer B: newer windows, higher ids, commits first
                assert Pipeline().handle(fast, frames(msgs[held:after])).stored == after - held
            assess_all(store)  # reads past B's ids while A's are not yet visible
        store_messages(store, layout, msgs[after:])
        assess_all(store)
        got = _fits(store)
    finally:
        store.dispose()
    assert len(got[pump]["points"]) == len(msgs)
    for key in ("status", "message", "state", "points", "result"):
        assert got[pump].get(key) == expected[pump].get(key), key
