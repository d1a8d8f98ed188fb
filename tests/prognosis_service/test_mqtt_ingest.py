"""MQTT ingest against a real Mosquitto: stored once, redelivery and replays absorbed, and an
ingest process killed mid-batch loses nothing the broker delivered."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import threading
import time
import uuid
from collections.abc import Callable, Iterator
from pathlib import Path

import paho.mqtt.client as mqtt
import pytest
from sqlalchemy import func, select

from prognosis_service.domain.assets import AssetSpec, register_asset
from prognosis_service.ingest.consumer import IngestService
from prognosis_service.ingest.pipeline import Inbound, Pipeline
from prognosis_service.metrics import Metrics
from prognosis_service.settings import load_settings
from prognosis_service.store.engine import Store
from prognosis_service.store.migrate import upgrade
from prognosis_service.store.models import MessageRow
from shared_schema import encode_batch
from tests.brokers import MosquittoBroker as Broker
from tests.prognosis_service import factories as f

pytestmark = pytest.mark.broker
WAIT_S = 30.0  # hang guard for waits below, not a timing check
ROOT = Path(__file__).resolve().parents[2]


def wait_until(cond: Callable[[], bool], what: str, timeout: float = WAIT_S) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if cond():
            return
        time.sleep(0.05)
    raise AssertionError(f"timed out waiting for {what}")


def stored(store: Store) -> int:
    with store.read() as s:
        return int(s.scalar(select(func.count()).select_from(MessageRow)) or 0)


class Publisher:
    """A gateway-like paho client publishing with QoS 1."""

    def __init__(self, broker: Broker) -> None:
        self.client = mqtt.Client(
            mqtt.CallbackAPIVersion.VERSION2,
            client_id=f"test-gw-{uuid.uuid4().hex[:8]}",
            protocol=mqtt.MQTTv5,
        )
        self.client.max_inflight_messages_set(1000)
        self.client.max_queued_messages_set(0)
        self.client.connect("127.0.0.1", broker.port)
        self.client.loop_start()

    def publish(self, topic: str, payload: bytes, *, retain: bool = False) -> mqtt.MQTTMessageInfo:
        return self.client.publish(topic, payload, qos=1, retain=retain)

    def publish_all(self, items: list[tuple[str, bytes]]) -> None:
        infos = [self.publish(t, p) for t, p in items]
        for info in infos:
            info.wait_for_publish(WAIT_S)

    def close(self) -> None:
        self.client.disconnect()
        self.client.loop_stop()


@pytest.fixture
def prepared(tmp_path: Path, broker: Broker) -> Iterator[tuple[str, Store, Publisher]]:
    url = f"sqlite:///{tmp_path / 'ingest.db'}"
    upgrade(url)
    store = Store(url)
    pipe = Pipeline()
    with store.write() as s:
        register_asset(s, pipe, AssetSpec(asset_id=f.ASSET, site=f.SITE))
        item = Inbound(f.announcement_topic(), f.announcement(), f.T0)
        pipe.handle(s, [item])
    pub = Publisher(broker)
    yield url, store, pub
    pub.close()
    store.dispose()


def _service(url: str, broker: Broker, client_id: str, metrics: Metrics) -> IngestService:
    settings = load_settings(
        database_url=url, mqtt_url=broker.url, mqtt_client_id=client_id, ingest_batch_wait_s=0.02
    )
    store = Store(url)
    svc = IngestService(settings, store, Pipeline(), metrics=metrics)
    svc.start()
    assert svc.wait_connected(WAIT_S)
    return svc


def _duplicates(metrics: Metrics) -> float:
    return metrics.value(
        "wellspan_ingest_messages_total", source="mqtt", kind="indicators", result="duplicate"
    )


def test_published_messages_are_stored_once(
    prepared: tuple[str, Store, Publisher], broker: Broker
) -> None:
    url, store, pub = prepared
    client_id = f"svc-{uuid.uuid4().hex[:8]}"
    metrics = Metrics()
    svc = _service(url, broker, client_id, metrics)
    try:
        time.sleep(0.2)  # let the SUBACK land before publishing (no session existed before)
        frames = [f.frame(f.message(i)) for i in range(300)]
        pub.publish_all([(f.topic(), fr) for fr in frames])
        wait_until(lambda: stored(store) == 300, "300 stored")
        # a redelivery of each, and the same frames replayed as outbox batches
        pub.publish_all([(f.topic(), fr) for fr in frames[:50]])
        pub.publish_all([(f.topic(), encode_batch(frames[i : i + 100])) for i in (0, 100, 200)])
        wait_until(lambda: _duplicates(metrics) == 350, "350 duplicates seen")
        assert stored(store) == 300
    finally:
        svc.stop()
    # everything was acknowledged: a new process under the same session gets only what is new
    metrics2 = Metrics()
    pub.publish(f.topic(), f.frame(f.message(300))).wait_for_publish(WAIT_S)
    svc2 = _service(url, broker, client_id, metrics2)
    try:
        wait_until(lambda: stored(store) == 301, "the message sent while offline")
        assert _duplicates(metrics2) == 0
    finally:
        svc2.stop()


def _spawn_ingest(url: str, broker: Broker, client_id: str, log: Path) -> subprocess.Popen[bytes]:
    env = dict(os.environ)
    env.update(
        WELLSPAN_DATABASE_URL=url,
        WELLSPAN_MQTT_URL=broker.url,
        WELLSPAN_INGEST_BATCH_MAX="100",
        WELLSPAN_INGEST_BATCH_WAIT_S="0.02",
    )
    env.pop("WELLSPAN_CONFIG", None)
    fh = log.open("ab")
    return subprocess.Popen(
        [sys.executable, "-m", "wellspan", "ingest", "--client-id", client_id],
        cwd=ROOT,
        env=env,
        stdout=fh,
        stderr=fh,
    )


@pytest.mark.slow
def test_ingest_killed_mid_batch_loses_nothing(
    prepared: tuple[str, Store, Publisher], broker: Broker, tmp_path: Path
) -> None:
    url, store, pub = prepared
    client_id = f"svc-kill-{uuid.uuid4().hex[:8]}"
    log = tmp_path / "ingest.log"
    proc = _spawn_ingest(url, broker, client_id, log)
    try:
        wait_until(lambda: b"ingest connected" in log.read_bytes(), "the ingest to connect")
        time.sleep(0.2)
        total = 2000
        frames = [(f.topic(), f.frame(f.message(i))) for i in range(total)]
        publisher = threading.Thread(target=pub.publish_all, args=(frames,))
        publisher.start()
        wait_until(lambda: stored(store) >= 300, "the first batches to be committed")
        proc.send_signal(signal.SIGKILL)
        proc.wait(WAIT_S)
        at_kill = stored(store)
        publisher.join(WAIT_S * 2)
        assert not publisher.is_alive()
        assert at_kill < total, "the kill came too late to interrupt ingest"
        proc = _spawn_ingest(url, broker, client_id, log)
        wait_until(lambda: stored(store) == total, f"all {total} stored after the restart", 60)
        with store.read() as s:
            seqs = set(s.scalars(select(MessageRow.sequence)))
        assert seqs == set(range(total))
        # and clean shutdown on SIGTERM
        proc.send_signal(signal.SIGTERM)
        assert proc.wait(WAIT_S) == 0
        assert b"ingest stopped" in log.read_bytes()
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()


@pytest.mark.slow
def test_serve_runs_api_and_ingest_and_stops_on_sigterm(
    prepared: tuple[str, Store, Publisher], broker: Broker, tmp_path: Path
) -> None:
    import httpx

    from prognosis_service.auth import create_key
    from tests.brokers import free_port

    url, store, pub = prepared
    with store.write() as s:
        _, token = create_key(s, name="test", scopes=["read"])
    port = free_port()
    env = dict(
        os.environ,
        WELLSPAN_DATABASE_URL=url,
        WELLSPAN_MQTT_URL=broker.url,
        WELLSPAN_MQTT_CLIENT_ID=f"svc-serve-{uuid.uuid4().hex[:8]}",
    )
    env.pop("WELLSPAN_CONFIG", None)
    log = (tmp_path / "serve.log").open("wb")
    proc = subprocess.Popen(
        [sys.executable, "-m", "wellspan", "serve", "--port", str(port)],
        cwd=ROOT,
        env=env,
        stdout=log,
        stderr=log,
    )
    base = f"http://127.0.0.1:{port}"

    def ready() -> bool:
        try:
            return httpx.get(f"{base}/readyz", timeout=1).status_code == 200
        except httpx.HTTPError:
            return False

    try:
        wait_until(ready, "the service to be ready (store and broker)")
        time.sleep(0.2)
        pub.publish_all([(f.topic(), f.frame(f.message(i))) for i in range(20)])
        wait_until(lambda: stored(store) == 20, "20 stored by the serving process")
        resp = httpx.get(
            f"{base}/v1/assets/{f.ASSET}/indicators/de_accel.kurtosis",
            params={"start": "2026-06-01T00:00:00Z", "end": "2026-06-02T00:00:00Z"},
            headers={"Authorization": f"Bearer {token}"},
        )
        assert resp.status_code == 200 and resp.json()["count"] == 20
        gateways = httpx.get(f"{base}/v1/gateways", headers={"Authorization": f"Bearer {token}"})
        # The session's broker may hold other tests' retained gateway statuses: pick ours.
        ours = [g for g in gateways.json()["items"] if g["gateway_id"] == f.GATEWAY]
        assert [g["link_state"] for g in ours] == ["online"]
        proc.send_signal(signal.SIGTERM)
        assert proc.wait(WAIT_S) == 0
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
