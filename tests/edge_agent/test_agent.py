"""The agent against a real Mosquitto: outages, crashes, a third-party subscriber."""

from __future__ import annotations

import contextlib
import json
import os
import random
import signal
import sqlite3
import subprocess
import sys
import threading
import time
from datetime import datetime
from pathlib import Path

import pytest

from edge_agent.agent import Agent
from edge_agent.assets import AssetConfig
from edge_agent.outbox import Outbox
from edge_agent.windows import WindowSet
from shared_schema import (
    GatewayState,
    GatewayStatus,
    IndicatorMessage,
    LayoutAnnouncement,
    decode_indicators,
    decode_json,
    is_batch,
    parse_topic,
    split_batch,
)
from tests.brokers import MosquittoBroker, make_certificates, require_tool
from tests.edge_agent.helpers import (
    GATEWAY,
    SITE,
    Receiver,
    SyntheticSource,
    asset_toml,
    gateway_config,
    unique_by_id,
)

REPO = Path(__file__).resolve().parents[2]
MOSQUITTO_SUB = "/usr/bin/mosquitto_sub"

pytestmark = pytest.mark.broker


class GatedSource(SyntheticSource):
    """Synthetic windows that pause at given counts until the test opens the gate.

    While a gate is closed the source has nothing to offer, as a driver without new data would:
    the agent keeps its schedule (and commits what it has) while the test works on the broker.
    """

    def __init__(self, gates: dict[int, threading.Event], loud_from: int | None = None) -> None:
        super().__init__()
        self.gates = gates
        self.loud_from = loud_from
        self.reached = {n: threading.Event() for n in gates}

    def windows(self, asset: AssetConfig, due: datetime) -> list[WindowSet]:
        n = self.produced
        if n in self.gates and not self.gates[n].is_set():
            self.reached[n].set()
            self.gates[n].wait(0.01)
            return []
        loud = self.loud_from is not None and n >= self.loud_from
        self.scale = (lambda a, t: 10.0) if loud else (lambda a, t: 1.0)
        return super().windows(asset, due)


def per_asset_in_order(messages: list[IndicatorMessage]) -> bool:
    last: dict[str, int] = {}
    for m in messages:
        if m.sequence <= last.get(m.asset_id, -1):
            return False
        last[m.asset_id] = m.sequence
    return True


def test_broker_outage_of_1000_windows_loses_nothing_and_keeps_order(
    tmp_path: Path, private_mosquitto: MosquittoBroker
) -> None:
    broker = private_mosquitto
    users = {"reader": "reader-pass", GATEWAY: "gateway-pass"}
    broker.stop()
    broker.start(users=users)
    (tmp_path / "pw").write_text("gateway-pass\n")
    receiver = Receiver(broker.host, broker.port, "reader", "reader-pass").start()
    gates = {50: threading.Event(), 1050: threading.Event()}
    source = GatedSource(gates, loud_from=1040)
    cfg = gateway_config(
        tmp_path,
        broker.url,
        broker={"username": GATEWAY, "password_file": str(tmp_path / "pw"),
                "reconnect_min_s": 0.2, "reconnect_max_s": 0.5},
        alarms={"thresholds": {"de_accel.velocity_rms": {"high": 8.0}}},
    )  # fmt: skip
    agent = Agent(cfg, source=source, max_windows=1100, drain_timeout_s=30)
    runner = threading.Thread(target=agent.run)
    runner.start()
    try:
        assert source.reached[50].wait(30)
        receiver.wait_for(lambda r: len(r.indicators()) == 50, timeout=30)
        broker.stop()
        gates[50].set()
        assert source.reached[1050].wait(60)
        # the windows of the outage are on disk, not lost
        deadline = time.monotonic() + 10
        while agent.outbox.stats().messages < 1000 and time.monotonic() < deadline:
            time.sleep(0.05)
        assert agent.outbox.stats().messages >= 1000
        # the broker comes back refusing the gateway until the subscriber is in place again
        broker.start(users={"reader": "reader-pass"})
        receiver.wait_for(lambda r: r.client.is_connected(), timeout=30)
        time.sleep(0.3)
        broker.set_users(users)
        gates[1050].set()
        runner.join(90)
        assert not runner.is_alive()
        receiver.wait_for(lambda r: len({m.message_id for m in r.indicators()}) >= 1100, 30)
    finally:
        for g in gates.values():
            g.set()
        agent.stop()
        runner.join(30)
        receiver.stop()
    received = receiver.indicators()
    unique = list(unique_by_id(received))
    assert sorted(m.sequence for m in unique) == list(range(1100))
    # QoS 1 allows a redelivery of what was in flight when the broker went away, no more
    assert len(received) - len(unique) <= cfg.broker.inflight_max
    assert per_asset_in_order(unique)
    # the backlog went out in batches of many windows per MQTT message
    payloads = [m.payload for m in receiver.of_kind("indicators")]
    assert any(is_batch(p) for p in payloads)
    assert len(payloads) < 300
    # the alarm raised at window 1040 overtook most of the backlog queued before it (what paho
    # held in flight when the broker went away is sent again first)
    arrivals = receiver.snapshot()
    first_alarm = next(i for i, m in enumerate(arrivals) if m.topic.endswith("/alarm"))
    frames_before = sum(
        len(split_batch(m.payload)) for m in arrivals[:first_alarm]
        if m.topic.endswith("/indicators")
    )  # fmt: skip
    assert frames_before < 1040 - 500
    box = Outbox(cfg.outbox.path, gateway_id=GATEWAY, site=SITE, max_bytes=10**9)
    assert box.stats().messages == 0
    box.close()


