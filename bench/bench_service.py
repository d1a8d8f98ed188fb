"""Benchmark of the prognosis service: ingest rates, query and forecast latency (not a test).

    .venv/bin/python -m bench.bench_service                 # everything, fleet-scale history
    .venv/bin/python -m bench.bench_service --assets 100    # smaller history and fleet fills
    .venv/bin/python -m bench.bench_service --parts fleet   # only the forecast and fleet view
    .venv/bin/python -m bench.bench_service --layout-compare

Measured, in one run, on a private Mosquitto and a private PostgreSQL database:

* broker-only rate: N QoS 1 messages queued for an offline persistent session, then drained by
  a subscriber that only counts (acknowledging each), messages per second;
* MQTT → store: the same N queued, drained by the service's ingest into SQLite and PostgreSQL
  (commit before acknowledgement), messages per second and its share of the broker-only rate;
* HTTP batch ingest: ``POST /v1/indicators`` with 1,000 readable messages per request against
  ``wellspan serve --no-ingest`` (uvicorn), two client threads;
* store writes: the same N messages through the ingest pipeline straight into each store (no
  broker), against the same rows written through the driver (executemany; COPY on PostgreSQL);
* history query latency: ``GET /v1/assets/{id}/indicators/{name}`` over 60 days with the store
  filled with ``--assets`` × ``--days`` × 24 hourly messages (bulk-loaded), p50 and p99;
* forecast and fleet-view latency (``fleet``): twelve Saltbush Flats pumps simulated hourly for
  ``--days`` days (pump simulator → extractor; three with a bearing defect that starts 30-50 %
  into the fill), replayed by ``--assets`` assets with their own gains and noise
  (:func:`fleet_rows`) and bulk-loaded; the assessment worker then assesses every asset from
  the stored windows (timed on SQLite: the cost of a first assessment per asset; the
  PostgreSQL store gets the same assessments copied, :func:`copy_assessments`), and over HTTP
  ``GET /v1/assets/{id}/time-to-failure`` (random assets) and ``GET /v1/fleet/risk`` (the
  whole fleet, at the default limit and at ``limit=20``) are timed, p50 and p99. The figures
  say how many assets got a forecast, a baseline without degradation, or too little data.

Targets: MQTT → store ≥ 6,000 msg/s and ≥ 65 % of broker-only; HTTP ≥ 20,000 msg/s;
history p99 ≤ 50 ms; time to failure p99 ≤ 20 ms and fleet view p99 ≤ 100 ms (1,000 assets ×
60 days). Forecasts on simulated pumps are advisory evidence about the service's speed, not
about any real machine.
"""

from __future__ import annotations

import argparse
import contextlib
import json
import math
import os
import socket
import sqlite3
import statistics
import struct
import subprocess
import sys
import tempfile
import threading
import time
import uuid
from collections.abc import Callable, Iterable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any, NamedTuple

import httpx
import numpy as np
import paho.mqtt.client as mqtt
import psycopg
from numpy.typing import NDArray
from paho.mqtt.packettypes import PacketTypes
from paho.mqtt.properties import Properties
from psycopg.types.json import Json
from sqlalchemy import delete, insert, select

from edge_agent.extractor import Extractor
from edge_agent.simulator import (
    SALTBUSH_ASSET_IDS,
    FaultMode,
    FaultScenario,
    PumpSimulator,
    saltbush_asset,
)
from prognosis_service.assessment.models import AssetAssessment
from prognosis_service.assessment.worker import AssessmentWorker
from prognosis_service.auth import create_key
from prognosis_service.domain.assets import AssetSpec, register_asset
from prognosis_service.ingest.consumer import IngestService
from prognosis_service.ingest.pipeline import Inbound, Pipeline
from prognosis_service.metrics import Metrics
from prognosis_service.settings import load_settings
from prognosis_service.store.engine import Store
from prognosis_service.store.migrate import upgrade
from shared_schema import (
    IndicatorLayout,
    IndicatorMessage,
    IndicatorSpec,
    LayoutAnnouncement,
    OperatingCondition,
    ShaftSpeedSource,
    encode_indicators,
    encode_json,
    indicators_topic,
    layout_topic,
    to_readable,
)

ROOT = Path(__file__).resolve().parents[1]
PG_ADMIN = "postgresql://root@127.0.0.1:5432/test"
SITE, GATEWAY = "mallee", "mallee-gw1"
_CHANNELS = ("de_accel", "nde_accel", "discharge_pressure", "suction_pressure")
_QUANTITIES = ("velocity_rms", "accel_rms", "kurtosis", "crest_factor", "env_bpfo", "env_bpfi")
LAYOUT = IndicatorLayout(
    extractor_version="bench-1",
    indicators=tuple(
        IndicatorSpec(name=f"{c}.{q}", unit="1", channel=c) for c in _CHANNELS for q in _QUANTITIES
    ),
)  # 24 indicators, as a gateway of the demo fleet sends


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _message(seq: int, asset: str, start: datetime) -> IndicatorMessage:
    return IndicatorMessage(
        message_id=uuid.uuid4(),
        gateway_id=GATEWAY,
        sequence=seq,
        site=SITE,
        asset_id=asset,
        window_start=start,
        window_s=10.0,
        operating=OperatingCondition(
            shaft_speed_hz=29.6, shaft_speed_source=ShaftSpeedSource.TACHO
        ),
        layout_digest=LAYOUT.digest,
        values=tuple(float(seq % 97) + i for i in range(len(LAYOUT.indicators))),
    )


# -- infrastructure ---------------------------------------------------------------------------


@contextmanager
def mosquitto() -> Iterator[int]:
    port = _free_port()
    with tempfile.TemporaryDirectory() as tmp:
        conf = Path(tmp) / "m.conf"
        conf.write_text(
            f"listener {port} 127.0.0.1\nallow_anonymous true\npersistence false\n"
            "max_queued_messages 0\nmax_inflight_messages 0\nlog_type none\n"
        )
        proc = subprocess.Popen(["/usr/sbin/mosquitto", "-c", str(conf)])
        try:
            for _ in range(200):
                try:
                    socket.create_connection(("127.0.0.1", port), 0.2).close()
                    break
                except OSError:
                    time.sleep(0.05)
            yield port
        finally:
            proc.terminate()
            proc.wait()


@contextmanager
def pg_database() -> Iterator[str]:
    name = f"wellspan_bench_{uuid.uuid4().hex[:10]}"
    with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
        admin.execute(f'CREATE DATABASE "{name}"')
    try:
        yield f"postgresql+psycopg://root@127.0.0.1:5432/{name}"
    finally:
        with psycopg.connect(PG_ADMIN, autocommit=True) as admin:
            admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')


def prepare_store(
    url: str,
    assets: list[str],
    layouts: tuple[IndicatorLayout, ...] = (LAYOUT,),
    asset_class: str = "",
) -> None:
    """Migrate, register ``assets`` at the bench gateway and announce its ``layouts``."""
    upgrade(url)
    store = Store(url)
    pipe = Pipeline()
    with store.write() as s:
        for a in assets:
            spec = AssetSpec(asset_id=a, site=SITE, gateway_id=GATEWAY, asset_class=asset_class)
            register_asset(s, pipe, spec)
        ann = LayoutAnnouncement(
            gateway_id=GATEWAY, site=SITE, published_at=datetime.now(UTC), layouts=layouts
        )
        pipe.handle(s, [Inbound(layout_topic(SITE, GATEWAY), encode_json(ann), datetime.now(UTC))])
    store.dispose()


