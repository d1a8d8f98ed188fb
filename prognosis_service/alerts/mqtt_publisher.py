"""Alert events on MQTT: the same CloudEvents as the webhooks, under ``wellspan/v1/alerts/...``.

Each event goes to ``alerts_topic(site, asset_id)`` (an alert about a gateway uses the gateway id
as the last level), QoS 1, not retained, with the MQTT v5 properties content type
``application/cloudevents+json`` and payload format "UTF-8". The client keeps one persistent
session (fixed client id, ``clean_start=False``) and reconnects with a capped backoff. Messages
handed over while the broker is away wait in paho's in-memory queue (``max_queued``); they are
lost if the service stops before reconnecting — the webhook deliveries are the durable path, and
subscribers de-duplicate by the CloudEvent ``id`` just as webhook receivers do.
"""

from __future__ import annotations

import json
import logging
import ssl
import threading
from typing import Any

import paho.mqtt.client as mqtt
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties

from prognosis_service.alerts.rules import AlertChange
from prognosis_service.alerts.webhooks import CONTENT_TYPE, cloudevent_body
from shared_schema.topics import alerts_topic

__all__ = ["AlertPublishError", "AlertPublisher", "topic_for_event"]

log = logging.getLogger(__name__)


class AlertPublishError(RuntimeError):
    """paho refused the message (its queue is full or the client is stopped)."""


def topic_for_event(event: dict[str, Any]) -> str:
    """The alerts topic of a CloudEvent built by :func:`webhooks.cloudevent`."""
    data = event["data"]
    target = data.get("asset_id") or data.get("gateway_id")
    if not target:
        raise ValueError("event data must carry asset_id or gateway_id, got neither")
    return alerts_topic(data["site"], target)


class AlertPublisher:
    """Publishes alert CloudEvents to the broker.

    Parameters
    ----------
    host, port : str, int
        The broker.
    client_id : str, default "wellspan-alerts"
        Fixed, so the broker keeps our session (and in-flight QoS 1 messages) across reconnects.
        Unique per service replica: two clients with one id disconnect each other.
    username, password : str, optional
    tls : bool, default False
        Connect with TLS (system trust store).
    max_queued : int, default 10000
        Messages paho holds while disconnected before refusing more.
    """

    def __init__(
        self,
        host: str,
        port: int = 1883,
        *,
        client_id: str = "wellspan-alerts",
        username: str | None = None,
        password: str | None = None,
        tls: bool = False,
        keepalive_s: int = 30,
        max_queued: int = 10_000,
        session_expiry_s: int = 86400,
    ) -> None:
        self.host = host
        self.port = port
        self.client_id = client_id
        self.keepalive_s = keepalive_s
        self.session_expiry_s = session_expiry_s
        self._connected = threading.Event()
        self.client = mqtt.Client(
            mqtt.CallbackAPIVersion.VERSION2, client_id=client_id, protocol=mqtt.MQTTv5
        )
        if username is not None:
            self.client.username_pw_set(username, password)
        if tls:
            self.client.tls_set_context(ssl.create_default_context())
        self.client.max_inflight_messages_set(100)
        self.client.max_queued_messages_set(max_queued)
        self.client.reconnect_delay_set(min_delay=1, max_delay=60)
        self.client.on_connect = self._on_connect
        self.client.on_disconnect = self._on_disconnect

    def __repr__(self) -> str:
        return f"AlertPublisher(host={self.host!r}, port={self.port}, client_id={self.client_id!r})"

    def _on_connect(
        self, client: mqtt.Client, userdata: Any, flags: Any, reason_code: Any, properties: Any
    ) -> None:
        if reason_code.is_failure:
            log.warning("alert publisher: broker refused the connection: %s", reason_code)
            return
        self._connected.set()

    def _on_disconnect(
        self, client: mqtt.Client, userdata: Any, flags: Any, reason_code: Any, properties: Any
    ) -> None:
        self._connected.clear()
        log.info("alert publisher: disconnected (%s); reconnecting", reason_code)

    @property
    def connected(self) -> bool:
        return self._connected.is_set()

    def start(self, *, wait_s: float | None = None) -> bool:
        """Connect in the background; with ``wait_s``, wait that long for the connection."""
        props = Properties(PacketTypes.CONNECT)
        props.SessionExpiryInterval = self.session_expiry_s
        self.client.connect_async(
            self.host, self.port, keepalive=self.keepalive_s, clean_start=False, properties=props
        )
        self.client.loop_start()
        if wait_s is not None:
            return self._connected.wait(wait_s)
        return self.connected

    def stop(self) -> None:
        self.client.disconnect()
        self.client.loop_stop()

    def publish_event(
        self, change: AlertChange | None, event: dict[str, Any]
    ) -> mqtt.MQTTMessageInfo:
        """Publish one CloudEvent (QoS 1). ``change`` is accepted so the method fits
        :class:`~prognosis_service.alerts.service.AlertService`'s ``on_event``.

        Raises
        ------
        AlertPublishError
            When paho refuses the message.
        """
        props = Properties(PacketTypes.PUBLISH)
        props.ContentType = CONTENT_TYPE
        props.PayloadFormatIndicator = 1
        payload = cloudevent_body(event).encode()
        info = self.client.publish(topic_for_event(event), payload, qos=1, properties=props)
        if info.rc not in (mqtt.MQTT_ERR_SUCCESS, mqtt.MQTT_ERR_NO_CONN):
            raise AlertPublishError(f"alert not queued for MQTT: {mqtt.error_string(info.rc)}")
        return info


def parse_event(payload: bytes) -> dict[str, Any]:
    """Decode a received alert CloudEvent (for subscribers and tests)."""
    event = json.loads(payload)
    if not isinstance(event, dict) or event.get("specversion") != "1.0":
        raise ValueError("payload is not a CloudEvents 1.0 JSON object")
    return event
