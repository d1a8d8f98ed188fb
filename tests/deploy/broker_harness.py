"""Harness for the deploy tests: a throwaway CA, and the shipped broker configuration run by the
real Mosquitto with the fewest possible changes (paths into a temporary folder, free ports).

Every change the tests make to ``deploy/mosquitto/mosquitto.conf`` is listed in
``rewrite_broker_config``; each must match exactly once, so a reshaped shipped file fails loudly
instead of being tested half-rewritten.
"""

from __future__ import annotations

import os
import queue
import shlex
import socket
import ssl
import subprocess
import threading
import time
import uuid
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import paho.mqtt.client as mqtt
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties

from tests.brokers import require_tool
from wellspan.mosquitto import free_ports

DEPLOY = Path(__file__).resolve().parents[2] / "deploy"
MOSQUITTO = Path("/usr/sbin/mosquitto")
MOSQUITTO_PASSWD = Path("/usr/bin/mosquitto_passwd")
WAIT_S = 10.0  # longest wait for a broker event before a test gives up (a hang guard, not a check)

SERVICE_USER = "wellspan-service"
INTEGRATOR_USER = "integrator-dispatch"
GATEWAYS = (
    ("saltbush-flats", "gw-mallee"),
    ("saltbush-flats", "gw-gibber"),
    ("saltbush-flats", "gw-spinifex"),
)


def _need(binary: Path) -> None:
    require_tool(binary.exists(), f"{binary} not installed (Debian package mosquitto)")


# --------------------------------------------------------------------------------------------
# A private CA and a server certificate, made by the openssl commands of deploy/OPERATOR.md
# --------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class Pki:
    ca_cert: Path
    server_cert: Path
    server_key: Path


def operator_ca_script() -> str:
    """The shell block of section 3 of deploy/OPERATOR.md (private CA, broker certificate)."""
    section = (DEPLOY / "OPERATOR.md").read_text().split("## 3. TLS certificates", 1)[1]
    return section.split("```sh\n", 1)[1].split("\n```", 1)[0]


def make_pki(folder: Path) -> Pki:
    """Run the operator guide's CA commands, with its folder moved into ``folder``."""
    script = operator_ca_script()
    assert script.count("~/wellspan-ca") == 2, "the guide's CA folder moved; update the test"
    folder.mkdir(parents=True, exist_ok=True)
    done = subprocess.run(
        [
            "bash",
            "-euo",
            "pipefail",
            "-c",
            script.replace("~/wellspan-ca", shlex.quote(str(folder))),
        ],
        capture_output=True,
        text=True,
        check=False,
    )
    assert done.returncode == 0, done.stderr
    return Pki(folder / "ca.crt", folder / "server.crt", folder / "server.key")


# --------------------------------------------------------------------------------------------
# The shipped configuration, rewritten minimally
# --------------------------------------------------------------------------------------------
def rewrite_broker_config(
    text: str,
    *,
    pki: Pki,
    password_file: Path,
    acl_file: Path,
    data_dir: Path,
    tls_port: int,
    plain_port: int,
) -> str:
    """The shipped mosquitto.conf with its paths and ports moved; nothing else changes, except
    that a broker started by root stays root (it would drop to the "mosquitto" user, who cannot
    enter pytest's private temporary folder)."""
    replacements = {
        "cafile /etc/mosquitto/certs/ca.crt": f"cafile {pki.ca_cert}",
        "certfile /etc/mosquitto/certs/server.crt": f"certfile {pki.server_cert}",
        "keyfile /etc/mosquitto/certs/server.key": f"keyfile {pki.server_key}",
        "password_file /etc/mosquitto/wellspan.passwd": f"password_file {password_file}",
        "acl_file /etc/mosquitto/wellspan.acl": f"acl_file {acl_file}",
        "persistence_location /var/lib/mosquitto/": f"persistence_location {data_dir}/",
        "listener 8883": f"listener {tls_port} 127.0.0.1",
        "listener 1883 127.0.0.1": f"listener {plain_port} 127.0.0.1",
    }
    lines = text.splitlines()
    for old, new in replacements.items():
        hits = [i for i, line in enumerate(lines) if line.strip() == old]
        assert len(hits) == 1, f"expected exactly one line {old!r} in the shipped config"
        lines[hits[0]] = new
    if os.geteuid() == 0:
        lines.append("user root")
    return "\n".join(lines) + "\n"


