"""The demo's embedded MQTT 5.0 broker against a real client (paho-mqtt).

Each check names the clause of the MQTT Version 5.0 OASIS Standard (7 March 2019) it follows.
"""

from __future__ import annotations

import socket
import threading
import time
import uuid
from collections.abc import Callable, Iterator

import paho.mqtt.client as mqtt
import pytest
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties
from paho.mqtt.subscribeoptions import SubscribeOptions

from wellspan.embedded_broker import EmbeddedBroker

WAIT_S = 20.0  # hang guard for the waits below, not a timing check


def wait_until(cond: Callable[[], bool], what: str) -> None:
    deadline = time.monotonic() + WAIT_S
    while time.monotonic() < deadline:
        if cond():
            return
        time.sleep(0.02)
    raise AssertionError(f"timed out waiting for {what}")


@pytest.fixture
def broker() -> Iterator[EmbeddedBroker]:
    b = EmbeddedBroker()
    b.start()
    yield b
    b.stop()


class Client:
    """A paho MQTT v5 client that records what it receives (acknowledging unless told not to)."""

    def __init__(
        self,
        broker: EmbeddedBroker,
        client_id: str | None = None,
        *,
        subscribe: list[tuple[str, int]] | None = None,
        ack: bool = True,
        clean_start: bool = False,
        will: tuple[str, bytes] | None = None,
    ) -> None:
        self.client_id = client_id or f"t-{uuid.uuid4().hex[:8]}"
        self.received: list[mqtt.MQTTMessage] = []
        self.subscribed = threading.Event()
        self.ack = ack
        c = mqtt.Client(
            mqtt.CallbackAPIVersion.VERSION2,
            client_id=self.client_id,
            protocol=mqtt.MQTTv5,
            manual_ack=True,
        )
        if will is not None:
            c.will_set(will[0], will[1], qos=1, retain=True)
        c.on_message = self._on_message
        c.on_subscribe = lambda *_: self.subscribed.set()
        subs = subscribe or []

        def on_connect(client: mqtt.Client, *_: object) -> None:
            if subs:
                client.subscribe(
                    [(t, SubscribeOptions(qos=1, retainHandling=handling)) for t, handling in subs]
                )

        c.on_connect = on_connect
        props = Properties(PacketTypes.CONNECT)
        props.SessionExpiryInterval = 3600
        c.connect("127.0.0.1", broker.port, clean_start=clean_start, properties=props)
        c.loop_start()
        self.client = c
        if subs:
            assert self.subscribed.wait(WAIT_S)

    def _on_message(self, client: mqtt.Client, _u: object, msg: mqtt.MQTTMessage) -> None:
        self.received.append(msg)
        if self.ack:
            client.ack(msg.mid, msg.qos)

    def publish(self, topic: str, payload: bytes, *, retain: bool = False) -> None:
        self.client.publish(topic, payload, qos=1, retain=retain).wait_for_publish(WAIT_S)

    def payloads(self) -> list[bytes]:
        return [bytes(m.payload) for m in self.received]

    def close(self) -> None:
        self.client.disconnect()
        self.client.loop_stop()

    def drop(self) -> None:
        """Lose the network connection without DISCONNECT."""
        self.client.loop_stop()
        sock = self.client.socket()
        if sock is not None:
            sock.close()


def test_qos1_messages_reach_a_wildcard_subscriber_once_in_order(broker: EmbeddedBroker) -> None:
    # 4.7.1: "+" matches one level, "#" any number; 4.6: order per topic is kept
    sub = Client(broker, subscribe=[("w/+/g/#", 0)])
    other = Client(broker, subscribe=[("w/s/x/+", 0)])
    pub = Client(broker)
    for i in range(500):
        pub.publish(f"w/s/g/a{i % 3}/indicators", str(i).encode())
    wait_until(lambda: len(sub.received) == 500, "500 messages")
    assert sub.payloads() == [str(i).encode() for i in range(500)]
    assert other.received == []
    for c in (sub, other, pub):
        c.close()