def _connect_props(receive_maximum: int) -> Properties:
    props = Properties(PacketTypes.CONNECT)
    props.SessionExpiryInterval = 3600
    props.ReceiveMaximum = receive_maximum
    return props


def make_session(port: int, client_id: str) -> None:
    """Create a persistent session with the ingest subscription, then leave it offline."""
    done = threading.Event()
    c = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2, client_id=client_id, protocol=mqtt.MQTTv5)
    c.on_subscribe = lambda *a: done.set()
    c.connect("127.0.0.1", port, clean_start=True, properties=_connect_props(1000))
    c.loop_start()
    c.subscribe("wellspan/+/+/+/+/indicators", qos=1)
    done.wait(10)
    c.disconnect()
    c.loop_stop()


def publish_queued(port: int, payloads: list[tuple[str, bytes]]) -> None:
    c = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2, client_id="bench-pub", protocol=mqtt.MQTTv5)
    c.max_inflight_messages_set(1000)
    c.max_queued_messages_set(0)
    c.connect("127.0.0.1", port)
    c.loop_start()
    infos = [c.publish(t, p, qos=1) for t, p in payloads]
    for info in infos:
        info.wait_for_publish(60)
    c.disconnect()
    c.loop_stop()


# -- 1. broker only ---------------------------------------------------------------------------


def broker_only_rate(port: int, payloads: list[tuple[str, bytes]]) -> float:
    client_id = f"bench-count-{uuid.uuid4().hex[:6]}"
    make_session(port, client_id)
    publish_queued(port, payloads)
    n = len(payloads)
    count = 0
    first = last = 0.0
    done = threading.Event()

    def on_message(_c: Any, _u: Any, _m: Any) -> None:
        nonlocal count, first, last
        count += 1
        if count == 1:
            first = time.perf_counter()
        if count == n:
            last = time.perf_counter()
            done.set()

    c = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2, client_id=client_id, protocol=mqtt.MQTTv5)
    c.on_message = on_message
    t0 = time.perf_counter()
    receive_maximum = load_settings().mqtt_receive_maximum  # the same window as the ingest's
    c.connect("127.0.0.1", port, clean_start=False, properties=_connect_props(receive_maximum))
    c.loop_start()
    done.wait(300)
    c.disconnect()
    c.loop_stop()
    del first
    return n / (last - t0)


# -- 2. MQTT → store --------------------------------------------------------------------------


def ingest_rate(port: int, url: str, payloads: list[tuple[str, bytes]], assets: list[str]) -> float:
    prepare_store(url, assets)
    client_id = f"bench-ingest-{uuid.uuid4().hex[:6]}"
    make_session(port, client_id)
    publish_queued(port, payloads)
    settings = load_settings(
        database_url=url, mqtt_url=f"mqtt://127.0.0.1:{port}", mqtt_client_id=client_id
    )
    store = Store(url)
    metrics = Metrics()
    svc = IngestService(settings, store, Pipeline(), metrics=metrics)
    n = len(payloads)
    t0 = time.perf_counter()
    svc.start()

    def stored() -> float:
        return metrics.value(
            "wellspan_ingest_messages_total", source="mqtt", kind="indicators", result="stored"
        )

    while stored() < n and time.perf_counter() - t0 < 300:
        time.sleep(0.005)
    elapsed = time.perf_counter() - t0
    svc.stop()
    store.dispose()
    if stored() != n:
        raise RuntimeError(f"ingest stored {stored():.0f} of {n}")
    return n / elapsed


def _count_messages(url: str) -> int:
    if url.startswith("sqlite"):
        lite = sqlite3.connect(url.removeprefix("sqlite:///"), timeout=30)
        try:
            return int(lite.execute("SELECT count(*) FROM messages").fetchone()[0])
        finally:
            lite.close()
    with psycopg.connect(url.replace("postgresql+psycopg://", "postgresql://")) as pg:
        row = pg.execute("SELECT count(*) FROM messages").fetchone()
        return int(row[0]) if row else 0


def ingest_rate_replicas(
    port: int, url: str, payloads: list[tuple[str, bytes]], assets: list[str], replicas: int
) -> float:
    """The scale-out: ``replicas`` × ``wellspan ingest`` in one shared-subscription group.

    Each replica first connects once (creating its persistent session in the group) and is
    stopped; the messages are then queued, the replicas started again, and the rate is taken
    from the first stored message to the last.
    """
    prepare_store(url, assets)
    group = f"bench{uuid.uuid4().hex[:6]}"
    env = dict(
        os.environ,
        WELLSPAN_DATABASE_URL=url,
        WELLSPAN_MQTT_URL=f"mqtt://127.0.0.1:{port}",
        WELLSPAN_MQTT_SHARE_GROUP=group,
    )
    env.pop("WELLSPAN_CONFIG", None)
    ids = [f"{group}-{i}" for i in range(replicas)]

    def start(client_id: str, log: Path) -> subprocess.Popen[bytes]:
        return subprocess.Popen(
            [sys.executable, "-m", "wellspan", "ingest", "--client-id", client_id],
            cwd=ROOT,
            env=env,
            stdout=subprocess.DEVNULL,
            stderr=log.open("ab"),
        )

    with tempfile.TemporaryDirectory() as tmp:
        logs = [Path(tmp) / f"{i}.log" for i in ids]
        procs = [start(i, log) for i, log in zip(ids, logs, strict=True)]
        deadline = time.monotonic() + 60
        while not all(b"ingest connected" in log.read_bytes() for log in logs):
            if time.monotonic() > deadline:
                raise RuntimeError("ingest replicas did not connect")
            time.sleep(0.05)
        time.sleep(0.3)  # let the SUBACKs land
        for p in procs:
            p.terminate()
            p.wait(30)
        publish_queued(port, payloads)
        procs = [start(i, log) for i, log in zip(ids, logs, strict=True)]
        n = len(payloads)
        first = last = 0.0
        try:
            deadline = time.monotonic() + 300
            while time.monotonic() < deadline:
                count = _count_messages(url)
                now = time.perf_counter()
                if count and not first:
                    first = now
                if count >= n:
                    last = now
                    break
                time.sleep(0.02)
        finally:
            for p in procs:
                p.terminate()
                p.wait(30)
    if not last:
        raise RuntimeError(f"replicas stored {_count_messages(url)} of {n}")
    return n / (last - first)


# -- 3. HTTP ingest ---------------------------------------------------------------------------


@contextmanager
def api_server(url: str, workers: int = 1) -> Iterator[tuple[str, str]]:
    """``wellspan serve --no-ingest`` on a free port; yields (base URL, admin token)."""
    upgrade(url)
    store = Store(url)
    with store.write() as s:
        _, token = create_key(s, name="bench", scopes=["admin"])
    store.dispose()
    port = _free_port()
    env = dict(os.environ, WELLSPAN_DATABASE_URL=url, WELLSPAN_MQTT_URL="mqtt://127.0.0.1:9")
    proc = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "wellspan",
            "serve",
            "--no-ingest",
            "--port",
            str(port),
            "--workers",
            str(workers),
        ],
        cwd=ROOT,
        env=env,
        stderr=subprocess.DEVNULL,
    )
    base = f"http://127.0.0.1:{port}"
    try:
        for _ in range(300):
            try:
                if httpx.get(f"{base}/livez", timeout=1).status_code == 200:
                    break
            except httpx.HTTPError:
                time.sleep(0.05)
        yield base, token
    finally:
        proc.terminate()
        proc.wait(30)


