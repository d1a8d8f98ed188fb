"""The shipped broker configuration and ACL, loaded by a real Mosquitto 2.

Topics come from the message contract (shared_schema.topics), so the ACL is checked against the
topics gateways and the service really use. MQTT v5 reason codes are those of the MQTT 5.0
specification (OASIS Standard, 2019), table 2-6: 0x00 Success, 0x87 Not authorized,
0x86 Bad User Name or Password.
"""

from __future__ import annotations

import socket
import ssl
import uuid
from collections.abc import Iterator
from pathlib import Path

import pytest
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.reasoncodes import ReasonCode

from shared_schema.topics import (
    INGEST_FILTERS,
    alarm_topic,
    alerts_topic,
    dropped_topic,
    indicators_topic,
    layout_topic,
    shared_subscription,
    status_topic,
)
from tests.deploy.broker_harness import (
    DEPLOY,
    INTEGRATOR_USER,
    SERVICE_USER,
    Broker,
    Probe,
)

pytestmark = pytest.mark.broker

NOT_AUTHORIZED = 0x87  # MQTT 5.0, table 2-6
BAD_USERNAME_OR_PASSWORD = 0x86  # MQTT 5.0, table 2-6
GW = "saltbush-flats/gw-mallee"  # username = "<site>/<gateway>"


def parse_conf(text: str) -> list[tuple[str, str]]:
    """(option, value) per non-comment line of a mosquitto.conf, in order."""
    out = []
    for raw in text.splitlines():
        line = raw.strip()
        if line and not line.startswith("#"):
            key, _, value = line.partition(" ")
            out.append((key, value.strip()))
    return out


def listener_sections(entries: list[tuple[str, str]]) -> dict[str, dict[str, str]]:
    sections: dict[str, dict[str, str]] = {}
    current: dict[str, str] | None = None
    for key, value in entries:
        if key == "listener":
            current = sections.setdefault(value, {})
        elif current is not None:
            current[key] = value
    return sections


@pytest.fixture
def probes() -> Iterator[list[Probe]]:
    made: list[Probe] = []
    yield made
    for p in made:
        p.close()


def connected(broker: Broker, probes: list[Probe], username: str, **kw: object) -> Probe:
    probe = Probe()
    rc = probe.connect(broker, username, **kw)  # type: ignore[arg-type]
    assert not rc.is_failure, f"{username} refused: {rc}\n{broker.log()}"
    probes.append(probe)
    return probe


# --------------------------------------------------------------------------------------------
# The file itself
# --------------------------------------------------------------------------------------------
def test_shipped_config_sets_the_production_options() -> None:
    entries = parse_conf((DEPLOY / "mosquitto" / "mosquitto.conf").read_text())
    options = {k: v for k, v in entries if k != "listener"}
    assert options["allow_anonymous"] == "false"
    assert options["per_listener_settings"] == "false"
    assert options["password_file"] == "/etc/mosquitto/wellspan.passwd"
    assert options["acl_file"] == "/etc/mosquitto/wellspan.acl"
    assert options["persistence"] == "true"
    assert options["persistence_location"] == "/var/lib/mosquitto/"
    assert options["persistent_client_expiration"] == "14d"
    for limit in ("max_inflight_messages", "max_queued_messages", "message_size_limit"):
        assert int(options[limit]) > 0, limit

    listeners = listener_sections(entries)
    assert set(listeners) == {"8883", "1883 127.0.0.1"}  # TLS, and plain on loopback only
    tls = listeners["8883"]
    assert tls["cafile"] == "/etc/mosquitto/certs/ca.crt"
    assert tls["certfile"] == "/etc/mosquitto/certs/server.crt"
    assert tls["keyfile"] == "/etc/mosquitto/certs/server.key"
    assert tls["tls_version"] == "tlsv1.2"  # the minimum in Mosquitto 2 (mosquitto.conf(5))
    assert not {"cafile", "certfile", "keyfile"} & set(listeners["1883 127.0.0.1"])


def test_acl_grants_nothing_to_clients_without_a_username() -> None:
    entries = parse_conf((DEPLOY / "mosquitto" / "wellspan.acl").read_text())
    before_first_user = []
    for key, value in entries:
        if key == "user":
            break
        before_first_user.append((key, value))
    assert all(key == "pattern" for key, _ in before_first_user), before_first_user


def test_acl_closes_the_gateway_pattern_for_every_named_user() -> None:
    # Pattern lines apply to every user (mosquitto.conf(5), acl_file), so a user without "/" in
    # its name would get wellspan/v1/<name>/# from the gateway pattern unless it denies it.
    entries = parse_conf((DEPLOY / "mosquitto" / "wellspan.acl").read_text())
    assert ("pattern", "readwrite wellspan/v1/%u/#") in entries
    users: dict[str, list[str]] = {}
    current = None
    for key, value in entries:
        if key == "user":
            current = users.setdefault(value, [])
        elif current is not None:
            current.append(f"{key} {value}")
    assert set(users) == {SERVICE_USER, INTEGRATOR_USER}
    for name, lines in users.items():
        assert f"topic deny wellspan/v1/{name}/#" in lines, name