@dataclass
class Broker:
    """A real Mosquitto running the rewritten production config; start/stop keep the ports."""

    config: Path
    log_file: Path
    tls_port: int
    plain_port: int
    pki: Pki
    password_file: Path
    passwords: dict[str, str] = field(default_factory=dict)
    process: subprocess.Popen[bytes] | None = None

    def start(self) -> None:
        with self.log_file.open("ab") as log:
            self.process = subprocess.Popen(
                [str(MOSQUITTO), "-c", str(self.config)], stdout=log, stderr=log
            )
        deadline = time.monotonic() + WAIT_S
        pending = {self.tls_port, self.plain_port}
        while pending:
            if self.process.poll() is not None:
                raise AssertionError(f"mosquitto exited at start:\n{self.log()}")
            if time.monotonic() > deadline:
                raise AssertionError(f"mosquitto did not open {sorted(pending)}:\n{self.log()}")
            for port in list(pending):
                with socket.socket() as s:
                    if s.connect_ex(("127.0.0.1", port)) == 0:
                        pending.discard(port)
            time.sleep(0.05)

    def stop(self) -> None:
        if self.process is not None and self.process.poll() is None:
            self.process.terminate()  # SIGTERM: a clean shutdown writes the persistence file
            self.process.wait(timeout=WAIT_S)
        self.process = None

    def restart(self) -> None:
        self.stop()
        self.start()

    def log(self) -> str:
        return self.log_file.read_text(errors="replace")

    def wait_for_log(self, text: str) -> None:
        """Until the broker has logged ``text``. The broker is single-threaded: once it logs an
        event it finishes handling it before it reads the next packet from anyone."""
        deadline = time.monotonic() + WAIT_S
        while text not in self.log():
            assert time.monotonic() < deadline, f"broker never logged {text!r}:\n{self.log()}"
            time.sleep(0.02)

    def add_user(self, username: str, password: str) -> None:
        subprocess.run(
            [str(MOSQUITTO_PASSWD), "-b", str(self.password_file), username, password],
            check=True,
            capture_output=True,
        )
        self.passwords[username] = password

    def reload(self) -> None:
        assert self.process is not None
        self.process.send_signal(1)  # SIGHUP rereads passwords and ACL


def add_gateway(password_file: Path, site: str, gateway: str, *args: str) -> tuple[str, str]:
    """Run the shipped add-gateway script; return the (username, password) it printed."""
    done = subprocess.run(
        [str(DEPLOY / "mosquitto" / "add-gateway"), "--password-file", str(password_file),
         *args, site, gateway],
        check=True, capture_output=True, text=True,
    )  # fmt: skip
    printed = dict(line.split(" ", 1) for line in done.stdout.splitlines())
    return printed["username"], printed["password"]


def make_broker(folder: Path, pki: Pki) -> Broker:
    """Start the shipped config and ACL (the ACL file itself, not a copy), with the three test
    gateways added by add-gateway and the service and integrator users of the ACL."""
    _need(MOSQUITTO)
    _need(MOSQUITTO_PASSWD)
    password_file = folder / "wellspan.passwd"
    acl_file = DEPLOY / "mosquitto" / "wellspan.acl"
    data_dir = folder / "data"
    data_dir.mkdir()
    tls_port, plain_port = free_ports(2)
    config = folder / "mosquitto.conf"
    config.write_text(
        rewrite_broker_config(
            (DEPLOY / "mosquitto" / "mosquitto.conf").read_text(),
            pki=pki,
            password_file=password_file,
            acl_file=acl_file,
            data_dir=data_dir,
            tls_port=tls_port,
            plain_port=plain_port,
        )
    )
    broker = Broker(config, folder / "mosquitto.log", tls_port, plain_port, pki, password_file)
    for site, gateway in GATEWAYS:
        username, password = add_gateway(password_file, site, gateway)
        broker.passwords[username] = password
    broker.add_user(SERVICE_USER, "service-" + uuid.uuid4().hex)
    broker.add_user(INTEGRATOR_USER, "integrator-" + uuid.uuid4().hex)
    broker.start()
    return broker


