"""Fixtures of the service tests: the shared private Mosquitto, a private PostgreSQL database,
stores on both dialects, and the app with API keys."""

from __future__ import annotations

import os
import uuid
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import psycopg
import pytest
from fastapi.testclient import TestClient
from sqlalchemy import inspect, text

from prognosis_service.app import create_app
from prognosis_service.auth import create_key
from prognosis_service.settings import load_settings
from prognosis_service.store.engine import Store
from prognosis_service.store.migrate import upgrade
from prognosis_service.store.models import Base
from tests.brokers import MosquittoBroker, missing

PG_ADMIN_URL = os.environ.get("WELLSPAN_TEST_PG", "postgresql://root@127.0.0.1:5432/test")


@pytest.fixture(scope="session")
def broker(mosquitto: MosquittoBroker) -> MosquittoBroker:
    """The session's shared private Mosquitto (tests/brokers.py): anonymous, queues without
    limit for offline persistent sessions."""
    return mosquitto


@pytest.fixture(scope="session")
def pg_url() -> Iterator[str]:
    """A uniquely named PostgreSQL database for this test session, dropped afterwards."""
    name = f"wellspan_svc_{uuid.uuid4().hex[:12]}"
    try:
        admin = psycopg.connect(PG_ADMIN_URL, autocommit=True, connect_timeout=3)
    except psycopg.OperationalError as exc:
        missing(f"PostgreSQL not reachable at {PG_ADMIN_URL}: {exc}")
    with admin:
        admin.execute(f'CREATE DATABASE "{name}"')
    base = PG_ADMIN_URL.rsplit("/", 1)[0].replace("postgresql://", "postgresql+psycopg://", 1)
    url = f"{base}/{name}"
    upgrade(url)
    yield url
    with psycopg.connect(PG_ADMIN_URL, autocommit=True) as admin:
        admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')


def _truncate(store: Store) -> None:
    with store.engine.begin() as conn:
        present = set(inspect(conn).get_table_names()) - {"alembic_version"}
        names = ", ".join(t.name for t in Base.metadata.sorted_tables if t.name in present)
        conn.execute(text(f"TRUNCATE {names} RESTART IDENTITY CASCADE"))


@pytest.fixture(params=["sqlite", "postgresql"])
def store_url(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[str]:
    """A migrated, empty store on each dialect."""
    if request.param == "sqlite":
        url = f"sqlite:///{tmp_path / 'wellspan.db'}"
        upgrade(url)
        yield url
    else:
        url = request.getfixturevalue("pg_url")
        store = Store(url)
        _truncate(store)
        store.dispose()
        yield url


@pytest.fixture
def store(store_url: str) -> Iterator[Store]:
    s = Store(store_url)
    yield s
    s.dispose()


@dataclass
class Keys:
    admin: str
    reader: str
    ingest: str
    mallee_reader: str  # read, limited to site "mallee"
    gibber_admin: str  # admin, limited to site "gibber"
    revoked: str


@dataclass
class Service:
    client: TestClient
    store: Store
    keys: Keys

    def auth(self, token: str) -> dict[str, str]:
        return {"Authorization": f"Bearer {token}"}


@pytest.fixture
def service(store_url: str) -> Iterator[Service]:
    settings = load_settings(database_url=store_url, mqtt_url="mqtt://127.0.0.1:9")
    app = create_app(settings, run_ingest=False)
    with TestClient(app, raise_server_exceptions=False) as client:
        store: Store = app.state.runtime.store
        with store.write() as session:
            tokens = {
                name: create_key(session, name=name, scopes=scopes, sites=sites)[1]
                for name, scopes, sites in [
                    ("admin", ["admin"], None),
                    ("reader", ["read"], None),
                    ("ingest", ["ingest"], None),
                    ("mallee_reader", ["read"], ["mallee"]),
                    ("gibber_admin", ["admin"], ["gibber"]),
                    ("revoked", ["admin"], None),
                ]
            }
        from prognosis_service.auth import revoke_key

        with store.write() as session:
            revoke_key(session, tokens["revoked"].split("_")[1])
        yield Service(client, store, Keys(**tokens))