# --------------------------------------------------------------------------------------------
# TLS and authentication
# --------------------------------------------------------------------------------------------
def test_broker_starts_with_the_shipped_config_and_speaks_tls(
    broker: Broker, probes: list[Probe]
) -> None:
    log = broker.log()
    assert " running" in log
    complaints = [
        line
        for line in log.split(" running")[0].splitlines()
        if ("Error" in line or "Warning" in line)
        # the one line the test itself causes: it keeps a root-started broker as root
        and "should not be run as root" not in line
    ]
    assert not complaints, log
    tls12 = ssl.create_default_context(cafile=str(broker.pki.ca_cert))
    tls12.maximum_version = ssl.TLSVersion.TLSv1_2
    connected(broker, probes, SERVICE_USER, context=tls12)
    tls13 = ssl.create_default_context(cafile=str(broker.pki.ca_cert))
    tls13.minimum_version = ssl.TLSVersion.TLSv1_3
    connected(broker, probes, SERVICE_USER, context=tls13)


def test_tls_listener_presents_the_certificate_of_our_ca(broker: Broker) -> None:
    # A client trusting only the system store must reject the broker's private-CA certificate.
    probe = Probe()
    with pytest.raises(ssl.SSLCertVerificationError):
        probe.connect(broker, SERVICE_USER, context=ssl.create_default_context())
    probe.client.loop_stop()


def test_tls_listener_refuses_plain_mqtt(broker: Broker) -> None:
    # An MQTT 3.1.1 CONNECT (MQTT 3.1.1, section 3.1) sent in the clear: the TLS listener must
    # answer with a TLS alert record (content type 21, RFC 8446 section 5.1) or close, never with a
    # CONNACK (first byte 0x20).
    connect = bytes([0x10, 12, 0, 4, *b"MQTT", 4, 0x02, 0, 30, 0, 0])
    with socket.create_connection(("127.0.0.1", broker.tls_port), timeout=10) as s:
        s.sendall(connect)
        try:
            answer = s.recv(64)
        except ConnectionResetError:
            answer = b""
    assert answer[:1] in (b"", b"\x15"), answer


@pytest.mark.parametrize("tls", [True, False], ids=["tls-8883", "loopback-1883"])
def test_anonymous_connection_is_refused(broker: Broker, tls: bool) -> None:
    rc = Probe().connect(broker, None, tls=tls)
    assert rc.is_failure
    assert rc.value == NOT_AUTHORIZED


@pytest.mark.parametrize("tls", [True, False], ids=["tls-8883", "loopback-1883"])
def test_wrong_password_is_refused(broker: Broker, tls: bool) -> None:
    rc = Probe().connect(broker, GW, password="not-the-password", tls=tls)
    assert rc.is_failure
    assert rc.value in (BAD_USERNAME_OR_PASSWORD, NOT_AUTHORIZED)


def test_local_service_connects_on_loopback_with_its_password(
    broker: Broker, probes: list[Probe]
) -> None:
    connected(broker, probes, SERVICE_USER, tls=False)


# --------------------------------------------------------------------------------------------
# What a gateway may publish
# --------------------------------------------------------------------------------------------
def test_gateway_publishes_every_contract_topic_of_its_own_and_the_service_receives_them(
    broker: Broker, probes: list[Probe]
) -> None:
    service = connected(broker, probes, SERVICE_USER)
    granted = service.subscribe(*(shared_subscription("ingest", f) for f in INGEST_FILTERS))
    assert all(not rc.is_failure for rc in granted)
    gateway = connected(broker, probes, GW)

    topics = [
        layout_topic("saltbush-flats", "gw-mallee"),
        status_topic("saltbush-flats", "gw-mallee"),
        dropped_topic("saltbush-flats", "gw-mallee"),
        indicators_topic("saltbush-flats", "gw-mallee", "MAL-P1"),
        alarm_topic("saltbush-flats", "gw-mallee", "MAL-P1"),
    ]
    for topic in topics:
        rc = gateway.publish(topic, b"payload", qos=1)
        assert not rc.is_failure, (topic, rc)
    got = service.receive_until(topics[-1])
    assert [m.topic for m in got] == topics
    assert all(m.payload == b"payload" for m in got)