# --------------------------------------------------------------------------------------------
# A paho-mqtt 2.x MQTT v5 client that records what happens, for assertions
# --------------------------------------------------------------------------------------------
class Probe:
    """An MQTT v5 client whose CONNACK, PUBACKs, SUBACKs and messages the test can wait for."""

    def __init__(self, client_id: str | None = None) -> None:
        self.client_id = client_id or f"probe-{uuid.uuid4().hex[:12]}"
        self.client = mqtt.Client(
            mqtt.CallbackAPIVersion.VERSION2,
            client_id=self.client_id,
            protocol=mqtt.MQTTv5,
        )
        self.client.reconnect_delay_set(60, 60)  # a refused probe must not hammer the broker
        self.connack: queue.Queue[Any] = queue.Queue()
        self.messages: queue.Queue[mqtt.MQTTMessage] = queue.Queue()
        self._acks: dict[int, Any] = {}
        self._subacks: dict[int, list[Any]] = {}
        self.disconnects: list[Any] = []
        self._cond = threading.Condition()
        self.client.on_connect = lambda c, u, flags, rc, props: self.connack.put(rc)
        self.client.on_message = lambda c, u, msg: self.messages.put(msg)
        self.client.on_publish = self._on_publish
        self.client.on_subscribe = self._on_subscribe
        self.client.on_disconnect = self._on_disconnect

    def _on_publish(self, client: Any, userdata: Any, mid: int, rc: Any, props: Any) -> None:
        with self._cond:
            self._acks[mid] = rc
            self._cond.notify_all()

    def _on_disconnect(self, client: Any, userdata: Any, flags: Any, rc: Any, props: Any) -> None:
        with self._cond:
            self.disconnects.append(rc)
            self._cond.notify_all()

    def _on_subscribe(self, client: Any, userdata: Any, mid: int, rcs: Any, props: Any) -> None:
        with self._cond:
            self._subacks[mid] = list(rcs)
            self._cond.notify_all()

    def connect(
        self,
        broker: Broker,
        username: str | None,
        *,
        password: str | None = None,
        tls: bool = True,
        context: ssl.SSLContext | None = None,
        clean_start: bool = True,
        session_expiry_s: int = 0,
    ) -> Any:
        """Connect and return the CONNACK reason code (a paho ReasonCode)."""
        if username is not None:
            self.client.username_pw_set(username, password or broker.passwords[username])
        if tls:
            if context is None:
                context = ssl.create_default_context(cafile=str(broker.pki.ca_cert))
            self.client.tls_set_context(context)
        props = Properties(PacketTypes.CONNECT)
        props.SessionExpiryInterval = session_expiry_s
        self.client.connect(
            "localhost",
            broker.tls_port if tls else broker.plain_port,
            keepalive=30,
            clean_start=clean_start,
            properties=props,
        )
        self.client.loop_start()
        rc = self.connack.get(timeout=WAIT_S)
        if rc.is_failure:
            self.close()
        return rc

    def subscribe(self, *filters: str, qos: int = 1) -> list[Any]:
        result, mid = self.client.subscribe([(f, qos) for f in filters])
        assert result == mqtt.MQTT_ERR_SUCCESS and mid is not None
        with self._cond:
            assert self._cond.wait_for(lambda: mid in self._subacks, timeout=WAIT_S)
            return self._subacks.pop(mid)

    def publish(
        self, topic: str, payload: bytes | str, *, qos: int = 1, retain: bool = False
    ) -> Any:
        """Publish and return the PUBACK reason code (QoS 1)."""
        info = self.client.publish(topic, payload, qos=qos, retain=retain)
        assert info.rc == mqtt.MQTT_ERR_SUCCESS
        with self._cond:
            assert self._cond.wait_for(lambda: info.mid in self._acks, timeout=WAIT_S)
            return self._acks.pop(info.mid)

    def publish_settled(self, topic: str, payload: bytes) -> None:
        """Publish at QoS 1 and wait until the broker has answered it, by a PUBACK or by ending
        the connection (Mosquitto 2.0.11 answers a too-large publish with PUBACK reason 0x95,
        which MQTT 5.0 does not list for PUBACK, and paho-mqtt 2 drops the connection on it)."""
        info = self.client.publish(topic, payload, qos=1)
        with self._cond:
            assert self._cond.wait_for(
                lambda: info.mid in self._acks or bool(self.disconnects), timeout=WAIT_S
            )

    def receive_until(self, topic: str) -> list[mqtt.MQTTMessage]:
        """Every live message received up to and including the first one on ``topic``.

        Used as a barrier: Mosquitto routes each publish to its subscribers before it acknowledges
        it, in order, so a forbidden message published before the marker would be in this list.
        Retained messages (left by earlier tests, sent on subscribing) are skipped.
        """
        got = []
        while True:
            msg = self.messages.get(timeout=WAIT_S)
            if msg.retain:
                continue
            got.append(msg)
            if msg.topic == topic:
                return got

    def close(self) -> None:
        self.client.disconnect()
        self.client.loop_stop()
