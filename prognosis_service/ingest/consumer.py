"""MQTT v5 consumer and batching writer: acknowledge only what is durably stored.

The paho network thread only enqueues (``on_message``); one writer thread takes up to
``ingest_batch_max`` messages, runs them through the pipeline in one write transaction, commits,
and only then sends the PUBACKs (``manual_ack=True``), in order of receipt. A crash anywhere
before the commit leaves the messages unacknowledged in our persistent broker session (fixed
client id, ``clean_start=False``, a session expiry), so the broker delivers them again and the
idempotent insert absorbs whatever had been stored already.

Layout and status topics are subscribed without the shared group even when one is configured:
the broker does not send retained messages to shared subscriptions, and every replica needs the
retained layouts. Their inserts are idempotent, so several replicas storing them is harmless.
"""

from __future__ import annotations

import logging
import threading
import time
from collections import deque
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

import paho.mqtt.client as mqtt
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties
from paho.mqtt.subscribeoptions import SubscribeOptions

from prognosis_service.ingest.pipeline import BatchOutcome, Inbound, Pipeline
from prognosis_service.metrics import METRICS, Metrics
from prognosis_service.settings import Settings
from prognosis_service.store.engine import Store
from shared_schema import INGEST_FILTERS, shared_subscription

__all__ = ["IngestService", "record_outcome"]

log = logging.getLogger("wellspan.ingest")

_UNSHARED = ("/layout", "/status")


@dataclass(frozen=True, slots=True)
class _Delivery:
    item: Inbound
    mid: int
    qos: int
    connection: int  # which connection it came on: packet ids are only valid within it


def record_outcome(metrics: Metrics, outcome: BatchOutcome, source: str) -> None:
    """Count one committed batch's results (only what is durable is counted)."""
    if outcome.stored:
        metrics.inc(
            "wellspan_ingest_messages_total",
            outcome.stored,
            source=source,
            kind="indicators",
            result="stored",
        )
    if outcome.duplicates:
        metrics.inc(
            "wellspan_ingest_messages_total",
            outcome.duplicates,
            source=source,
            kind="indicators",
            result="duplicate",
        )
    for kind, n in outcome.other.items():
        metrics.inc("wellspan_ingest_messages_total", n, source=source, kind=kind, result="stored")
    for reason, n in outcome.quarantine_reasons.items():
        metrics.inc("wellspan_quarantine_total", n, reason=reason)
        metrics.inc(
            "wellspan_ingest_messages_total", n, source=source, kind="any", result="quarantined"
        )
    if outcome.readmitted:
        metrics.inc(
            "wellspan_ingest_messages_total",
            outcome.readmitted,
            source=source,
            kind="any",
            result="readmitted",
        )


