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
from datetime import timedelta
from pathlib import Path

import numpy as np
import paho.mqtt.client as mqtt
import pytest
from sqlalchemy import func, select

from prognosis_service.domain.assets import AssetSpec, register_asset
from prognosis_service.ingest.pipeline import Inbound, Pipeline
from prognosis_service.store.engine import Store
from prognosis_service.store.models import MessageRow
from tests.brokers import MosquittoBroker
from tests.prognosis_service import factories as f

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


def _spawn(url: str, broker: MosquittoBroker, client_id: str, log: Path) -> subprocess.Popen[bytes]:
    env = {k: v for k, v in os.environ.items() if not k.startswith("WELLSPAN_")}
    env.update(
        WELLSPAN_DATABASE_URL=url,
        WELLSPAN_MQTT_URL=broker.url,
        WELLSPAN_MQTT_SHARE_GROUP="ingest",
        WELLSPAN_INGEST_BATCH_MAX="200",
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
        batches = {}
        for name, log in logs.items():
            m = re.search(rb"ingest stopped after (\d+) batches", log.read_bytes())
            assert m is not None, log.read_text()
            batches[name] = int(m.group(1))
        assert all(n > 0 for n in batches.values()), batches  # both consumers took a share
    finally:
        publisher.disconnect()
        publisher.loop_stop()
        for proc in procs.values():
            if proc.poll() is None:
                proc.kill()
                proc.wait()
        store.dispose()