@pytest.mark.parametrize(
    "topic",
    [
        indicators_topic("other-site", "gw-mallee", "MAL-P1"),  # another site, same gateway name
        indicators_topic("saltbush-flats", "gw-gibber", "GIB-P2"),  # same site, another gateway
        status_topic("saltbush-flats", "gw-spinifex"),
        layout_topic("saltbush-flats", "gw-gibber"),
        alerts_topic("saltbush-flats", "MAL-P1"),  # posing as the service
        "wellspan/v1/saltbush-flats/layout",  # above its own subtree
        "wellspan/v2/saltbush-flats/gw-mallee/status",  # another schema version
    ],
)
def test_gateway_cannot_publish_outside_its_own_site_and_gateway(
    broker: Broker, probes: list[Probe], topic: str
) -> None:
    service = connected(broker, probes, SERVICE_USER)
    service.subscribe("wellspan/#")
    gateway = connected(broker, probes, GW)

    rc = gateway.publish(topic, b"forged", qos=1)
    assert rc.value == NOT_AUTHORIZED, rc
    marker = status_topic("saltbush-flats", "gw-mallee")
    assert not gateway.publish(marker, b"marker", qos=1).is_failure
    got = service.receive_until(marker)
    assert [m.topic for m in got] == [marker], "the forged publish reached the service"


def test_forbidden_qos0_publish_is_dropped_silently(broker: Broker, probes: list[Probe]) -> None:
    service = connected(broker, probes, SERVICE_USER)
    service.subscribe("wellspan/#")
    gateway = connected(broker, probes, GW)
    gateway.publish(indicators_topic("saltbush-flats", "gw-spinifex", "SPI-P1"), b"forged", qos=0)
    marker = status_topic("saltbush-flats", "gw-mallee")
    gateway.publish(marker, b"marker", qos=1)
    assert [m.topic for m in service.receive_until(marker)] == [marker]


def test_gateway_reads_nothing_but_its_own_subtree(broker: Broker, probes: list[Probe]) -> None:
    gateway = connected(broker, probes, GW)
    gateway.subscribe("wellspan/#")
    other = connected(broker, probes, "saltbush-flats/gw-gibber")
    service = connected(broker, probes, SERVICE_USER)
    assert not other.publish(
        indicators_topic("saltbush-flats", "gw-gibber", "GIB-P2"), b"x"
    ).is_failure
    assert not service.publish(alerts_topic("saltbush-flats", "MAL-P1"), b"{}").is_failure
    own = status_topic("saltbush-flats", "gw-mallee")
    assert not gateway.publish(own, b"own").is_failure
    assert [m.topic for m in gateway.receive_until(own)] == [own]


# --------------------------------------------------------------------------------------------
# The service and the integrator
# --------------------------------------------------------------------------------------------
def test_service_publishes_alerts_but_cannot_pose_as_a_gateway(
    broker: Broker, probes: list[Probe]
) -> None:
    service = connected(broker, probes, SERVICE_USER)
    assert not service.publish(alerts_topic("saltbush-flats", "MAL-P1"), b"{}").is_failure
    for topic in (
        indicators_topic("saltbush-flats", "gw-mallee", "MAL-P1"),
        # the gateway pattern, applied to the service's own name, must not open a fake site:
        status_topic(SERVICE_USER, "gw"),
    ):
        assert service.publish(topic, b"forged").value == NOT_AUTHORIZED, topic


def test_integrator_reads_alerts_but_not_indicators(broker: Broker, probes: list[Probe]) -> None:
    integrator = connected(broker, probes, INTEGRATOR_USER)
    integrator.subscribe("wellspan/#")  # asks for everything; the ACL filters per message
    gateway = connected(broker, probes, GW)
    service = connected(broker, probes, SERVICE_USER)

    assert not gateway.publish(
        indicators_topic("saltbush-flats", "gw-mallee", "MAL-P1"), b"x"
    ).is_failure
    assert not gateway.publish(
        layout_topic("saltbush-flats", "gw-mallee"), b"{}", retain=True
    ).is_failure
    alert = alerts_topic("saltbush-flats", "MAL-P1")
    assert not service.publish(alert, b'{"alert": 1}').is_failure
    got = integrator.receive_until(alert)
    assert [m.topic for m in got] == [alert]
    assert got[0].payload == b'{"alert": 1}'


def test_integrator_cannot_publish_anything(broker: Broker, probes: list[Probe]) -> None:
    integrator = connected(broker, probes, INTEGRATOR_USER)
    for topic in (
        alerts_topic("saltbush-flats", "MAL-P1"),
        indicators_topic("saltbush-flats", "gw-mallee", "MAL-P1"),
        # the gateway pattern applied to the integrator's name, i.e. a fake site:
        indicators_topic(INTEGRATOR_USER, "gw", "X-P1"),
    ):
        assert integrator.publish(topic, b"forged").value == NOT_AUTHORIZED, topic