def http_rate(
    url: str, assets: list[str], n: int, *, workers: int, per_request: int = 1000
) -> float:
    prepare_store(url, assets)
    t = datetime(2026, 1, 1, tzinfo=UTC)
    bodies = []
    for start in range(0, n, per_request):
        msgs = [
            to_readable(_message(i, assets[i % len(assets)], t + timedelta(seconds=i)), LAYOUT)
            for i in range(start, min(n, start + per_request))
        ]
        bodies.append(json.dumps({"messages": msgs}).encode())
    with api_server(url, workers) as (base, token):
        headers = {"Authorization": f"Bearer {token}", "content-type": "application/json"}
        queue = list(bodies)
        lock = threading.Lock()
        errors: list[str] = []

        def worker() -> None:
            # a connection per request, as gateways posting now and then open one: kept-alive
            # connections are spread over the API workers once, at accept, and a run where
            # all four landed on one worker measured half the rate of one where they split
            no_keepalive = httpx.Limits(max_keepalive_connections=0)
            with httpx.Client(
                base_url=base, headers=headers, timeout=120, limits=no_keepalive
            ) as client:
                while True:
                    with lock:
                        if not queue:
                            return
                        body = queue.pop()
                    r = client.post("/v1/indicators", content=body)
                    if r.status_code != 200 or r.json()["stored"] != per_request:
                        errors.append(r.text[:200])

        threads = [threading.Thread(target=worker) for _ in range(2 * workers)]
        t0 = time.perf_counter()
        for th in threads:
            th.start()
        for th in threads:
            th.join()
        elapsed = time.perf_counter() - t0
    if errors:
        raise RuntimeError(f"HTTP ingest failed: {errors[0]}")
    return n / elapsed


# -- 4. store write rate against the raw driver ----------------------------------------------

_MESSAGE_COLUMNS = (
    "message_id, gateway_id, sequence, site_id, asset_id, window_start, window_s, clock_sync,"
    " shaft_speed_hz, shaft_speed_source, load_fraction, flow_m3_per_h, suction_pressure_kpa,"
    " fluid_temperature_c, quality, layout_digest, values_f32, received_at"
)


def _stored_rows(url: str) -> list[tuple[Any, ...]]:
    """The message rows as the service wrote them, on the driver, in insertion order."""
    sql = f"SELECT {_MESSAGE_COLUMNS} FROM messages ORDER BY id"
    if url.startswith("sqlite"):
        with contextlib.closing(sqlite3.connect(url.removeprefix("sqlite:///"))) as conn:
            return conn.execute(sql).fetchall()
    with psycopg.connect(url.replace("postgresql+psycopg://", "postgresql://")) as conn:
        rows = conn.execute(sql).fetchall()
    q = _MESSAGE_COLUMNS.split(", ").index("quality")
    return [(*r[:q], None if r[q] is None else Json(r[q]), *r[q + 1 :]) for r in rows]


def store_write_rates(
    url: str, floor_url: str, payloads: list[tuple[str, bytes]], assets: list[str], batch: int
) -> dict[str, float]:
    """Messages per second written by the ingest pipeline (decode, validate, store; one
    transaction per ``batch``, as the MQTT writer commits) and, into a second database with the
    same schema, the same rows written straight through the driver in transactions of the same
    size: ``executemany`` (both dialects) and ``COPY`` (PostgreSQL)."""
    prepare_store(url, assets)
    store = Store(url)
    pipe = Pipeline()
    now = datetime.now(UTC)
    inbound = [Inbound(topic, payload, now) for topic, payload in payloads]
    t0 = time.perf_counter()
    for i in range(0, len(inbound), batch):
        with store.write() as session:
            out = pipe.handle(session, inbound[i : i + batch])
        if out.stored != len(inbound[i : i + batch]):
            raise RuntimeError(f"the pipeline stored {out.stored} of a batch: {out}")
    rates = {"pipeline": len(inbound) / (time.perf_counter() - t0)}
    store.dispose()
    rows = _stored_rows(url)
    prepare_store(floor_url, assets)
    cols = _MESSAGE_COLUMNS
    if floor_url.startswith("sqlite"):
        lite = sqlite3.connect(floor_url.removeprefix("sqlite:///"), isolation_level=None)
        lite.execute("PRAGMA journal_mode=WAL")
        lite.execute("PRAGMA synchronous=NORMAL")  # as the service's engine (store/engine.py)
        sql = f"INSERT INTO messages ({cols}) VALUES ({', '.join('?' * 18)})"
        t0 = time.perf_counter()
        for i in range(0, len(rows), batch):
            lite.execute("BEGIN IMMEDIATE")
            lite.executemany(sql, rows[i : i + batch])
            lite.execute("COMMIT")
        rates["executemany"] = len(rows) / (time.perf_counter() - t0)
        lite.close()
        return rates
    with psycopg.connect(floor_url.replace("postgresql+psycopg://", "postgresql://")) as conn:
        sql = f"INSERT INTO messages ({cols}) VALUES ({', '.join(['%s'] * 18)})"
        half = len(rows) // 2  # the same rows twice would collide on the message identity
        t0 = time.perf_counter()
        for i in range(0, half, batch):
            with conn.transaction(), conn.cursor() as cur:
                cur.executemany(sql, rows[i : min(half, i + batch)])
        rates["executemany"] = half / (time.perf_counter() - t0)
        t0 = time.perf_counter()
        for i in range(half, len(rows), batch):
            with (
                conn.transaction(),
                conn.cursor() as cur,
                cur.copy(f"COPY messages ({cols}) FROM STDIN") as copy,
            ):
                for row in rows[i : i + batch]:
                    copy.write_row(row)
        rates["COPY"] = (len(rows) - half) / (time.perf_counter() - t0)
    return rates


# -- 5. history query latency -----------------------------------------------------------------


class FillRow(NamedTuple):
    """One stored window of a bulk fill (the columns the loaders write; the rest are fixed)."""

    message_id: uuid.UUID
    sequence: int
    asset_id: str
    window_start: datetime
    values_f32: bytes
    received_at: datetime
    layout_digest: str = LAYOUT.digest
    window_s: float = 10.0
    shaft_speed_hz: float | None = None
    shaft_speed_source: str | None = None
    load_fraction: float | None = None
    quality: str | None = None  # JSON text, as the ingest pipeline stores it


_FILL_COLUMNS = (
    "message_id, sequence, asset_id, window_start, values_f32, received_at, layout_digest,"
    " window_s, shaft_speed_hz, shaft_speed_source, load_fraction, quality,"
    " gateway_id, site_id, clock_sync"
)


def _rows(assets: int, days: int) -> Iterator[FillRow]:
    """Hourly messages per asset, oldest first; values as the packed float32 vector."""
    start = datetime(2026, 1, 1, tzinfo=UTC)
    rng = np.random.default_rng(0)
    n_ind = len(LAYOUT.indicators)
    seq = 0
    received = datetime.now(UTC)
    for h in range(days * 24):
        ws = start + timedelta(hours=h)
        block = rng.normal(4.0, 0.3, size=(assets, n_ind)).astype("<f4")
        for a in range(assets):
            yield FillRow(uuid.uuid4(), seq, f"A{a:04d}", ws, block[a].tobytes(), received)
            seq += 1