def test_alarms_jump_the_queue(tmp_path: Path, private_mosquitto: MosquittoBroker) -> None:
    broker = private_mosquitto
    broker.stop()
    broker.start(users={"reader": "reader-pass"})  # the gateway is refused for now
    (tmp_path / "pw").write_text("gateway-pass\n")
    receiver = Receiver(broker.host, broker.port, "reader", "reader-pass").start()
    cfg = gateway_config(
        tmp_path,
        broker.url,
        broker={"username": GATEWAY, "password_file": str(tmp_path / "pw")},
        alarms={"thresholds": {"de_accel.velocity_rms": {"high": 8.0}}},
    )
    gate = threading.Event()
    source = GatedSource({300: gate}, loud_from=240)  # 02:00 onwards is loud
    agent = Agent(cfg, source=source, max_windows=302, drain_timeout_s=30)
    runner = threading.Thread(target=agent.run)
    runner.start()
    try:
        assert source.reached[300].wait(30)
        deadline = time.monotonic() + 10
        while agent.outbox.stats().next_sequence < 300 and time.monotonic() < deadline:
            time.sleep(0.05)
        broker.set_users({"reader": "reader-pass", GATEWAY: "gateway-pass"})
        receiver.wait_for(lambda r: len(r.indicators()) >= 300, 30)
        gate.set()
        runner.join(60)
    finally:
        gate.set()
        agent.stop()
        runner.join(30)
        receiver.stop()
    data = [m for m in receiver.snapshot() if m.topic.endswith(("/alarm", "/indicators"))]
    alarms = receiver.alarms()
    assert len(alarms) == 2  # one per asset, raised after 240 routine windows
    assert all(m.topic.endswith("/alarm") for m in data[:2])
    assert all(a.kind.value == "threshold" and a.value and a.value > 8.0 for a in alarms)


def test_tls_and_password(tmp_path: Path, private_mosquitto: MosquittoBroker) -> None:
    broker = private_mosquitto
    certs = make_certificates(tmp_path / "certs")
    broker.stop()
    broker.start(users={"reader": "reader-pass", GATEWAY: "gateway-pass"}, tls=certs)
    receiver = Receiver(broker.host, broker.port, "reader", "reader-pass", ca_file=certs.ca)
    receiver.start()
    (tmp_path / "pw").write_text("gateway-pass\n")
    cfg = gateway_config(
        tmp_path,
        broker.url,
        broker={"username": GATEWAY, "password_file": str(tmp_path / "pw"),
                "ca_file": str(certs.ca)},
    )  # fmt: skip
    assert cfg.broker.tls and broker.url.startswith("mqtts://")
    Agent(cfg, source=SyntheticSource(), max_windows=6).run()
    receiver.wait_for(lambda r: len(r.indicators()) == 6, 10)
    receiver.stop()


def test_clean_shutdown_leaves_offline_status_retained(
    tmp_path: Path, mosquitto: MosquittoBroker
) -> None:
    receiver = Receiver(mosquitto.host, mosquitto.port).start()
    cfg = gateway_config(tmp_path, mosquitto.url)
    summary = Agent(cfg, source=SyntheticSource(), max_windows=30).run()
    assert summary.windows == 30 and summary.queued == 30
    receiver.wait_for(lambda r: len(r.indicators()) == 30, 10)
    receiver.stop()
    # a new subscriber sees the retained state: the layout and the OFFLINE status
    late = Receiver(mosquitto.host, mosquitto.port).start()
    late.wait_for(lambda r: len(r.of_kind("status")) >= 1 and len(r.of_kind("layout")) >= 1, 10)
    status = decode_json(late.of_kind("status")[-1].payload, GatewayStatus)
    assert status.state is GatewayState.OFFLINE
    assert status.outbox_messages == 0
    assert status.last_sequence == 29
    assert status.budget_bytes_per_day == cfg.budget.bytes_per_day
    assert status.cpu_fraction is not None and status.lag_s is not None
    late.stop()