# --------------------------------------------------------------------------------------------
# Limits and persistence
# --------------------------------------------------------------------------------------------
def test_payload_over_message_size_limit_is_not_forwarded(
    broker: Broker, probes: list[Probe]
) -> None:
    limit = int(dict(parse_conf(broker.config.read_text()))["message_size_limit"])
    service = connected(broker, probes, SERVICE_USER)
    service.subscribe("wellspan/#")
    gateway = connected(broker, probes, GW)
    topic = indicators_topic("saltbush-flats", "gw-mallee", "MAL-P1")

    assert not gateway.publish(topic, b"\0" * limit).is_failure
    gateway.publish_settled(topic, b"\1" * (limit + 1))
    marker = status_topic("saltbush-flats", "gw-mallee")
    assert not connected(broker, probes, GW).publish(marker, b"marker").is_failure
    got = service.receive_until(marker)
    assert [len(m.payload) for m in got] == [limit, len(b"marker")]


def test_queued_and_retained_messages_survive_a_broker_restart(
    own_broker: Broker, probes: list[Probe]
) -> None:
    # The service's persistent session (as prognosis_service keeps it: fixed client id,
    # clean_start False, a session expiry) with its shared subscription.
    client_id = f"wellspan-ingest-{uuid.uuid4().hex[:8]}"
    service = Probe(client_id)
    rc = service.connect(own_broker, SERVICE_USER, clean_start=False, session_expiry_s=3600)
    assert not rc.is_failure
    service.subscribe(shared_subscription("ingest", INGEST_FILTERS[3]))
    service.close()  # the service goes away; the broker keeps its session and queues for it

    gateway = connected(own_broker, probes, GW)
    layout = layout_topic("saltbush-flats", "gw-mallee")
    indicators = indicators_topic("saltbush-flats", "gw-mallee", "MAL-P1")
    assert not gateway.publish(layout, b'{"layout": 1}', retain=True).is_failure
    assert not gateway.publish(indicators, b"queued while the service was away").is_failure
    gateway.close()
    probes.remove(gateway)

    own_broker.restart()

    back = Probe(client_id)
    rc = back.connect(own_broker, SERVICE_USER, clean_start=False, session_expiry_s=3600)
    probes.append(back)
    assert not rc.is_failure
    msg = back.messages.get(timeout=10)
    assert (msg.topic, msg.payload) == (indicators, b"queued while the service was away")

    fresh = connected(own_broker, probes, SERVICE_USER)
    fresh.subscribe(layout)
    retained = fresh.messages.get(timeout=10)
    assert (retained.topic, retained.payload, retained.retain) == (layout, b'{"layout": 1}', True)


def test_persistence_file_is_written_where_the_config_says(own_broker: Broker) -> None:
    own_broker.stop()
    data_dir = Path(dict(parse_conf(own_broker.config.read_text()))["persistence_location"])
    assert (data_dir / "mosquitto.db").is_file()


# --------------------------------------------------------------------------------------------
# The gateway's Last Will
# --------------------------------------------------------------------------------------------
def _leave_with_will(probe: Probe) -> None:
    # MQTT 5.0 section 3.14.2.1: DISCONNECT reason 0x04 asks the broker to publish the Will.
    probe.client.disconnect(reasoncode=ReasonCode(PacketTypes.DISCONNECT, identifier=0x04))
    probe.client.loop_stop()


def test_gateway_last_will_on_its_status_topic_reaches_the_service(
    broker: Broker, probes: list[Probe]
) -> None:
    service = connected(broker, probes, SERVICE_USER)
    service.subscribe(INGEST_FILTERS[1])  # status
    status = status_topic("saltbush-flats", "gw-mallee")
    gateway = Probe()
    gateway.client.will_set(status, b'{"state": "lost"}', qos=1, retain=True)
    assert not gateway.connect(broker, GW).is_failure
    _leave_with_will(gateway)
    got = service.receive_until(status)
    assert got[-1].payload == b'{"state": "lost"}'


def test_gateway_last_will_on_another_gateways_topic_is_not_delivered(
    broker: Broker, probes: list[Probe]
) -> None:
    service = connected(broker, probes, SERVICE_USER)
    service.subscribe(INGEST_FILTERS[1])
    gateway = Probe()
    gateway.client.will_set(status_topic("saltbush-flats", "gw-gibber"), b"forged", qos=1)
    rc = gateway.connect(broker, GW)
    if not rc.is_failure:  # refused at CONNECT, or accepted and the Will dropped when sent
        _leave_with_will(gateway)
        broker.wait_for_log(f"Client {gateway.client_id} disconnected")
    marker = status_topic("saltbush-flats", "gw-mallee")
    assert not connected(broker, probes, GW).publish(marker, b"marker").is_failure
    got = service.receive_until(marker)
    assert [(m.topic, m.payload) for m in got] == [(marker, b"marker")]
