"""Alert CloudEvents published over MQTT, received by a real subscriber on a private broker."""

from __future__ import annotations

import json
import queue
from typing import Any

import paho.mqtt.client as mqtt
import pytest

from prognosis_service.alerts.mqtt_publisher import AlertPublisher, parse_event, topic_for_event
from prognosis_service.alerts.webhooks import cloudevent
from tests.prognosis_service.alerts.conftest import WAIT_S, Mosquitto
from tests.prognosis_service.alerts.test_delivery import changes_for

pytestmark = pytest.mark.broker


def subscriber(port: int, inbox: queue.Queue[Any]) -> mqtt.Client:
    ready: queue.Queue[bool] = queue.Queue()
    c = mqtt.Client(
        mqtt.CallbackAPIVersion.VERSION2, client_id="alerts-test-sub", protocol=mqtt.MQTTv5
    )

    def on_connect(client, userdata, flags, reason_code, properties):
        client.subscribe("wellspan/v1/alerts/#", qos=1)

    c.on_connect = on_connect
    c.on_subscribe = lambda *a: ready.put(True)
    c.on_message = lambda client, userdata, msg: inbox.put(msg)
    c.connect("127.0.0.1", port)
    c.loop_start()
    ready.get(timeout=WAIT_S)
    return c


def test_alert_reaches_a_real_subscriber(mosquitto: Mosquitto) -> None:
    inbox: queue.Queue[Any] = queue.Queue()
    sub = subscriber(mosquitto.port, inbox)
    pub = AlertPublisher("127.0.0.1", mosquitto.port, client_id="alerts-test-pub")
    try:
        assert pub.start(wait_s=WAIT_S)
        (change,) = changes_for("MAL-P3")
        event = cloudevent(change)
        info = pub.publish_event(change, event)
        info.wait_for_publish(WAIT_S)
        assert info.is_published()
        msg = inbox.get(timeout=WAIT_S)
    finally:
        pub.stop()
        sub.loop_stop()
        sub.disconnect()
    assert msg.topic == "wellspan/v1/alerts/Mallee/MAL-P3"
    assert msg.qos == 1
    assert msg.properties.ContentType == "application/cloudevents+json"
    got = parse_event(msg.payload)
    assert got == json.loads(json.dumps(event))
    assert got["type"] == "org.wellspan.alert.opened"
    assert got["id"] == str(change.event_id)


def test_topic_for_gateway_alert() -> None:
    (change,) = changes_for("MAL-P1")
    event = cloudevent(change)
    event["data"] = {**event["data"], "asset_id": None, "gateway_id": "mallee-gw1"}
    assert topic_for_event(event) == "wellspan/v1/alerts/Mallee/mallee-gw1"
    event["data"]["gateway_id"] = None
    with pytest.raises(ValueError, match="asset_id or gateway_id"):
        topic_for_event(event)
    with pytest.raises(ValueError, match=r"CloudEvents 1\.0"):
        parse_event(b'{"specversion": "0.3"}')
