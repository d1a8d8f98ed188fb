"""Alembic migrations up and down on SQLite and PostgreSQL, and in step with the models."""

from __future__ import annotations

import uuid
from collections.abc import Iterator
from pathlib import Path

import psycopg
import pytest
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from sqlalchemy import create_engine, inspect

from prognosis_service.store.migrate import current_revision, downgrade, head_revision, upgrade
from prognosis_service.store.models import Base, import_all_models, object_applies
from tests.brokers import missing
from tests.prognosis_service.conftest import PG_ADMIN_URL

TABLES = {
    "sites", "gateways", "assets", "layouts", "messages", "quarantine", "edge_alarms",
    "drop_reports", "api_keys", "idempotency_records",
}  # fmt: skip


@pytest.fixture(params=["sqlite", "postgresql"])
def empty_url(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[str]:
    if request.param == "sqlite":
        yield f"sqlite:///{tmp_path / 'm.db'}"
        return
    name = f"wellspan_mig_{uuid.uuid4().hex[:12]}"
    try:
        admin = psycopg.connect(PG_ADMIN_URL, autocommit=True, connect_timeout=3)
    except psycopg.OperationalError as exc:
        missing(f"PostgreSQL not reachable: {exc}")
    with admin:
        admin.execute(f'CREATE DATABASE "{name}"')
    base = PG_ADMIN_URL.rsplit("/", 1)[0].replace("postgresql://", "postgresql+psycopg://", 1)
    yield f"{base}/{name}"
    with psycopg.connect(PG_ADMIN_URL, autocommit=True) as admin:
        admin.execute(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)')


def _tables(url: str) -> set[str]:
    engine = create_engine(url)
    try:
        return set(inspect(engine).get_table_names()) - {"alembic_version"}
    finally:
        engine.dispose()


def test_up_down_up(empty_url: str) -> None:
    upgrade(empty_url)
    assert current_revision(empty_url) == head_revision()
    assert _tables(empty_url) >= TABLES  # later revisions (e.g. alerts) add their own
    downgrade(empty_url, "base")
    assert current_revision(empty_url) is None
    assert _tables(empty_url) == set()
    upgrade(empty_url)
    assert _tables(empty_url) >= TABLES


def test_migrations_match_the_models(empty_url: str) -> None:
    import_all_models()
    upgrade(empty_url)
    engine = create_engine(empty_url)
    try:
        with engine.connect() as conn:
            ctx = MigrationContext.configure(
                conn, opts={"include_object": object_applies(conn.dialect.name)}
            )
            diff = compare_metadata(ctx, Base.metadata)
    finally:
        engine.dispose()
    assert diff == []
