"""The demo's engine end to end in a short mode: the whole fleet, 24 simulated days.

Real processes throughout: a private Mosquitto (wellspan.mosquitto, as tests/brokers.py),
``wellspan serve`` on SQLite, four ``wellspan edge`` gateways; the link-loss gateway's relay is
cut and restored. One run serves every test of the module.
"""

from __future__ import annotations

import os
import uuid
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest

from edge_agent.simulator import BEARING_FAULTS
from tests.brokers import missing, require_tool
from wellspan.demo import engine as engine_module
from wellspan.demo.engine import DemoEngine, DemoError, DemoOptions
from wellspan.mosquitto import mosquitto_installed

pytestmark = [pytest.mark.slow, pytest.mark.broker]

# Enough windows for a healthy baseline (the lead-in) and, with the service's 12-hour buckets,
# for degradation fits of the faster bearing faults.
SHORT = DemoOptions(days=24.0, every_hours=2.0, minutes=0.8)


def test_asked_for_mosquitto_without_it_the_demo_says_how_to_install_it(
    monkeypatch: pytest.MonkeyPatch, tmp_path: Path
) -> None:
    monkeypatch.setattr(engine_module, "mosquitto_installed", lambda: False)
    with DemoEngine(DemoOptions(days=2, broker="mosquitto", workdir=tmp_path)) as engine:
        with pytest.raises(DemoError, match=r"Mosquitto.*apt-get install -y mosquitto"):
            engine.start()
        assert engine.children.pids == {}


def test_without_mosquitto_the_demo_runs_on_the_embedded_broker(
    monkeypatch: pytest.MonkeyPatch, tmp_path: Path
) -> None:
    monkeypatch.setattr(engine_module, "mosquitto_installed", lambda: False)
    said: list[str] = []
    options = DemoOptions(days=2, every_hours=1, minutes=0.3, pads=("gibber", "coolibah"),
                          workdir=tmp_path)  # fmt: skip
    with DemoEngine(options) as engine:
        engine.start(said.append)
        engine.simulate()
        report = engine.collect()
        pids = engine.children.pids
    assert any("Mosquitto is not installed" in s and "apt-get install -y mosquitto" in s
               for s in said), said  # fmt: skip
    assert report["broker"].startswith("embedded Python MQTT broker")
    for g in report["gateways"]:
        assert g["messages_queued"] == 3 * 48
        assert g["messages_stored"] == g["distinct_sequences_stored"] == g["messages_queued"]
        assert g["edge_alarms_stored"] == g["edge_alarms_sent"]
    lost = report["gateways"][1]
    assert lost["gateway_id"] == "gw-coolibah" and lost["link_loss"]["largest_backlog"] > 0
    for pid in pids.values():
        with pytest.raises(ProcessLookupError):
            os.kill(pid, 0)


@pytest.mark.parametrize(
    ("options", "message"),
    [
        (DemoOptions(days=0), "--days"),
        (DemoOptions(every_hours=30), "--every-hours"),
        (DemoOptions(days=0.05, every_hours=1), "two windows"),
        (DemoOptions(minutes=0), "--minutes"),
        (DemoOptions(speed=-1), "--speed"),
        (DemoOptions(pads=("mallee", "nowhere")), "unknown pads"),
        (DemoOptions(postgres="mysql://x"), "--postgres"),
    ],
)
def test_bad_options_are_refused_in_plain_words(options: DemoOptions, message: str) -> None:
    with pytest.raises(DemoError, match=message):
        options.validate()


@pytest.fixture(scope="module")
def demo(tmp_path_factory: pytest.TempPathFactory) -> Iterator[dict[str, Any]]:
    """The report of one short run, taken after the engine has shut everything down; the pids
    of every process it started are under ``"pids"``."""
    require_tool(mosquitto_installed(), "Mosquitto binary not installed")
    workdir = tmp_path_factory.mktemp("demo")
    options = DemoOptions(
        days=SHORT.days, every_hours=SHORT.every_hours, minutes=SHORT.minutes, workdir=workdir
    )
    engine = DemoEngine(options)
    try:
        engine.start()
        engine.simulate()
        report = engine.collect()
        assert engine.broker is not None and engine.broker.pid is not None
        pids = {**engine.children.pids, "mosquitto": engine.broker.pid}
    finally:
        engine.shutdown()
    report["pids"] = pids
    report["workdir"] = str(workdir)
    yield report


