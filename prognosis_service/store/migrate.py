"""Apply the Alembic migrations in ``store/migrations`` (at service start and in tests).

Several processes may start at once on one database (``wellspan serve --no-ingest`` beside
``wellspan ingest`` replicas), and each applies the migrations. Unguarded, two of them run the
same revision concurrently: on PostgreSQL the second fails on a duplicate table or on the
``alembic_version`` row; on SQLite one waits out the busy timeout or fails half-way. So every
upgrade and downgrade runs under one lock per database: a session-level ``pg_advisory_lock`` on
PostgreSQL (released with the connection even if the process dies), an exclusive ``flock`` on a
file beside the SQLite database. Whoever comes second finds the work done and does nothing.
"""

from __future__ import annotations

import fcntl
import time
import zlib
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import create_engine, make_url, pool, text

__all__ = [
    "MIGRATION_LOCK_TIMEOUT_S",
    "MigrationLockTimeoutError",
    "alembic_config",
    "current_revision",
    "downgrade",
    "head_revision",
    "migration_lock",
    "upgrade",
]

MIGRATIONS = Path(__file__).with_name("migrations")
MIGRATION_LOCK_TIMEOUT_S = 300.0
# Advisory-lock key: a fixed 32-bit number of our own, so other applications sharing the
# database are unlikely to collide with it.
_PG_LOCK_KEY = zlib.crc32(b"wellspan.store.migrate")


class MigrationLockTimeoutError(RuntimeError):
    """Another process held the migration lock for longer than the timeout."""


def alembic_config(url: str) -> Config:
    cfg = Config()
    cfg.set_main_option("script_location", str(MIGRATIONS))
    cfg.attributes["database_url"] = url
    return cfg


def _sqlite_lock_path(url: str) -> Path | None:
    database = make_url(url).database
    if not database or database == ":memory:" or database.startswith("file:"):
        return None  # in memory: private to this process, nothing to guard
    return Path(database).with_name(Path(database).name + ".migrate-lock")


@contextmanager
def migration_lock(url: str, timeout_s: float = MIGRATION_LOCK_TIMEOUT_S) -> Iterator[None]:
    """Hold the database's migration lock for the duration of the block.

    Raises
    ------
    MigrationLockTimeoutError
        If the lock is not free within ``timeout_s`` seconds.
    """
    deadline = time.monotonic() + timeout_s
    if make_url(url).get_backend_name() == "sqlite":
        path = _sqlite_lock_path(url)
        if path is None:
            yield
            return
        with path.open("a") as fh:
            while True:
                try:
                    fcntl.flock(fh, fcntl.LOCK_EX | fcntl.LOCK_NB)
                    break
                except BlockingIOError:
                    if time.monotonic() > deadline:
                        raise MigrationLockTimeoutError(
                            f"another process held the migration lock {path} "
                            f"for more than {timeout_s:g} s"
                        ) from None
                    time.sleep(0.05)
            try:
                yield
            finally:
                fcntl.flock(fh, fcntl.LOCK_UN)
        return
    engine = create_engine(url, poolclass=pool.NullPool)
    try:
        with engine.connect() as conn:
            conn.execution_options(isolation_level="AUTOCOMMIT")
            while not conn.scalar(text("SELECT pg_try_advisory_lock(:k)"), {"k": _PG_LOCK_KEY}):
                if time.monotonic() > deadline:
                    raise MigrationLockTimeoutError(
                        f"another process held the migration lock for more than {timeout_s:g} s"
                    )
                time.sleep(0.05)
            try:
                yield
            finally:
                conn.execute(text("SELECT pg_advisory_unlock(:k)"), {"k": _PG_LOCK_KEY})
    finally:
        engine.dispose()


def upgrade(url: str, revision: str = "head") -> None:
    with migration_lock(url):
        command.upgrade(alembic_config(url), revision)


def downgrade(url: str, revision: str = "base") -> None:
    with migration_lock(url):
        command.downgrade(alembic_config(url), revision)


def head_revision() -> str:
    head = ScriptDirectory.from_config(alembic_config("sqlite://")).get_current_head()
    assert head is not None
    return head


def current_revision(url: str) -> str | None:
    engine = create_engine(url)
    try:
        with engine.connect() as conn:
            return MigrationContext.configure(conn).get_current_revision()
    finally:
        engine.dispose()
