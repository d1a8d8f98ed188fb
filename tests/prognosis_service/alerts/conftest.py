"""Fixtures of the alert tests: a store on SQLite and on PostgreSQL, a local webhook receiver
that verifies signatures with the example code of docs/webhooks.md, and a private Mosquitto."""

from __future__ import annotations

import json
import re
import shutil
import socket
import subprocess
import threading
import time
import uuid
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from pathlib import Path
from types import SimpleNamespace
from typing import Any

import pytest
from sqlalchemy import create_engine, text

import prognosis_service.alerts.models  # noqa: F401  (registers the alert tables)
from prognosis_service.alerts.signing import SecretSealer
from prognosis_service.alerts.ssrf import TargetPolicy
from prognosis_service.store.engine import Store
from prognosis_service.store.models import Base
from tests.brokers import missing, require_tool
from wellspan.mosquitto import free_port

ROOT = Path(__file__).resolve().parents[3]
DOCS = ROOT / "docs" / "webhooks.md"
PG_ADMIN_URL = "postgresql+psycopg://root@127.0.0.1:5432/test"
MOSQUITTO = Path("/usr/sbin/mosquitto")
WAIT_S = 15.0  # hang guard for waits in tests, never a check


# ---------------------------------------------------------------------------------- databases


def _create_schema(url: str) -> None:
    """The migrations when our revision is present, else the models (before the revision)."""
    from prognosis_service.store import migrate

    migrate.upgrade(url)
    engine = create_engine(url)
    try:
        with engine.connect() as conn:
            has = conn.dialect.has_table(conn, "webhook_deliveries")
        if not has:
            Base.metadata.create_all(engine)
    finally:
        engine.dispose()


@pytest.fixture(scope="session")
def pg_url() -> Iterator[str]:
    """A uniquely named PostgreSQL database for this test session, dropped afterwards."""
    name = f"wellspan_alerts_{uuid.uuid4().hex[:12]}"
    admin = create_engine(PG_ADMIN_URL, isolation_level="AUTOCOMMIT")
    try:
        with admin.connect() as conn:
            conn.execute(text(f'CREATE DATABASE "{name}"'))
    except Exception as exc:  # pragma: no cover - depends on the machine
        admin.dispose()
        missing(f"PostgreSQL not reachable at {PG_ADMIN_URL}: {exc}")
    url = f"postgresql+psycopg://root@127.0.0.1:5432/{name}"
    try:
        _create_schema(url)
        yield url
    finally:
        with admin.connect() as conn:
            conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()