def load_sqlite(url: str, rows: Iterable[FillRow]) -> None:
    """Bulk-load ``rows`` into a migrated SQLite store (executemany, one transaction)."""
    conn = sqlite3.connect(url.removeprefix("sqlite:///"))
    conn.execute("PRAGMA synchronous=OFF")
    fmt = "%Y-%m-%d %H:%M:%S.%f"  # SQLAlchemy's SQLite DateTime text form (naive UTC)
    sql = (
        f"INSERT INTO messages ({_FILL_COLUMNS}) VALUES"
        f" ({', '.join('?' * 12)}, '{GATEWAY}', '{SITE}', 'synced')"
    )
    batch: list[tuple[Any, ...]] = []
    for r in rows:
        batch.append(
            (r.message_id.hex, r.sequence, r.asset_id,
             r.window_start.astimezone(UTC).replace(tzinfo=None).strftime(fmt), r.values_f32,
             r.received_at.astimezone(UTC).replace(tzinfo=None).strftime(fmt), *r[6:])
        )  # fmt: skip
        if len(batch) == 50_000:
            conn.executemany(sql, batch)
            batch.clear()
    if batch:
        conn.executemany(sql, batch)
    conn.commit()
    conn.execute("ANALYZE")
    conn.close()


def load_postgres(url: str, rows: Iterable[FillRow]) -> None:
    """Bulk-load ``rows`` into a migrated PostgreSQL store (COPY), then VACUUM (ANALYZE)."""
    dsn = url.replace("postgresql+psycopg://", "postgresql://")
    with (
        psycopg.connect(dsn) as conn,
        conn.cursor() as cur,
        cur.copy(f"COPY messages ({_FILL_COLUMNS}) FROM STDIN") as copy,
    ):
        for r in rows:
            copy.write_row((*r, GATEWAY, SITE, "synced"))
    # What autovacuum does after a bulk insert on a live server (insert-triggered since
    # PostgreSQL 13): statistics, and the visibility map that lets the history query answer from
    # the covering index without visiting the table.
    with psycopg.connect(dsn, autocommit=True) as c:
        c.execute("VACUUM (ANALYZE) messages")


def fill_sqlite(url: str, assets: int, days: int) -> None:
    load_sqlite(url, _rows(assets, days))


def fill_postgres(url: str, assets: int, days: int) -> None:
    load_postgres(url, _rows(assets, days))


def query_latency(
    url: str, assets: int, days: int, fill: Callable[[str, int, int], None], queries: int = 300
) -> tuple[float, float, float]:
    names = [f"A{a:04d}" for a in range(assets)]
    prepare_store(url, names)
    t0 = time.perf_counter()
    fill(url, assets, days)
    fill_s = time.perf_counter() - t0
    rng = np.random.default_rng(1)
    start = datetime(2026, 1, 1, tzinfo=UTC)
    end = start + timedelta(days=days)
    params = {"start": start.isoformat(), "end": end.isoformat(), "limit": "10000"}
    latencies = []
    with (
        api_server(url) as (base, token),
        httpx.Client(
            base_url=base, headers={"Authorization": f"Bearer {token}"}, timeout=30
        ) as client,
    ):
        for i in range(queries + 20):
            asset = names[int(rng.integers(assets))]
            t = time.perf_counter()
            r = client.get(f"/v1/assets/{asset}/indicators/de_accel.velocity_rms", params=params)
            dt = time.perf_counter() - t
            if r.status_code != 200 or r.json()["count"] != days * 24:
                raise RuntimeError(f"history query failed: {r.status_code} {r.text[:200]}")
            if i >= 20:  # the first queries warm caches and connections
                latencies.append(dt * 1000)
    lat = np.asarray(latencies)
    return float(np.percentile(lat, 50)), float(np.percentile(lat, 99)), fill_s


# -- 6. forecast and fleet-view latency -------------------------------------------------------

FLEET_START = datetime(2026, 3, 1, tzinfo=UTC)
# Quick mode: the shortest fill in which the outer- and inner-race defects reach a forecast
# (12-hour buckets; a model needs five), and six simulated pumps of which three degrade.
FLEET_QUICK_DAYS, FLEET_QUICK_TEMPLATES = 8, 6
FLEET_CLASS = "end-suction-centrifugal"
_DEGRADING_FAULTS: tuple[FaultMode, ...] = ("outer_race", "inner_race", "rolling_element")
_AMPLITUDE = frozenset({"g", "mm/s", "kPa", "A"})  # scaled per asset; "dB" levels are shifted


@dataclass(frozen=True)
class PumpTemplate:
    """Hourly windows of one simulated pump (pump simulator → extractor), replayed by assets.

    ``values`` is (windows, indicators) in the order of ``layout`` (NaN: not computed);
    ``quality`` holds each window's quality flags as the ingest pipeline stores them.
    """

    pump: str
    scenario: FaultScenario
    layout: IndicatorLayout
    window_s: float
    values: NDArray[np.float64]
    speed_hz: list[float | None]
    speed_source: list[str | None]
    load: list[float | None]
    quality: list[str | None]

    @property
    def degrading(self) -> bool:
        return self.scenario.fault != "healthy"


def degrading_scenario(j: int, days: int) -> FaultScenario:
    """The ``j``-th degrading template's bearing defect: onset after the two-day baseline and
    between 30 % and 50 % into the fill, three quarters of its life gone by the fill's end."""
    onset_day = max(2.2, days * (0.3 + 0.1 * (j % 3)))
    return FaultScenario(
        fault=_DEGRADING_FAULTS[j % len(_DEGRADING_FAULTS)],
        onset=FLEET_START + timedelta(days=onset_day),
        life_days=(days - onset_day) / 0.75,
        bearing="de" if j % 2 == 0 else "nde",
    )


def simulate_templates(
    days: int,
    *,
    n_templates: int = 12,
    n_degrading: int = 3,
    seed: int = 11,
    progress: Callable[[int, int], None] | None = None,
) -> list[PumpTemplate]:
    """``n_templates`` Saltbush Flats pumps simulated hourly for ``days`` days, the first
    ``n_degrading`` with a bearing defect (:func:`degrading_scenario`), the rest healthy.

    The accelerometer windows are 0.25 s (as in the forecast and anomaly benchmarks) so the
    simulation takes minutes; the other channels keep 1 s (bearing temperature is sampled at
    10 Hz and needs it).
    """
    out = []
    hours = days * 24
    for k in range(n_templates):
        pump = SALTBUSH_ASSET_IDS[k % len(SALTBUSH_ASSET_IDS)]
        full, short = saltbush_asset(pump), saltbush_asset(pump, window_s=0.25)
        quick = {c.name: c for c in short.channels if c.kind == "accel"}
        asset = full.model_copy(
            update={"channels": tuple(quick.get(c.name, c) for c in full.channels)}
        )
        scenario = degrading_scenario(k, days) if k < n_degrading else FaultScenario()
        sim = PumpSimulator(asset, scenario, seed=seed + k)
        extractor = Extractor(asset)
        layout = extractor.layout
        values = np.full((hours, len(layout.indicators)), np.nan)
        speed, source, load, quality = [], [], [], []
        window_s = 1.0
        for h in range(hours):
            msg = extractor.extract(
                sim.window(FLEET_START + timedelta(hours=h)),
                gateway_id=GATEWAY,
                site=SITE,
                sequence=h,
            )
            window_s = msg.window_s
            values[h] = [np.nan if v is None else v for v in msg.values]
            op = msg.operating
            speed.append(op.shaft_speed_hz)
            source.append(None if op.shaft_speed_source is None else op.shaft_speed_source.value)
            load.append(op.load_fraction)
            quality.append(
                json.dumps(
                    {q.channel: {"flags": sorted(q.flags), "spikes_removed": q.spikes_removed}
                     for q in msg.quality},
                    separators=(",", ":"),
                )
                if msg.quality
                else None
            )  # fmt: skip
        out.append(PumpTemplate(pump, scenario, layout, window_s, values, speed, source, load,
                                quality))  # fmt: skip
        if progress is not None:
            progress(k + 1, n_templates)
    return out