def test_a_third_party_subscriber_receives_what_the_codec_decodes(
    tmp_path: Path, mosquitto: MosquittoBroker
) -> None:
    require_tool(Path(MOSQUITTO_SUB).exists(), "mosquitto_sub not installed")
    sub = subprocess.Popen(
        [MOSQUITTO_SUB, "-h", mosquitto.host, "-p", str(mosquitto.port), "-q", "1", "-V", "5",
         "-t", "wellspan/#", "-F", "%t %x"],
        stdout=subprocess.PIPE, text=True,
    )  # fmt: skip
    out = sub.stdout
    assert out is not None
    lines: list[str] = []
    reader = threading.Thread(target=lambda: lines.extend(ln.strip() for ln in out))
    reader.start()
    probe = Receiver(mosquitto.host, mosquitto.port).start()
    try:
        # wait until mosquitto_sub is subscribed: it prints our probe
        deadline = time.monotonic() + 10
        while not any(ln.startswith("wellspan/probe ") for ln in list(lines)):
            assert time.monotonic() < deadline, "mosquitto_sub did not subscribe"
            probe.client.publish("wellspan/probe", b"hello", qos=1)
            time.sleep(0.1)
        cfg = gateway_config(tmp_path, mosquitto.url, assets=("TST-P7",))
        Agent(cfg, source=SyntheticSource(), max_windows=25).run()
        probe.wait_for(lambda r: len([m for m in r.indicators() if m.asset_id == "TST-P7"]) >= 25)
        time.sleep(0.3)
    finally:
        probe.stop()
        sub.terminate()
        sub.wait(5)
        reader.join(5)
    layouts = {}
    decoded = []
    for ln in lines:
        topic, _, hexed = ln.partition(" ")
        parts = parse_topic(topic)
        if parts is None or parts.gateway_id != GATEWAY or parts.asset_id not in (None, "TST-P7"):
            continue
        payload = bytes.fromhex(hexed)
        if parts.kind == "layout":
            for la in decode_json(payload, LayoutAnnouncement).layouts:
                layouts[la.digest] = la
        elif parts.kind == "indicators":
            for frame in split_batch(payload):
                decoded.append(
                    decode_indicators(frame, layouts, site=parts.site,
                                      gateway_id=parts.gateway_id, asset_id="TST-P7")
                )  # fmt: skip
    assert len(decoded) == 25
    assert [m.window_start for m in decoded] == sorted(m.window_start for m in decoded)
    names = layouts[decoded[0].layout_digest].names
    assert "de_accel.velocity_rms" in names
    assert all(m.values_by_name(layouts[m.layout_digest])["de_accel.velocity_rms"] for m in decoded)


def _kill_config(tmp_path: Path, broker: MosquittoBroker) -> Path:
    text = f"""gateway_id = "{GATEWAY}-k"
site = "{SITE}"

[broker]
url = "{broker.url}"
reconnect_min_s = 0.2
reconnect_max_s = 0.5
status_interval_s = 1

[schedule]
interval_s = 60
clock = "simulated"
simulated_start = 2026-03-01T00:00:00Z
simulated_speed = 0

[budget]
bytes_per_day = 100000000
default_relative = 0.0
adapt = false

[outbox]
path = "outbox.sqlite"

[source]
kind = "simulator"
seed = 7

[source.scenarios]
"TST-P1" = "healthy"
"TST-P2" = "outer_race:0.01:2"

[alarms]
zone_change = false
sensor_fault_windows = 0
"""
    path = tmp_path / "gw.toml"
    path.write_text(text + asset_toml("TST-P1") + asset_toml("TST-P2"))
    return path


