"""The MQTT v5 uplink (paho-mqtt 2.x): one persistent session to the broker.

Fixed client id, ``clean_start=False`` and a session expiry, QoS 1 for everything, a retained
Last Will (``GatewayStatus`` state LOST) on the status topic, TLS and user name/password, and
reconnection with capped exponential backoff and jitter.

paho's callbacks run on its network thread. They only put :class:`UplinkEvent` items on a queue;
the agent's sender thread does the rest (outbox reads and deletes, publishing). paho keeps
messages it accepted in memory and sends them again after a reconnect, so a message handed to
:meth:`Uplink.publish` stays in flight until its PUBACK arrives as an ``acked`` event; the
outbox keeps it on disk until then, and offers it again only after a restart of the agent.
"""

from __future__ import annotations

import logging
import queue
import random
import threading
from dataclasses import dataclass
from typing import Any, Literal

import paho.mqtt.client as mqtt
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties

from edge_agent.config import BrokerConfig

__all__ = ["PublishRefusedError", "Uplink", "UplinkEvent"]

log = logging.getLogger("edge_agent.uplink")

_NO_MATCHING_SUBSCRIBERS = 16  # PUBACK reason 0x10: accepted, nobody subscribed -- a success

EventKind = Literal["connected", "refused", "disconnected", "connect_failed", "acked", "wake"]


@dataclass(frozen=True, slots=True)
class UplinkEvent:
    kind: EventKind
    mid: int = 0
    ok: bool = True
    detail: str = ""


class PublishRefusedError(RuntimeError):
    """paho did not accept a message (its queue is full or the client is closed)."""


class Uplink:
    """A paho client configured for the gateway, reporting to ``events``.

    Parameters
    ----------
    broker : BrokerConfig
        Where and how to connect.
    client_id : str
        Fixed per gateway, so the broker keeps the session across reconnects.
    will : tuple of (topic, payload)
        Last Will, published retained at QoS 1 by the broker if the connection is lost.
    events : queue.SimpleQueue
        Receives an :class:`UplinkEvent` for every connect, disconnect and PUBACK.
    """

    def __init__(
        self,
        broker: BrokerConfig,
        *,
        client_id: str,
        will: tuple[str, bytes],
        events: queue.SimpleQueue[UplinkEvent],
        seed: int | None = None,
    ) -> None:
        self.broker = broker
        self.client_id = client_id
        self.events = events
        self._rng = random.Random(seed)
        self._connected = threading.Event()
        # Set once the first connection attempt has succeeded or failed: until then a shutdown
        # drain waits rather than treating "not connected yet" as "offline".
        self._attempted = threading.Event()
        self.client = mqtt.Client(
            mqtt.CallbackAPIVersion.VERSION2, client_id=client_id, protocol=mqtt.MQTTv5
        )
        c = self.client
        c.on_connect = self._on_connect
        c.on_disconnect = self._on_disconnect
        c.on_connect_fail = self._on_connect_fail
        c.on_publish = self._on_publish
        c.max_inflight_messages_set(broker.inflight_max)
        c.max_queued_messages_set(0)
        c.will_set(will[0], will[1], qos=1, retain=True)
        if broker.username is not None:
            c.username_pw_set(broker.username, broker.password())
        if broker.tls:
            c.tls_set(
                ca_certs=str(broker.ca_file) if broker.ca_file else None,
                certfile=str(broker.cert_file) if broker.cert_file else None,
                keyfile=str(broker.key_file) if broker.key_file else None,
            )
        self._jitter_backoff()

    # -- network-thread callbacks: queue only -----------------------------------------------

    def _jitter_backoff(self) -> None:
        # paho doubles the delay from min to max; jitter both ends so a fleet of gateways that
        # lost the same broker does not come back in lock step.
        lo = self.broker.reconnect_min_s * self._rng.uniform(0.5, 1.5)
        hi = self.broker.reconnect_max_s * self._rng.uniform(0.75, 1.0)
        self.client.reconnect_delay_set(min_delay=lo, max_delay=max(lo, hi))  # type: ignore[arg-type]

    def _on_connect(
        self, client: mqtt.Client, userdata: Any, flags: Any, reason_code: Any, properties: Any
    ) -> None:
        self._attempted.set()
        if reason_code.is_failure:
            self._jitter_backoff()
            self.events.put(UplinkEvent("refused", ok=False, detail=str(reason_code)))
            return
        self._connected.set()
        self.events.put(UplinkEvent("connected", detail=f"session_present={flags.session_present}"))

    def _on_disconnect(
        self, client: mqtt.Client, userdata: Any, flags: Any, reason_code: Any, properties: Any
    ) -> None:
        self._connected.clear()
        self._jitter_backoff()
        self.events.put(UplinkEvent("disconnected", ok=False, detail=str(reason_code)))

    def _on_connect_fail(self, client: mqtt.Client, userdata: Any) -> None:
        self._attempted.set()
        self._jitter_backoff()
        self.events.put(UplinkEvent("connect_failed", ok=False))

    def _on_publish(
        self, client: mqtt.Client, userdata: Any, mid: int, reason_code: Any, properties: Any
    ) -> None:
        ok = not reason_code.is_failure or reason_code.value == _NO_MATCHING_SUBSCRIBERS
        self.events.put(UplinkEvent("acked", mid=mid, ok=ok, detail=str(reason_code)))

    # -- called from the agent's threads ---------------------------------------------------

    @property
    def connected(self) -> bool:
        return self._connected.is_set()

    @property
    def attempted(self) -> bool:
        """Whether the first connection attempt has come to an end (either way)."""
        return self._attempted.is_set()

    def start(self) -> None:
        props = Properties(PacketTypes.CONNECT)
        props.SessionExpiryInterval = self.broker.session_expiry_s
        self.client.connect_async(
            self.broker.host,
            self.broker.port,
            keepalive=self.broker.keepalive_s,
            clean_start=False,
            properties=props,
        )
        self.client.loop_start()

    def publish(self, topic: str, payload: bytes, *, retain: bool = False) -> int:
        """Hand a QoS 1 message to paho; returns its mid (its PUBACK comes as an event)."""
        info = self.client.publish(topic, payload, qos=1, retain=retain)
        if info.rc not in (mqtt.MQTT_ERR_SUCCESS, mqtt.MQTT_ERR_NO_CONN):
            raise PublishRefusedError(mqtt.error_string(info.rc))
        return int(info.mid)

    def stop(self) -> None:
        """Disconnect cleanly (the broker then drops the Last Will) and stop the network thread."""
        try:
            self.client.disconnect()
        finally:
            self.client.loop_stop()
            self._connected.clear()

    def __repr__(self) -> str:
        return (
            f"Uplink(url={self.broker.url!r}, client_id={self.client_id!r}, "
            f"connected={self.connected})"
        )