def fleet_asset_ids(n: int) -> list[str]:
    return [f"F{a:04d}" for a in range(n)]


def template_of(asset_index: int, templates: list[PumpTemplate]) -> PumpTemplate:
    return templates[asset_index % len(templates)]


def fleet_rows(
    assets: list[str], templates: list[PumpTemplate], *, seed: int = 5
) -> Iterator[FillRow]:
    """Hourly windows of every asset, oldest first: asset ``i`` replays template
    ``i mod len(templates)`` with its own gain per indicator (amplitudes × e^N(0, 0.1), dB levels
    + N(0, 1 dB)), fresh noise per window (× e^N(0, 0.03), + N(0, 0.5 dB)) and its own minute
    of the hour, so no two assets store the same values. The same arguments give the same
    windows, message ids included, so two stores filled alike can share one assessment."""
    rng = np.random.default_rng(seed)
    ids = np.random.default_rng([seed, 1])  # message ids: the noise stream stays as it was
    hours = templates[0].values.shape[0]
    n = len(assets)
    index = np.arange(n) % len(templates)
    units = [tuple(s.unit for s in t.layout.indicators) for t in templates]
    amp = np.array([[u in _AMPLITUDE for u in units[i]] for i in index])
    db = np.array([[u == "dB" for u in units[i]] for i in index])
    gain = np.exp(rng.normal(0.0, 0.1, amp.shape))
    shift = rng.normal(0.0, 1.0, amp.shape)
    minute = [timedelta(minutes=int(m)) for m in rng.integers(0, 60, n)]
    stack = np.stack([t.values for t in templates])  # (templates, hours, indicators)
    received = datetime.now(UTC)
    seq = 0
    for h in range(hours):
        v = stack[index, h]
        v = np.where(amp, v * gain * np.exp(rng.normal(0.0, 0.03, v.shape)), v)
        v = np.where(db, v + shift + rng.normal(0.0, 0.5, v.shape), v).astype("<f4")
        when = FLEET_START + timedelta(hours=h)
        for a in range(n):
            t = templates[index[a]]
            yield FillRow(
                uuid.UUID(bytes=ids.bytes(16), version=4), seq, assets[a], when + minute[a],
                v[a].tobytes(), received,
                layout_digest=t.layout.digest, window_s=t.window_s,
                shaft_speed_hz=t.speed_hz[h], shaft_speed_source=t.speed_source[h],
                load_fraction=t.load[h], quality=t.quality[h],
            )  # fmt: skip
            seq += 1


def assess_fleet(url: str, progress: Callable[[int], None] | None = None) -> tuple[float, int]:
    """Run the assessment worker's cycles until no asset is due; (seconds, assets assessed).

    The diagnosis classifier is loaded before the clock starts (a worker loads it once)."""
    store = Store(url)
    worker = AssessmentWorker(store, max_assets_per_cycle=50)
    worker.classifier()
    assessed = 0
    t0 = time.perf_counter()
    while outcomes := worker.run_once():
        assessed += len(outcomes)
        if progress is not None:
            progress(assessed)
    seconds = time.perf_counter() - t0
    store.dispose()
    if worker.errors:
        raise RuntimeError(f"the assessment worker failed on {worker.errors} assets (see log)")
    return seconds, assessed


def copy_assessments(source_url: str, target_url: str) -> int:
    """Copy every asset's stored assessment from one store to another filled alike.

    The assessor is deterministic over the stored windows (the scale-out test checks it), so
    the copy is what assessing the second store would store; it saves that store's
    first-assessment time (a quarter of an hour at full size), which the benchmark has already
    measured on the first. Returns the rows copied.
    """
    source, target = Store(source_url), Store(target_url)
    columns = [c.key for c in AssetAssessment.__table__.columns]
    with source.read() as s:
        rows = [{c: getattr(r, c) for c in columns} for r in s.scalars(select(AssetAssessment))]
    with target.write() as s:
        s.execute(delete(AssetAssessment))
        s.execute(insert(AssetAssessment), rows)
    source.dispose()
    target.dispose()
    return len(rows)


@dataclass
class FleetLatency:
    """What :func:`fleet_latency` measured on one store."""

    assets: int
    days: int
    fill_s: float
    assess_s: float | None  # None: the assessments were copied from a store filled alike
    statuses: dict[str, int]
    degrading: list[str]  # assets replaying a degrading template
    forecasts: list[str]  # assets whose stored status is "forecast"
    ttf_ms: NDArray[np.float64]
    ttf_forecast_ms: NDArray[np.float64]  # the requests that returned a forecast
    risk_ms: dict[int | None, NDArray[np.float64]]  # by ``limit`` (None: the route's default)
    ranking: list[dict[str, Any]]  # the fleet view at the default limit, most at risk first


def fleet_latency(
    url: str,
    load: Callable[[str, Iterable[FillRow]], None],
    templates: list[PumpTemplate],
    *,
    assets: int = 1000,
    ttf_queries: int = 300,
    risk_queries: int = 50,
    limits: tuple[int | None, ...] = (None, 20),
    assessed_from: str | None = None,
    report: Callable[[str], None] | None = None,
) -> FleetLatency:
    """Fill a store with ``assets`` replaying ``templates``, assess every asset with the
    assessment worker (or copy the assessments of ``assessed_from``, a store this function
    filled alike: :func:`copy_assessments`), then time ``GET /v1/assets/{id}/time-to-failure``
    (random assets) and ``GET /v1/fleet/risk`` (the whole fleet, at each of ``limits``) over
    HTTP."""
    say = report or (lambda _what: None)
    names = fleet_asset_ids(assets)
    layouts = tuple({t.layout.digest: t.layout for t in templates}.values())
    prepare_store(url, names, layouts, asset_class=FLEET_CLASS)
    days = templates[0].values.shape[0] // 24
    say(f"fill {assets:,} assets × {days} days")
    t0 = time.perf_counter()
    load(url, fleet_rows(names, templates))
    fill_s = time.perf_counter() - t0
    assess_s: float | None = None
    if assessed_from is None:
        say("assess the fleet")
        assess_s, assessed = assess_fleet(
            url, lambda k: say(f"assess the fleet: {k:,} of {assets:,} assets")
        )
    else:
        say("copy the assessments")
        assessed = copy_assessments(assessed_from, url)
    if assessed != assets:
        raise RuntimeError(f"the worker assessed {assessed} of {assets} assets")
    store = Store(url)
    with store.read() as s:
        stored = dict(s.execute(select(AssetAssessment.asset_id, AssetAssessment.status)).all())
    store.dispose()
    statuses: dict[str, int] = {}
    for st in stored.values():
        statuses[st] = statuses.get(st, 0) + 1
    degrading = [a for i, a in enumerate(names) if template_of(i, templates).degrading]
    forecasts = sorted(a for a, st in stored.items() if st == "forecast")
    rng = np.random.default_rng(3)
    ttf, ttf_forecast = [], []
    risk: dict[int | None, list[float]] = {lim: [] for lim in limits}
    ranking: list[dict[str, Any]] = []
    with (
        api_server(url) as (base, token),
        httpx.Client(
            base_url=base, headers={"Authorization": f"Bearer {token}"}, timeout=60
        ) as client,
    ):
        say("time to failure")
        for i in range(ttf_queries + 20):
            asset = names[int(rng.integers(assets))]
            t = time.perf_counter()
            r = client.get(f"/v1/assets/{asset}/time-to-failure")
            dt = (time.perf_counter() - t) * 1000
            body = r.json() if r.status_code == 200 else {}
            if body.get("status") != stored[asset] or (
                (body.get("forecast") is not None) != (stored[asset] == "forecast")
            ):
                raise RuntimeError(f"time-to-failure of {asset}: {r.status_code} {r.text[:200]}")
            if i >= 20:  # the first requests warm caches and connections
                ttf.append(dt)
                if body["forecast"] is not None:
                    ttf_forecast.append(dt)
        for lim in limits:
            say(f"fleet risk, limit {lim or 'default'}")
            params = {} if lim is None else {"limit": str(lim)}
            for i in range(risk_queries + 3):
                t = time.perf_counter()
                r = client.get("/v1/fleet/risk", params=params)
                dt = (time.perf_counter() - t) * 1000
                body = r.json() if r.status_code == 200 else {}
                if body.get("count") != min(assets, lim or 1000):
                    raise RuntimeError(f"fleet risk (limit {lim}): {r.status_code} {r.text[:200]}")
                if i >= 3:
                    risk[lim].append(dt)
                if lim is None and not ranking:
                    ranking = body["items"]
    return FleetLatency(
        assets=assets,
        days=days,
        fill_s=fill_s,
        assess_s=assess_s,
        statuses=statuses,
        degrading=degrading,
        forecasts=forecasts,
        ttf_ms=np.asarray(ttf),
        ttf_forecast_ms=np.asarray(ttf_forecast),
        risk_ms={lim: np.asarray(v) for lim, v in risk.items()},
        ranking=ranking,
    )