@pytest.mark.slow
def test_sigkill_at_random_moments_loses_and_duplicates_nothing(
    tmp_path: Path, mosquitto: MosquittoBroker
) -> None:
    gateway = f"{GATEWAY}-k"
    config = _kill_config(tmp_path, mosquitto)
    receiver = Receiver(mosquitto.host, mosquitto.port).start()
    rng = random.Random(20260301)
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    argv = ["edge", str(config), "--log-format", "kv"]
    cmd = [sys.executable, "-m", "wellspan", *argv]
    zygote = subprocess.Popen(
        [sys.executable, "-m", "tests.edge_agent.zygote"], cwd=REPO, env=env, text=True,
        stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=(tmp_path / "agents.log").open("w"),
    )  # fmt: skip
    assert zygote.stdin is not None and zygote.stdout is not None

    def ask(request: dict[str, object]) -> int:
        zygote.stdin.write(json.dumps(request) + "\n")  # type: ignore[union-attr]
        zygote.stdin.flush()  # type: ignore[union-attr]
        return int(json.loads(zygote.stdout.readline()))  # type: ignore[union-attr]

    kills = produced = 0
    try:
        # at least 20 kills, and on until over 100 messages exist: how many a kill interrupts
        # depends on the machine's speed, the count to check does not (the bound is a hang guard)
        while kills < 20 or produced <= 100:
            assert kills < 400, f"only {produced} messages after {kills} runs"
            pid = ask({"run": argv})
            time.sleep(rng.uniform(0.1, 0.8))  # anywhere from start-up to steady production
            os.kill(pid, signal.SIGKILL)
            status = ask({"wait": pid})
            assert os.WIFSIGNALED(status), f"agent ended by itself with status {status}"
            kills += 1
            db = sqlite3.connect(tmp_path / "outbox.sqlite")
            assert db.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
            with contextlib.suppress(sqlite3.OperationalError):  # killed before its schema
                row = db.execute("SELECT value FROM meta WHERE key = 'next_sequence'").fetchone()
                produced = int(row[0]) if row else 0
            db.close()
        zygote.stdin.close()
        zygote.wait(10)
        # a last, clean run delivers whatever is left
        done = subprocess.run(
            [*cmd, "--max-windows", "10", "--drain-timeout", "30"],
            cwd=REPO, env=env, capture_output=True, text=True, timeout=120,
        )  # fmt: skip
        assert done.returncode == 0, done.stderr[-2000:]
        box = Outbox(tmp_path / "outbox.sqlite", gateway_id=gateway, site=SITE, max_bytes=10**9)
        total = box.stats().next_sequence
        assert box.stats().messages == 0
        box.close()
        receiver.wait_for(
            lambda r: (
                len({m.message_id for m in r.indicators() if m.gateway_id == gateway}) >= total
            ),
            30,
        )
    finally:
        if zygote.poll() is None:
            zygote.kill()
        receiver.stop()
    mine = [m for m in receiver.indicators() if m.gateway_id == gateway]
    unique = list(unique_by_id(mine))
    # no gap and no duplicate: each sequence number once, under one message id
    assert sorted(m.sequence for m in unique) == list(range(total))
    assert total > 100
    # every window was acquired once: resume after restart continues the schedule
    for asset in ("TST-P1", "TST-P2"):
        starts = [m.window_start for m in sorted(unique, key=lambda m: m.sequence)
                  if m.asset_id == asset]  # fmt: skip
        assert starts == sorted(set(starts))
        assert all(isinstance(s, datetime) for s in starts)
    # the broker told the world each time the gateway vanished
    lost = [
        decode_json(m.payload, GatewayStatus)
        for m in receiver.of_kind("status")
        if parse_topic(m.topic).gateway_id == gateway  # type: ignore[union-attr]
    ]
    assert any(s.state is GatewayState.LOST for s in lost)
    assert lost[-1].state is GatewayState.OFFLINE


def test_sigterm_shuts_down_cleanly_with_json_logs(
    tmp_path: Path, mosquitto: MosquittoBroker
) -> None:
    gateway = f"{GATEWAY}-k"
    config = _kill_config(tmp_path, mosquitto)
    receiver = Receiver(mosquitto.host, mosquitto.port).start()
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    proc = subprocess.Popen(
        [sys.executable, "-m", "wellspan", "edge", str(config), "--speed", "600"],
        cwd=REPO, env=env, stderr=subprocess.PIPE, text=True,
    )  # fmt: skip
    assert proc.stderr is not None
    lines: list[str] = []
    while not any("agent starting" in ln for ln in lines):
        line = proc.stderr.readline()
        assert line, "agent exited before starting"
        lines.append(line)
    receiver.wait_for(lambda r: len([m for m in r.indicators() if m.gateway_id == gateway]) >= 4)
    proc.send_signal(signal.SIGTERM)
    _, rest = proc.communicate(timeout=30)
    assert proc.returncode == 0
    logs = [json.loads(ln) for ln in [*lines, *rest.splitlines()] if ln.startswith("{")]
    events = [e["event"] for e in logs]
    assert "signal received" in events and events[-1] == "agent stopped"
    assert all({"ts", "level", "event"} <= e.keys() for e in logs)
    closed = next(e for e in logs if e["event"] == "outbox closed")
    assert closed["messages"] == 0
    receiver.wait_for(
        lambda r: any(
            decode_json(m.payload, GatewayStatus).state is GatewayState.OFFLINE
            for m in r.of_kind("status")
            if parse_topic(m.topic).gateway_id == gateway  # type: ignore[union-attr]
        ),
        10,
    )
    receiver.stop()
