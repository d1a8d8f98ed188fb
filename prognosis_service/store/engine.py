"""Engine and sessions: SQLite (WAL, ``BEGIN IMMEDIATE`` for writes, busy timeout) or PostgreSQL."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from sqlalchemy import Engine, create_engine, event, text
from sqlalchemy.engine import Connection
from sqlalchemy.orm import Session, sessionmaker

__all__ = ["Store", "insert_for"]

SQLITE_BUSY_TIMEOUT_MS = 30_000
_WRITE = "wellspan_write"


def _sqlite_engine(url: str, **kw: Any) -> Engine:
    engine = create_engine(
        url,
        connect_args={"timeout": SQLITE_BUSY_TIMEOUT_MS / 1000, "check_same_thread": False},
        **kw,
    )

    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_conn: Any, _record: Any) -> None:
        # Take transaction control from the driver so BEGIN is ours (SQLAlchemy's documented
        # recipe for pysqlite), then set the pragmas every connection needs.
        dbapi_conn.isolation_level = None
        cur = dbapi_conn.cursor()
        cur.execute("PRAGMA journal_mode=WAL")
        cur.execute("PRAGMA synchronous=NORMAL")
        cur.execute(f"PRAGMA busy_timeout={SQLITE_BUSY_TIMEOUT_MS}")
        cur.execute("PRAGMA foreign_keys=ON")
        cur.close()

    @event.listens_for(engine, "begin")
    def _on_begin(conn: Connection) -> None:
        # A writer takes the write lock up front: no deadlock-prone read→write upgrade.
        write = conn.get_execution_options().get(_WRITE, False)
        conn.exec_driver_sql("BEGIN IMMEDIATE" if write else "BEGIN")

    return engine


class Store:
    """The database: one engine, a reader and a writer session factory.

    Parameters
    ----------
    url : str
        ``sqlite:///path.db`` or ``postgresql+psycopg://user@host/db``.
    """

    def __init__(self, url: str, *, pool_size: int = 5) -> None:
        self.url = url
        if url.startswith("sqlite"):
            self.engine = _sqlite_engine(url)
        else:
            self.engine = create_engine(
                url, pool_size=pool_size, max_overflow=10, pool_pre_ping=True
            )
        self.dialect = self.engine.dialect.name
        self.reader = sessionmaker(self.engine, expire_on_commit=False)
        self.writer = sessionmaker(
            self.engine.execution_options(**{_WRITE: True}), expire_on_commit=False
        )

    def __repr__(self) -> str:
        return f"Store(url={self.engine.url.render_as_string(hide_password=True)!r})"

    @contextmanager
    def write(self) -> Iterator[Session]:
        """A session inside one write transaction, committed on leaving the block."""
        with self.writer() as session, session.begin():
            yield session

    @contextmanager
    def read(self) -> Iterator[Session]:
        with self.reader() as session, session.begin():
            yield session

    def ping(self) -> None:
        with self.engine.connect() as conn:
            conn.execute(text("SELECT 1"))

    def dispose(self) -> None:
        self.engine.dispose()


def insert_for(session: Session) -> Any:
    """The dialect's ``insert`` that offers ``on_conflict_do_nothing``/``do_update``."""
    name = session.get_bind().dialect.name
    if name == "sqlite":
        from sqlalchemy.dialects.sqlite import insert as sqlite_insert

        return sqlite_insert
    from sqlalchemy.dialects.postgresql import insert as pg_insert

    return pg_insert