def fleet_runs(
    tmp: Path,
    templates: list[PumpTemplate],
    dialects: Iterable[str],
    *,
    assets: int,
    ttf_queries: int = 300,
    risk_queries: int = 50,
    started: Callable[[str], None] | None = None,
    report: Callable[[str, str], None] | None = None,
) -> Iterator[tuple[str, FleetLatency]]:
    """:func:`fleet_latency` on each of ``dialects`` ("SQLite", "PostgreSQL") in turn.

    The SQLite store (a file in ``tmp``) is assessed; a PostgreSQL store after it gets its
    assessments copied (:func:`copy_assessments`).
    """
    assessed: str | None = None
    for dialect in dialects:
        if started is not None:
            started(dialect)
        with contextlib.ExitStack() as stack:
            if dialect == "SQLite":
                url, load = f"sqlite:///{tmp}/fleet.db", load_sqlite
            else:
                url, load = stack.enter_context(pg_database()), load_postgres

            def say(what: str, label: str = dialect) -> None:
                if report is not None:
                    report(label, what)

            m = fleet_latency(url, load, templates, assets=assets, ttf_queries=ttf_queries,
                              risk_queries=risk_queries, assessed_from=assessed,
                              report=say)  # fmt: skip
        if dialect == "SQLite":
            assessed = url
        yield dialect, m


def _pct(ms: NDArray[np.float64], q: float) -> float:
    return float(np.percentile(ms, q)) if ms.size else math.nan


def fleet_figures(m: FleetLatency, dialect: str, templates: list[PumpTemplate]) -> list[Any]:
    """The figures of one :func:`fleet_latency` run, beside the issue's targets."""
    from bench.harness import Figure, Target

    # The targets are for 1,000 assets × 60 days; a smaller fill shows them unjudged.
    full = m.assets >= 1000 and m.days >= 60
    scale = "1,000 assets × 60 days" + ("" if full else "; not judged at this size")
    ttf_target = Target(text=f"p99 ≤ 20 ms ({scale})", op="<=" if full else None, value=20.0)
    risk_target = Target(text=f"p99 ≤ 100 ms ({scale})", op="<=" if full else None, value=100.0)
    n_deg = sum(t.degrading for t in templates)
    others = ", ".join(f"{k} {v}" for k, v in sorted(m.statuses.items()) if k != "forecast")
    windows = m.assets * m.days * 24
    assessed = "assessed" if m.assess_s is not None else "assessments copied from the store above"
    figs = [
        Figure(name=f"assets with a forecast, {dialect}", value=float(len(m.forecasts)), unit="1",
               digits=0, notes=f"of {m.assets:,} {assessed}; {len(m.degrading):,} replay one of "
               f"{n_deg} simulated pumps with a bearing defect (of {len(templates)} simulated); "
               f"other statuses: {others}"),
    ]  # fmt: skip
    if m.assess_s is not None:
        figs += [
            Figure(name=f"fleet assessment, {dialect}", value=m.assess_s, unit="s", digits=0,
                   notes=f"assessment worker over {windows:,} stored windows ({m.days * 24:,} "
                   f"per asset, bulk-filled in {m.fill_s:.0f} s): baselines, health points, "
                   "fits, diagnoses"),
            Figure(name=f"assessment per asset, {dialect}", value=1000 * m.assess_s / m.assets,
                   unit="ms", digits=0, notes=f"{m.days * 24:,} windows each, first assessment"),
        ]  # fmt: skip
    figs += [
        Figure(name=f"time to failure, {dialect}, p50", value=_pct(m.ttf_ms, 50), unit="ms",
               digits=1, notes=f"GET /v1/assets/{{id}}/time-to-failure, {m.ttf_ms.size} random "
               "assets"),
        Figure(name=f"time to failure, {dialect}, p99", value=_pct(m.ttf_ms, 99), unit="ms",
               target=ttf_target, digits=1, notes=f"{m.ttf_ms.size} requests, random assets"),
        Figure(name=f"time to failure with a forecast, {dialect}, p99",
               value=_pct(m.ttf_forecast_ms, 99), unit="ms", target=ttf_target, digits=1,
               notes=f"the {m.ttf_forecast_ms.size} of those requests that returned a forecast"),
    ]  # fmt: skip
    for lim, ms in m.risk_ms.items():
        label = "default limit (1,000)" if lim is None else f"limit {lim}"
        note = f"GET /v1/fleet/risk, {label}, whole fleet ranked; {ms.size} requests"
        figs.append(Figure(name=f"fleet risk, {label}, {dialect}, p50", value=_pct(ms, 50),
                           unit="ms", digits=1, notes=note))  # fmt: skip
        figs.append(Figure(name=f"fleet risk, {label}, {dialect}, p99", value=_pct(ms, 99),
                           unit="ms", target=risk_target, digits=1, notes=note))  # fmt: skip
    return figs


# -- layout comparison (the measurement behind store/models.py) -------------------------------