def test_retained_messages_and_retain_handling(broker: EmbeddedBroker) -> None:
    pub = Client(broker)
    pub.publish("w/s/g/layout", b"L1", retain=True)
    pub.publish("w/s/g/layout", b"L2", retain=True)  # 3.3.1.3: replaces the retained one
    first = Client(broker, subscribe=[("w/+/+/layout", 1)])
    wait_until(lambda: len(first.received) == 1, "the retained message")
    assert first.payloads() == [b"L2"] and first.received[0].retain
    # retain handling 1 (3.8.3.1): retained messages only for a subscription that is new
    first.client.subscribe([("w/+/+/layout", SubscribeOptions(qos=1, retainHandling=1))])
    time.sleep(0.3)
    assert len(first.received) == 1
    pub.publish("w/s/g/layout", b"", retain=True)  # zero bytes: the retained message goes
    late = Client(broker, subscribe=[("w/+/+/layout", 0)])
    time.sleep(0.3)
    assert late.received == []
    for c in (pub, first, late):
        c.close()


def test_a_shared_subscription_gives_each_message_to_one_member(broker: EmbeddedBroker) -> None:
    # 4.8.2: each message of a shared subscription goes to one session of the group
    a = Client(broker, subscribe=[("$share/ingest/w/+/+/+/indicators", 0)])
    b = Client(broker, subscribe=[("$share/ingest/w/+/+/+/indicators", 0)])
    plain = Client(broker, subscribe=[("w/+/+/+/indicators", 0)])
    pub = Client(broker)
    for i in range(400):
        pub.publish(f"w/s/g/a{i % 5}/indicators", str(i).encode())
    wait_until(lambda: len(a.received) + len(b.received) == 400, "400 shared deliveries")
    wait_until(lambda: len(plain.received) == 400, "the ordinary subscriber's copy")
    assert sorted(a.payloads() + b.payloads()) == sorted(str(i).encode() for i in range(400))
    assert a.received and b.received  # both members had a share
    for c in (a, b, plain, pub):
        c.close()


def test_a_persistent_session_gets_what_it_had_not_acknowledged(broker: EmbeddedBroker) -> None:
    # 4.4: unacknowledged QoS 1 messages are sent again, with DUP, when the session resumes;
    # 3.1.2.11.2: messages for an offline session with an expiry are queued for it
    sub = Client(broker, "ingest-1", subscribe=[("w/#", 0)], ack=False)
    pub = Client(broker)
    for i in range(10):
        pub.publish("w/a", str(i).encode())
    wait_until(lambda: len(sub.received) == 10, "10 unacknowledged deliveries")
    sub.drop()
    for i in range(10, 15):
        pub.publish("w/a", str(i).encode())
    again = Client(broker, "ingest-1")
    wait_until(lambda: len(again.received) == 15, "the unacknowledged and queued messages")
    assert again.payloads() == [str(i).encode() for i in range(15)]
    assert all(m.dup for m in again.received[:10])
    fresh = Client(broker, "ingest-1", clean_start=True)  # 3.1.2.4: clean start, no session
    pub.publish("w/a", b"after")
    time.sleep(0.3)
    assert fresh.received == []  # the subscription went with the old session
    for c in (again, fresh, pub):
        c.close()


def test_the_will_is_published_on_a_lost_connection_only(broker: EmbeddedBroker) -> None:
    # 3.1.2.5: the will is published when the connection closes without a normal DISCONNECT
    watcher = Client(broker, subscribe=[("w/+/status", 0)])
    polite = Client(broker, will=("w/polite/status", b"lost"))
    polite.close()
    rude = Client(broker, will=("w/rude/status", b"lost"))
    rude.drop()
    wait_until(lambda: len(watcher.received) == 1, "the will of the lost client")
    assert [m.topic for m in watcher.received] == ["w/rude/status"]
    assert watcher.received[0].payload == b"lost"
    late = Client(broker, subscribe=[("w/+/status", 0)])
    wait_until(lambda: len(late.received) == 1, "the retained will")
    watcher.close()
    late.close()


def test_mqtt_3_1_1_is_refused_with_unsupported_protocol_version(broker: EmbeddedBroker) -> None:
    # 3.2.2.2: CONNACK reason code 0x84, unsupported protocol version
    body = b"\x00\x04MQTT\x04\x02\x00\x3c\x00\x01x"
    with socket.create_connection(("127.0.0.1", broker.port), timeout=5) as s:
        s.sendall(bytes([0x10, len(body)]) + body)
        reply = s.recv(16)
    assert reply[0] == 0x20 and reply[3] == 0x84