@pytest.fixture(scope="session")
def sqlite_template(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A migrated SQLite file, made once and copied for each test."""
    path = tmp_path_factory.mktemp("alerts-template") / "template.db"
    _create_schema(f"sqlite:///{path}")
    return path


def _sqlite_copy(template: Path, folder: Path) -> str:
    path = folder / "alerts.db"
    shutil.copyfile(template, path)
    return f"sqlite:///{path}"


@pytest.fixture(params=["sqlite", pytest.param("postgresql", marks=pytest.mark.postgres)])
def db_url(request: pytest.FixtureRequest, tmp_path: Path, sqlite_template: Path) -> Iterator[str]:
    """A fresh, empty alert schema on each dialect."""
    if request.param == "sqlite":
        yield _sqlite_copy(sqlite_template, tmp_path)
        return
    url = request.getfixturevalue("pg_url")
    yield url
    engine = create_engine(url)
    with engine.begin() as conn:  # empty every table for the next test
        for table in reversed(Base.metadata.sorted_tables):
            if conn.dialect.has_table(conn, table.name):
                conn.execute(table.delete())
    engine.dispose()


@pytest.fixture
def store(db_url: str) -> Iterator[Store]:
    s = Store(db_url)
    try:
        yield s
    finally:
        s.dispose()


@pytest.fixture
def sqlite_store(tmp_path: Path, sqlite_template: Path) -> Iterator[Store]:
    s = Store(_sqlite_copy(sqlite_template, tmp_path))
    try:
        yield s
    finally:
        s.dispose()


@pytest.fixture(scope="session")
def sealer() -> SecretSealer:
    return SecretSealer(SecretSealer.generate_key())


@pytest.fixture
def local_policy() -> TargetPolicy:
    """The test receiver runs on 127.0.0.1 over http: on-premise settings."""
    return TargetPolicy(allow_private_targets=True, allow_http=True)


# ------------------------------------------------------------------------------ fake clock


@dataclass
class FakeClock:
    now: datetime = field(default_factory=lambda: datetime(2026, 3, 1, 6, 0, tzinfo=UTC))

    def __call__(self) -> datetime:
        return self.now

    def advance(self, seconds: float) -> None:
        self.now += timedelta(seconds=seconds)


@pytest.fixture
def clock() -> FakeClock:
    return FakeClock()


# ------------------------------------------------------------------- the docs' receiver code


def docs_example() -> SimpleNamespace:
    """Run the first ```python block of docs/webhooks.md and return its names."""
    blocks = re.findall(r"```python\n(.*?)```", DOCS.read_text(encoding="utf-8"), flags=re.S)
    assert blocks, "docs/webhooks.md must hold a python receiver example"
    namespace: dict[str, Any] = {"__name__": "webhook_receiver_example"}
    exec(compile(blocks[0], str(DOCS), "exec"), namespace)
    return SimpleNamespace(**namespace)


@dataclass
class Scripted:
    status: int = 200
    headers: dict[str, str] = field(default_factory=dict)
    hold: bool = False  # block until ``release`` is set (to kill the sender mid-request)
    body: bytes = b""


@dataclass
class Receiver:
    """A webhook receiver on 127.0.0.1 that answers from a script and records every request.

    Signature checks and de-duplication use the example code of docs/webhooks.md.
    """

    secret: str = ""
    script: list[Scripted] = field(default_factory=list)  # consumed in order, then 200
    requests: list[dict[str, Any]] = field(default_factory=list)
    accepted: list[dict[str, Any]] = field(default_factory=list)  # first sight of an event id
    bad_signatures: int = 0
    holding: threading.Event = field(default_factory=threading.Event)
    release: threading.Event = field(default_factory=threading.Event)
    port: int = 0
    lock: threading.Lock = field(default_factory=threading.Lock)
    example: SimpleNamespace = field(default_factory=docs_example)
    seen: Any = None
    now_fn: Callable[[], float] = time.time  # the receiver's clock, for the signature's age

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self.port}/hooks/wellspan"

    def wait_for(self, predicate: Callable[[], bool], what: str) -> None:
        deadline = time.monotonic() + WAIT_S
        while not predicate():
            if time.monotonic() > deadline:
                raise AssertionError(f"timed out waiting for {what}")
            time.sleep(0.02)


@pytest.fixture
def receiver(clock: FakeClock) -> Iterator[Receiver]:
    rec = Receiver(now_fn=lambda: clock().timestamp())
    rec.seen = rec.example.SeenEvents()

    class Handler(BaseHTTPRequestHandler):
        def log_message(self, *args: Any) -> None:
            pass

        def do_POST(self) -> None:
            body = self.rfile.read(int(self.headers.get("Content-Length", "0")))
            headers = {k: v for k, v in self.headers.items()}
            with rec.lock:
                step = rec.script.pop(0) if rec.script else Scripted()
                rec.requests.append({"headers": headers, "body": body, "path": self.path})
            if step.hold:
                rec.holding.set()
                rec.release.wait(WAIT_S)
            ok = rec.example.verify_signature(
                rec.secret,
                headers.get("Wellspan-Event-Id", ""),
                headers.get("Wellspan-Signature", ""),
                body,
                now=rec.now_fn(),
            )
            status = step.status
            if not ok:
                with rec.lock:
                    rec.bad_signatures += 1
                status = 401
            elif 200 <= status < 300 and rec.seen.first_time(headers["Wellspan-Event-Id"]):
                with rec.lock:
                    rec.accepted.append(json.loads(body))
            try:
                self.send_response(status)
                for k, v in step.headers.items():
                    self.send_header(k, v)
                self.send_header("Content-Length", str(len(step.body)))
                self.end_headers()
                self.wfile.write(step.body)
            except OSError:
                pass  # the sender is gone (killed mid-request)

    server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
    server.daemon_threads = True
    rec.port = server.server_address[1]
    thread = threading.Thread(target=server.serve_forever, args=(0.02,), daemon=True)
    thread.start()
    try:
        yield rec
    finally:
        rec.release.set()
        server.shutdown()
        server.server_close()


# --------------------------------------------------------------------------------- broker


@dataclass
class Mosquitto:
    port: int
    process: subprocess.Popen[bytes]

    def stop(self) -> None:
        self.process.terminate()
        try:
            self.process.wait(5)
        except subprocess.TimeoutExpired:
            self.process.kill()
            self.process.wait()


@pytest.fixture
def mosquitto(tmp_path: Path) -> Iterator[Mosquitto]:
    """A private broker on a free loopback port."""
    require_tool(
        MOSQUITTO.exists() and shutil.which(str(MOSQUITTO)) is not None, "mosquitto not installed"
    )
    port = free_port()
    conf = tmp_path / "mosquitto.conf"
    conf.write_text(f"listener {port} 127.0.0.1\nallow_anonymous true\npersistence false\n")
    proc = subprocess.Popen(
        [str(MOSQUITTO), "-c", str(conf)], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE
    )
    deadline = time.monotonic() + WAIT_S
    while True:
        try:
            with socket.create_connection(("127.0.0.1", port), timeout=0.2):
                break
        except OSError:
            if proc.poll() is not None or time.monotonic() > deadline:
                err = proc.stderr.read().decode() if proc.stderr else ""
                raise RuntimeError(f"mosquitto did not start: {err}") from None
            time.sleep(0.05)
    broker = Mosquitto(port, proc)
    try:
        yield broker
    finally:
        broker.stop()