def test_every_message_a_gateway_sent_is_stored_exactly_once(demo: dict[str, Any]) -> None:
    assert [g["gateway_id"] for g in demo["gateways"]] == [
        "gw-mallee", "gw-gibber", "gw-spinifex", "gw-coolibah"
    ]  # fmt: skip
    ticks = round(SHORT.days * 24 / SHORT.every_hours)
    for g in demo["gateways"]:
        assert g["exit_code"] == 0, g
        assert g["windows"] == 3 * ticks, g
        queued = g["messages_queued"]  # the gateway's outbox: sequences 0 .. queued-1
        assert queued > 0
        assert g["pending_in_outbox"] == 0, g
        assert g["messages_sent"] == queued
        assert g["messages_stored"] == queued, g
        assert g["distinct_sequences_stored"] == queued, g
        assert g["sequence_range_stored"] == [0, queued - 1], g
        assert g["edge_alarms_stored"] == g["edge_alarms_sent"], g
    assert sum(a["messages_stored"] for a in demo["assets"]) == sum(
        g["messages_stored"] for g in demo["gateways"]
    )
    assert all(a["messages_stored"] > 0 for a in demo["assets"])


def test_the_link_loss_gateway_queues_while_cut_and_catches_up(demo: dict[str, Any]) -> None:
    lost = [g for g in demo["gateways"] if g["link_loss"] is not None]
    assert [g["gateway_id"] for g in lost] == ["gw-coolibah"]
    link = lost[0]["link_loss"]
    assert link["cut"] is True
    assert link["real_seconds_down"] is not None and link["real_seconds_down"] > 0
    assert link["largest_backlog"] > 0  # its outbox held messages while the link was down
    assert lost[0]["messages_stored"] == lost[0]["messages_queued"]


def test_bytes_are_measured_on_the_link_and_within_the_budget(demo: dict[str, Any]) -> None:
    for g in demo["gateways"]:
        assert g["bytes_sent"] > 0 and g["bytes_received"] > 0
        # every stored message crossed the link, so the bytes exceed the frames' count
        assert g["bytes_sent"] > g["messages_stored"]
        assert 0 < g["budget_used_fraction"] < 1


def test_no_process_is_left_behind(demo: dict[str, Any]) -> None:
    pids = demo["pids"]
    assert set(pids) == {
        "service", "gw-mallee", "gw-gibber", "gw-spinifex", "gw-coolibah", "mosquitto"
    }  # fmt: skip
    for pid in pids.values():
        with pytest.raises(ProcessLookupError):
            os.kill(pid, 0)
        # each child led its own process group; nothing of the group survives either
        with pytest.raises(ProcessLookupError):
            os.killpg(pid, 0)


def test_the_temporary_folder_holds_the_gateway_configs_and_logs(demo: dict[str, Any]) -> None:
    workdir = Path(demo["workdir"])
    for g in demo["gateways"]:
        assert (workdir / g["gateway_id"] / "gateway.toml").is_file()
        assert "agent stopped" in (workdir / g["gateway_id"] / "edge.log").read_text()


def test_repairs_are_in_the_story_and_recorded(
    demo: dict[str, Any],
) -> None:
    events = {m["asset_id"]: m for m in demo["maintenance_events"]}
    assert set(events) == {"SPI-P1", "COO-P2"}  # the strainer cleaned, the bearing replaced
    assert events["COO-P2"]["kind"] == "replacement"
    assert events["COO-P2"]["failure_mode"] == "outer_race"
    for m in events.values():
        assert m["recorded"], m


# -- the service's conclusions (GET /v1/fleet/risk, contract.md) ----------------------------
# The simulator's story is the truth they are checked against (invented data: the demo's own).


def _ranking(demo: dict[str, Any]) -> dict[str, tuple[int, dict[str, Any]]]:
    risk = demo["fleet_risk"]
    assert risk["status"] == 200, risk
    assert risk["available"], risk
    assert risk["assessment_lagging"] == [], risk["assessment_lagging"]
    return {it["asset_id"]: (i, it) for i, it in enumerate(risk["items"])}