class IngestService:
    """The MQTT consumer with its writer thread.

    Parameters
    ----------
    settings : Settings
        Broker URL, client id, session expiry, share group, batch size and wait.
    store : Store
    pipeline : Pipeline
    """

    def __init__(
        self, settings: Settings, store: Store, pipeline: Pipeline, *, metrics: Metrics = METRICS
    ) -> None:
        self.settings = settings
        self.store = store
        self.pipeline = pipeline
        self.metrics = metrics
        # A deque and an event rather than queue.Queue: ``put`` with its lock and notify cost the
        # network thread a fifth of its time in a profile (py-spy, 60,000 messages), and the
        # writer's per-item ``get`` another 3 %. deque.append/popleft are atomic.
        self._queue: deque[_Delivery] = deque()
        self._arrived = threading.Event()
        self._stop = threading.Event()
        self._connected = threading.Event()
        self._writer: threading.Thread | None = None
        self._client: mqtt.Client | None = None
        self.last_error: str | None = None
        self.batches_committed = 0
        self._connection = 0

    def __repr__(self) -> str:
        host, port, *_ = self.settings.broker
        return f"IngestService(broker={host}:{port}, client_id={self.settings.mqtt_client_id!r})"

    @property
    def connected(self) -> bool:
        return self._connected.is_set()

    @property
    def healthy(self) -> bool:
        return self.connected and self._writer is not None and self._writer.is_alive()

    def queue_depth(self) -> int:
        return len(self._queue)

    def wait_connected(self, timeout: float) -> bool:
        return self._connected.wait(timeout)

    # -- lifecycle -------------------------------------------------------------------------------

    def start(self) -> None:
        s = self.settings
        host, port, user, password, tls = s.broker
        client = mqtt.Client(
            mqtt.CallbackAPIVersion.VERSION2,
            client_id=s.mqtt_client_id,
            protocol=mqtt.MQTTv5,
            manual_ack=True,
        )
        if user:
            client.username_pw_set(user, password)
        if tls:
            client.tls_set()
        client.reconnect_delay_set(min_delay=1, max_delay=30)
        client.max_queued_messages_set(0)
        client.on_connect = self._on_connect
        client.on_disconnect = self._on_disconnect
        client.on_message = self._on_message
        props = Properties(PacketTypes.CONNECT)
        props.SessionExpiryInterval = s.mqtt_session_expiry_s
        props.ReceiveMaximum = s.mqtt_receive_maximum
        self._client = client
        self.metrics.gauge_fn("wellspan_ingest_queue_depth", self.queue_depth)
        self.metrics.gauge_fn("wellspan_broker_connected", lambda: float(self.connected))
        self._writer = threading.Thread(
            target=self._write_loop, name="wellspan-writer", daemon=True
        )
        self._writer.start()
        client.connect_async(
            host, port, keepalive=s.mqtt_keepalive_s, clean_start=False, properties=props
        )
        client.loop_start()
        log.info("ingest connecting to %s:%d as %r", host, port, s.mqtt_client_id)

    def stop(self, timeout: float = 10.0) -> None:
        """Stop: commit and acknowledge what has been received, then disconnect."""
        client = self._client
        self._stop.set()
        if self._writer is not None:
            self._writer.join(timeout)
        if client is not None:
            client.disconnect()
            client.loop_stop()
        self._connected.clear()
        log.info("ingest stopped after %d batches", self.batches_committed)

    # -- network thread --------------------------------------------------------------------------

    def _on_connect(
        self, client: mqtt.Client, _userdata: Any, flags: Any, reason_code: Any, _props: Any
    ) -> None:
        if reason_code.is_failure:
            self.last_error = f"broker refused the connection: {reason_code}"
            log.error("%s", self.last_error)
            return
        group = self.settings.mqtt_share_group
        subs = []
        for topic_filter in INGEST_FILTERS:
            if group and not topic_filter.endswith(_UNSHARED):
                topic_filter = shared_subscription(group, topic_filter)
            # retainHandling=1: retained messages only for a subscription that is new
            subs.append((topic_filter, SubscribeOptions(qos=1, retainHandling=1)))
        self._connection += 1
        client.subscribe(subs)
        self._connected.set()
        self.last_error = None
        log.info("ingest connected (session present: %s)", flags.session_present)

    def _on_disconnect(
        self, _client: mqtt.Client, _userdata: Any, _flags: Any, reason_code: Any, _props: Any
    ) -> None:
        self._connected.clear()
        if not self._stop.is_set():
            log.warning("ingest disconnected from the broker: %s", reason_code)

    def _on_message(self, _client: mqtt.Client, _userdata: Any, message: mqtt.MQTTMessage) -> None:
        if self._stop.is_set():
            return  # stopping: left unacknowledged, the broker delivers it again next session
        item = Inbound(
            topic=message.topic,
            payload=bytes(message.payload),
            received_at=datetime.now(UTC),
            retained=bool(message.retain),
        )
        self._queue.append(_Delivery(item, message.mid, message.qos, self._connection))
        if not self._arrived.is_set():
            self._arrived.set()

    # -- writer thread ---------------------------------------------------------------------------

    def _drain(self, batch: list[_Delivery], limit: int) -> None:
        q = self._queue
        while q and len(batch) < limit:
            batch.append(q.popleft())

    def _take_batch(self) -> list[_Delivery]:
        s = self.settings
        limit = s.ingest_batch_max
        batch: list[_Delivery] = []
        self._drain(batch, limit)
        if not batch:
            # Idle: clear, look once more (an append may have come before the clear), then
            # sleep until the network thread sets the event again. While busy the event stays
            # set and the network thread pays one attribute read per message.
            self._arrived.clear()
            self._drain(batch, limit)
            if not batch:
                self._arrived.wait(0.2)
                self._drain(batch, limit)
                if not batch:
                    return batch
        deadline = time.monotonic() + s.ingest_batch_wait_s
        while len(batch) < limit:
            remaining = deadline - time.monotonic()
            if remaining <= 0:
                break
            time.sleep(min(remaining, 0.002))
            self._drain(batch, limit)
        return batch

    def _write_loop(self) -> None:
        while not (self._stop.is_set() and not self._queue):
            batch = self._take_batch()
            if not batch:
                continue
            outcome = self._commit(batch)
            if outcome is None:
                continue  # not stored: left unacknowledged for the broker to deliver again
            client = self._client
            if client is not None:
                current = self._connection
                for d in batch:
                    # A message from an earlier connection is delivered again on this one (the
                    # session resumes); acking its old packet id could ack another message.
                    if d.qos > 0 and d.connection == current:
                        client.ack(d.mid, d.qos)
            record_outcome(self.metrics, outcome, "mqtt")

    def _commit(self, batch: list[_Delivery]) -> BatchOutcome | None:
        delay = 0.1
        while True:
            t0 = time.perf_counter()
            try:
                with self.store.write() as session:
                    outcome = self.pipeline.handle(session, [d.item for d in batch])
            except Exception as exc:
                self.pipeline.reset()
                self.last_error = f"store write failed: {type(exc).__name__}: {exc}"
                self.metrics.inc("wellspan_ingest_batch_failures_total")
                log.error(
                    "%s (batch of %d, retrying in %.1f s)", self.last_error, len(batch), delay
                )
                if self._stop.wait(delay):
                    return None
                delay = min(delay * 2, 10.0)
                continue
            elapsed = time.perf_counter() - t0
            self.batches_committed += 1
            self.metrics.observe_batch_latency(elapsed)
            self.metrics.inc("wellspan_ingest_batches_total")
            oldest = min(d.item.received_at for d in batch)
            self.metrics.set(
                "wellspan_ingest_lag_seconds", (datetime.now(UTC) - oldest).total_seconds()
            )
            return outcome