def layout_compare(n_messages: int = 20_000, n_ind: int = 24) -> None:
    with tempfile.TemporaryDirectory() as tmp:
        rng = np.random.default_rng(0)
        vals = rng.normal(size=(n_messages, n_ind)).astype("<f4")
        assets = 14  # so one asset has ~1,440 messages, the 60-day hourly history
        start = datetime(2026, 1, 1)
        rows = [
            (i, f"A{i % assets:02d}", (start + timedelta(hours=i // assets)).isoformat(" "))
            for i in range(n_messages)
        ]
        results = {}
        for layout in ("packed", "per_value"):
            path = Path(tmp) / f"{layout}.db"
            conn = sqlite3.connect(path)
            t0 = time.perf_counter()
            if layout == "packed":
                conn.execute("CREATE TABLE m (id INTEGER PRIMARY KEY, asset TEXT, ws TEXT, v BLOB)")
                conn.execute("CREATE INDEX ix ON m (asset, ws)")
                conn.executemany(
                    "INSERT INTO m VALUES (?, ?, ?, ?)",
                    [(i, a, ws, vals[i].tobytes()) for i, a, ws in rows],
                )
            else:
                conn.execute("CREATE TABLE m (id INTEGER PRIMARY KEY, asset TEXT, ws TEXT)")
                conn.execute(
                    "CREATE TABLE v (message INTEGER, ind INTEGER, value REAL, "
                    "PRIMARY KEY (message, ind)) WITHOUT ROWID"
                )
                conn.execute("CREATE INDEX ix ON m (asset, ws)")
                conn.executemany("INSERT INTO m VALUES (?, ?, ?)", rows)
                conn.executemany(
                    "INSERT INTO v VALUES (?, ?, ?)",
                    [(i, j, float(vals[i, j])) for i in range(n_messages) for j in range(n_ind)],
                )
            conn.commit()
            fill = time.perf_counter() - t0
            reads = []
            for _ in range(50):
                t = time.perf_counter()
                if layout == "packed":
                    got = [
                        struct.unpack_from("<f", blob, 4 * 3)[0]
                        for ws, blob in conn.execute(
                            "SELECT ws, v FROM m WHERE asset = 'A03' ORDER BY ws"
                        )
                    ]
                else:
                    got = [
                        value
                        for ws, value in conn.execute(
                            "SELECT m.ws, v.value FROM m JOIN v ON v.message = m.id AND v.ind = 3"
                            " WHERE m.asset = 'A03' ORDER BY m.ws"
                        )
                    ]
                reads.append(time.perf_counter() - t)
            conn.close()
            results[layout] = (fill, path.stat().st_size / 1e6, statistics.median(reads) * 1e3,
                               len(got))  # fmt: skip
    print(f"layout comparison, SQLite, {n_messages} messages x {n_ind} indicators")
    print(f"{'layout':<10} {'fill s':>8} {'size MB':>8} {'read ms':>8} {'points':>7}")
    for k, (fill, size, read, n) in results.items():
        print(f"{k:<10} {fill:8.2f} {size:8.1f} {read:8.2f} {n:7d}")


# -- the report (wellspan bench service) ------------------------------------------------------


def run(*, quick: bool = False, report: Any = None) -> list[Any]:
    """The service's figures for the benchmark report, each rate beside the broker-only floor
    measured in the same run. ``--quick`` uses small sizes (fleet-scale targets do not apply)."""
    from bench.harness import Figure, Target

    n, n_http, per_req, fleet, days, queries, replicas = (
        (2000, 2000, 500, 20, 3, 50, 0) if quick else (30_000, 40_000, 1000, 1000, 60, 300, 2)
    )
    assets = [f"MAL-P{i}" for i in range(1, 4)]
    t0 = datetime(2026, 1, 1, tzinfo=UTC)
    payloads = [
        (
            indicators_topic(SITE, GATEWAY, assets[i % 3]),
            encode_indicators(_message(i, assets[i % 3], t0 + timedelta(seconds=i)), LAYOUT),
        )
        for i in range(n)
    ]
    fleet_days, n_templates, ttf_queries, risk_queries = (
        (FLEET_QUICK_DAYS, FLEET_QUICK_TEMPLATES, 30, 5) if quick else (days, 12, 300, 50)
    )
    steps = 13.0 + (2 if replicas > 1 else 0)
    done = 0.0

    def step(what: str) -> None:
        nonlocal done
        if report is not None:
            report(done, steps, what)
        done += 1

    def detail(what: str) -> None:  # progress within a step
        if report is not None:
            report(done - 1, steps, what)

    mqtt_target = Target(text="≥ 6,000 msg/s", op=">=", value=6000.0)
    share_target = Target(text="≥ 65 % of broker-only", op=">=", value=65.0)
    figs: list[Any] = []

    def ingest_figs(label: str, rate: float, broker: float, note: str) -> None:
        figs.append(Figure(name=f"MQTT → store, {label}", value=rate, unit="msg/s",
                           target=mqtt_target, notes=note, digits=0))  # fmt: skip
        figs.append(Figure(name=f"MQTT → store, {label} / broker-only", value=100 * rate / broker,
                           unit="%", target=share_target, digits=0))  # fmt: skip

    with tempfile.TemporaryDirectory() as tmp, mosquitto() as port:
        step("broker-only floor")
        broker = broker_only_rate(port, payloads)
        figs.append(Figure(name="MQTT broker only (counting subscriber)", value=broker,
                           unit="msg/s", notes=f"{n:,} QoS 1 messages queued offline, then "
                           "drained; the floor of the ingest rates", digits=0))  # fmt: skip
        note = f"{n:,} queued messages; commit before acknowledgement"
        step("MQTT → SQLite")
        ingest_figs("SQLite", ingest_rate(port, f"sqlite:///{tmp}/i.db", payloads, assets),
                    broker, note)  # fmt: skip
        step("MQTT → PostgreSQL")
        with pg_database() as url:
            ingest_figs("PostgreSQL", ingest_rate(port, url, payloads, assets), broker, note)
        if replicas > 1:
            note = f"{replicas} × wellspan ingest in one shared-subscription group"
            step("MQTT → SQLite, replicas")
            r = ingest_rate_replicas(port, f"sqlite:///{tmp}/r.db", payloads, assets, replicas)
            ingest_figs(f"SQLite, {replicas} replicas", r, broker, note)
            step("MQTT → PostgreSQL, replicas")
            with pg_database() as url:
                r = ingest_rate_replicas(port, url, payloads, assets, replicas)
            ingest_figs(f"PostgreSQL, {replicas} replicas", r, broker, note)
        http_target = Target(text="≥ 20,000 msg/s", op=">=", value=20_000.0)
        note = f"{n_http:,} readable messages, {per_req} per request, 2 API workers"
        step("HTTP → SQLite")
        r = http_rate(f"sqlite:///{tmp}/h.db", assets, n_http, workers=2, per_request=per_req)
        figs.append(Figure(name="HTTP batch ingest, SQLite", value=r, unit="msg/s",
                           target=http_target, notes=note, digits=0))  # fmt: skip
        step("HTTP → PostgreSQL")
        with pg_database() as url:
            r = http_rate(url, assets, n_http, workers=2, per_request=per_req)
        figs.append(Figure(name="HTTP batch ingest, PostgreSQL", value=r, unit="msg/s",
                           target=http_target, notes=note, digits=0))  # fmt: skip
        batch = load_settings().ingest_batch_max
        for dialect in ("SQLite", "PostgreSQL"):
            step(f"store writes, {dialect}")
            with contextlib.ExitStack() as stack:
                if dialect == "SQLite":
                    urls = (f"sqlite:///{tmp}/w.db", f"sqlite:///{tmp}/wf.db")
                else:
                    urls = (stack.enter_context(pg_database()), stack.enter_context(pg_database()))
                rates = store_write_rates(*urls, payloads, assets, batch)
            pipe_rate = rates.pop("pipeline")
            figs.append(Figure(name=f"store writes, {dialect} (ingest pipeline)", value=pipe_rate,
                               unit="msg/s", digits=0, notes=f"{n:,} binary messages decoded, "
                               f"validated and stored, {batch} per transaction"))  # fmt: skip
            for how, floor in rates.items():
                figs.append(Figure(name=f"store writes, {dialect} / raw driver {how}",
                                   value=100 * pipe_rate / floor, unit="%", digits=0,
                                   notes=f"the same rows through the driver: {floor:,.0f} "
                                   f"msg/s, {batch} per transaction"))  # fmt: skip
        p99_target = Target(text="p99 ≤ 50 ms (1,000 assets × 60 days)", op="<=", value=50.0)
        for dialect, fill in (("SQLite", fill_sqlite), ("PostgreSQL", fill_postgres)):
            step(f"history query, {dialect}")
            with contextlib.ExitStack() as stack:
                url = (
                    f"sqlite:///{tmp}/q.db"
                    if dialect == "SQLite"
                    else stack.enter_context(pg_database())
                )
                p50, p99, fill_s = query_latency(url, fleet, days, fill, queries)
            note = (f"{fleet:,} assets × {days} days of hourly windows "
                    f"({fleet * days * 24:,} messages, filled in {fill_s:.0f} s); {queries} "
                    f"queries of one indicator over {days} days")  # fmt: skip
            figs.append(Figure(name=f"history query, {dialect}, p50", value=p50, unit="ms",
                               notes=note, digits=1))  # fmt: skip
            figs.append(Figure(name=f"history query, {dialect}, p99", value=p99, unit="ms",
                               target=p99_target, notes=note, digits=1))  # fmt: skip
        step("simulate the fleet's pumps")
        templates = simulate_templates(
            fleet_days,
            n_templates=n_templates,
            progress=lambda k, n: detail(f"simulate the fleet's pumps: {k} of {n}"),
        )
        runs = fleet_runs(
            Path(tmp),
            templates,
            ("SQLite", "PostgreSQL"),
            assets=fleet,
            ttf_queries=ttf_queries,
            risk_queries=risk_queries,
            started=lambda dialect: step(f"forecast and fleet view, {dialect}"),
            report=lambda dialect, what: detail(f"{dialect}: {what}"),
        )
        for dialect, m in runs:
            figs += fleet_figures(m, dialect, templates)
    return figs


# -- main -------------------------------------------------------------------------------------


def _load() -> str:
    return f"load {os.getloadavg()[0]:.1f}"


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawTextHelpFormatter)
    ap.add_argument("--messages", type=int, default=30_000, help="messages per ingest run")
    ap.add_argument("--http-messages", type=int, default=40_000)
    ap.add_argument("--http-workers", type=int, default=2, help="wellspan serve --workers")
    ap.add_argument(
        "--replicas", type=int, default=2, help="ingest replicas in a shared-subscription group"
    )
    ap.add_argument(
        "--assets", type=int, default=1000, help="assets in the history and fleet fills"
    )
    ap.add_argument("--days", type=int, default=60, help="days of hourly windows per asset")
    ap.add_argument(
        "--parts",
        default="mqtt,http,history,fleet",
        help="comma-separated subset of mqtt,http,history,fleet",
    )
    ap.add_argument(
        "--history-dialects", default="sqlite,postgresql", help="stores of history and fleet"
    )
    ap.add_argument("--layout-compare", action="store_true", help="only the storage comparison")
    args = ap.parse_args()
    if args.layout_compare:
        layout_compare()
        return 0
    assets = [f"MAL-P{i}" for i in range(1, 4)]
    t0 = datetime(2026, 1, 1, tzinfo=UTC)
    payloads = (
        []
        if "mqtt" not in args.parts
        else [
            (
                indicators_topic(SITE, GATEWAY, assets[i % 3]),
                encode_indicators(_message(i, assets[i % 3], t0 + timedelta(seconds=i)), LAYOUT),
            )
            for i in range(args.messages)
        ]
    )
    parts = set(args.parts.split(","))

    class _Table(list[tuple[str, str, str]]):
        def append(self, row: tuple[str, str, str]) -> None:
            super().append(row)
            print(f"  {row[0]}: {row[1]} {row[2]}", file=sys.stderr, flush=True)  # progress

    table = _Table()
    with tempfile.TemporaryDirectory() as tmp, mosquitto() as port:
        if "mqtt" in parts:
            # The floor is measured before, between and after the two ingest runs, and each
            # ingest rate is compared with the mean of the floors on either side of it: on this
            # shared 2-core machine one floor taken at the start swung from 3,200 to 22,000
            # msg/s with the other work running, which made a single-floor ratio meaningless.
            def floor(when: str) -> float:
                rate = broker_only_rate(port, payloads)
                table.append((f"MQTT broker only (counting subscriber), {when}",
                              f"{rate:,.0f} msg/s", _load()))  # fmt: skip
                return rate

            floors = [floor("before")]
            r = ingest_rate(port, f"sqlite:///{tmp}/ingest.db", payloads, assets)
            floors.append(floor("between"))
            share = 100 * r / statistics.fmean(floors[-2:])
            table.append(("MQTT -> store, SQLite", f"{r:,.0f} msg/s", f"{share:.0f} %, {_load()}"))
            with pg_database() as url:
                r = ingest_rate(port, url, payloads, assets)
            floors.append(floor("after"))
            share = 100 * r / statistics.fmean(floors[-2:])
            table.append(
                ("MQTT -> store, PostgreSQL", f"{r:,.0f} msg/s", f"{share:.0f} %, {_load()}")
            )
            broker = statistics.fmean(floors)
            k = args.replicas
            if k > 1:
                r = ingest_rate_replicas(port, f"sqlite:///{tmp}/replicas.db", payloads, assets, k)
                table.append(
                    (f"MQTT -> store, SQLite, {k} replicas", f"{r:,.0f} msg/s",
                     f"{100 * r / broker:.0f} %")
                )  # fmt: skip
                with pg_database() as url:
                    r = ingest_rate_replicas(port, url, payloads, assets, k)
                table.append(
                    (f"MQTT -> store, PostgreSQL, {k} replicas", f"{r:,.0f} msg/s",
                     f"{100 * r / broker:.0f} %")
                )  # fmt: skip
        if "http" in parts:
            w = args.http_workers
            r = http_rate(f"sqlite:///{tmp}/http.db", assets, args.http_messages, workers=w)
            table.append(
                ("HTTP batch ingest, SQLite", f"{r:,.0f} msg/s", f"{w} workers, {_load()}")
            )
            with pg_database() as url:
                r = http_rate(url, assets, args.http_messages, workers=w)
            table.append(
                ("HTTP batch ingest, PostgreSQL", f"{r:,.0f} msg/s", f"{w} workers, {_load()}")
            )
        if "history" in parts:
            n = args.assets * args.days * 24
            for dialect in args.history_dialects.split(","):
                if dialect == "sqlite":
                    p50, p99, fill = query_latency(
                        f"sqlite:///{tmp}/history.db", args.assets, args.days, fill_sqlite
                    )
                else:
                    with pg_database() as url:
                        p50, p99, fill = query_latency(url, args.assets, args.days, fill_postgres)
                table.append(
                    (
                        f"history {args.days} d, {n:,} msgs, {dialect}",
                        f"p50 {p50:.1f} ms, p99 {p99:.1f} ms",
                        f"fill {fill:.0f} s, {_load()}",
                    )
                )
        if "fleet" in parts:
            print(f"  simulating the fleet's pumps ({args.days} days) ...", file=sys.stderr)
            templates = simulate_templates(args.days)
            named = {"sqlite": "SQLite", "postgresql": "PostgreSQL"}
            runs = fleet_runs(
                Path(tmp),
                templates,
                [named[d] for d in args.history_dialects.split(",")],
                assets=args.assets,
                report=lambda d, w: print(f"  {d}: {w}", file=sys.stderr, flush=True),
            )
            for dialect, m in runs:
                for f in fleet_figures(m, dialect, templates):
                    counts = f.notes if f.name.startswith("assets with") else ""
                    table.append((f.name, f.formatted_value(), f"{_load()} {counts}".strip()))
    print(f"load average during the run: {os.getloadavg()[0]:.1f} (2 cores)")
    print(f"{'measurement':<44} {'result':<28} {'note'}")
    for name, result, note in table:
        print(f"{name:<44} {result:<28} {note}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