def _truth(demo: dict[str, Any]) -> dict[str, dict[str, Any]]:
    return {a["asset_id"]: a for a in demo["assets"]}


def test_the_faulty_pumps_rank_above_the_healthy_ones(demo: dict[str, Any]) -> None:
    ranking = _ranking(demo)
    truth = _truth(demo)
    assert set(ranking) == set(truth)
    faulty = [a for a, t in truth.items() if t["simulated_fault_at_end"] != "healthy"]
    healthy = [a for a, t in truth.items() if t["simulated_fault_at_end"] == "healthy"]
    assert len(faulty) >= 5 and len(healthy) >= 4  # incl. the two repaired pumps
    order = sorted(ranking, key=lambda a: ranking[a][0])
    assert max(ranking[a][0] for a in faulty) < min(ranking[a][0] for a in healthy), order


def test_the_likely_fault_is_the_one_the_pump_has(demo: dict[str, Any]) -> None:
    ranking = _ranking(demo)
    for asset_id, t in _truth(demo).items():
        fault = t["simulated_fault_at_end"]
        item = ranking[asset_id][1]
        assert item["likely_fault"] == fault, (fault, item)


def test_the_degrading_bearings_have_forecasts_and_the_healthy_pumps_none(
    demo: dict[str, Any],
) -> None:
    ranking = _ranking(demo)
    truth = _truth(demo)
    degrading = [
        a for a, t in truth.items()
        if t["simulated_fault_at_end"] in BEARING_FAULTS and t["simulated_severity_at_end"] >= 0.4
    ]  # fmt: skip
    assert len(degrading) >= 3, degrading
    for asset_id in degrading:
        item = ranking[asset_id][1]
        assert item["status"] == "forecast", item
        assert item["p50_h"] is not None and item["p50_h"] >= 0, item
        assert item["probability_within_horizon"] is not None, item
    for asset_id, t in truth.items():
        if t["simulated_fault_at_end"] == "healthy":
            assert ranking[asset_id][1]["status"] != "forecast", ranking[asset_id][1]


@pytest.mark.postgres
def test_the_demo_runs_on_postgresql_and_revokes_its_keys(tmp_path: Path) -> None:
    import psycopg
    from sqlalchemy import create_engine, text

    require_tool(mosquitto_installed(), "Mosquitto binary not installed")
    admin_url = os.environ.get("WELLSPAN_TEST_PG", "postgresql://root@127.0.0.1:5432/test")
    name = f"wellspan_demo_{uuid.uuid4().hex[:12]}"
    try:
        admin = psycopg.connect(admin_url, autocommit=True, connect_timeout=3)
    except psycopg.OperationalError as exc:
        missing(f"PostgreSQL not reachable at {admin_url}: {exc}")
    with admin:
        admin.execute(f'CREATE DATABASE "{name}"')
    url = admin_url.rsplit("/", 1)[0].replace("postgresql://", "postgresql+psycopg://", 1)
    url = f"{url}/{name}"
    try:
        options = DemoOptions(
            days=2, every_hours=1, minutes=0.3, pads=("mallee", "coolibah"), postgres=url,
            workdir=tmp_path,
        )  # fmt: skip
        with DemoEngine(options) as engine:
            engine.start()
            engine.simulate()
            report = engine.collect()
        assert report["database"] == "PostgreSQL"
        assert [g["gateway_id"] for g in report["gateways"]] == ["gw-mallee", "gw-coolibah"]
        for g in report["gateways"]:
            assert g["messages_queued"] == 3 * 48
            assert g["messages_stored"] == g["distinct_sequences_stored"] == g["messages_queued"]
        assert report["gateways"][1]["link_loss"]["cut"] is True
        db = create_engine(url)
        with db.connect() as c:
            keys = c.execute(text("SELECT name, revoked_at FROM api_keys")).all()
        db.dispose()
        assert sorted(k for k, _ in keys) == ["demo-admin", "demo-operate", "demo-read"]
        assert all(revoked is not None for _, revoked in keys)
        with pytest.raises(DemoError, match="empty database"), DemoEngine(options) as again:
            again.start()
    finally:
        with psycopg.connect(admin_url, autocommit=True) as admin:
            admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')
