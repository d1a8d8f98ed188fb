"""Tables of the service (SQLAlchemy 2.x typed models).

Indicator storage layout — chosen by measurement (``python -m bench.bench_service
--layout-compare``; this machine, SQLite, 20,000 messages × 24 indicators, one indicator of one
asset read back over 1,429 points, about 60 days hourly):

* one row per message, the values packed as little-endian float32 in a binary column:
  fill 0.16 s, file 3.4 MB, read 7.0 ms;
* one row per indicator value (a values table keyed by message and position):
  fill 1.95 s, file 11.2 MB, read 9.8 ms.

Messages are written whole and read by (asset, time); the packed row is twelve times cheaper to
write, a third of the size and no slower to read, so it is the layout here. The price: a query
by value (e.g. "all windows where kurtosis > 6") cannot use an index and unpacks in Python.
Missing values are stored as NaN: the contract refuses non-finite numbers, so NaN can only mean
"not computed".

History index — the history query (domain/history.py) reads ``id, window_start, layout_digest,
values_f32, quality`` of one asset over a time range. With an index on ``(asset_id,
window_start)`` alone each of its 1,440 rows (60 days hourly) was a random read of the table;
covering the query from the index (PostgreSQL: ``INCLUDE``; SQLite, which has no ``INCLUDE``:
the columns in the key) makes it one range scan. Measured at 1,000 assets × 60 days hourly, the
SQL alone on the driver: PostgreSQL 34–42 ms → 0.33 ms, SQLite p50 12–24 ms → 1.9 ms. The price
is the values stored twice: the SQLite file grew by 44 % (541 → 777 MB there), and writes
slowed by 2–7 % (``store_write_rates`` in bench/bench_service.py, 20,000 messages). PostgreSQL
answers from the index alone once (auto)vacuum has marked the pages all-visible.
"""

from __future__ import annotations

import uuid
from collections.abc import Callable
from datetime import UTC, datetime
from typing import Any, ClassVar

from sqlalchemy import (
    JSON,
    BigInteger,
    DateTime,
    Dialect,
    Float,
    ForeignKey,
    Index,
    Integer,
    LargeBinary,
    MetaData,
    String,
    Text,
    TypeDecorator,
    UniqueConstraint,
    Uuid,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column

__all__ = [
    "ApiKey",
    "Asset",
    "Base",
    "DropReportRow",
    "EdgeAlarmRow",
    "Gateway",
    "IdempotencyRecord",
    "LayoutRow",
    "MessageRow",
    "QuarantineRow",
    "Site",
    "UtcDateTime",
    "import_all_models",
    "object_applies",
]

NAMING_CONVENTION = {
    "ix": "ix_%(column_0_label)s",
    "uq": "uq_%(table_name)s_%(column_0_N_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}

# SQLite wants INTEGER PRIMARY KEY for an auto-increment rowid; PostgreSQL gets BIGINT.
BigId = BigInteger().with_variant(Integer(), "sqlite")


class UtcDateTime(TypeDecorator[datetime]):
    """Timezone-aware UTC datetimes on both dialects (SQLite stores naive UTC text)."""

    impl = DateTime(timezone=True)
    cache_ok = True

    def process_bind_param(self, value: datetime | None, dialect: Dialect) -> datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:
            raise ValueError("naive datetime given where UTC is required")
        value = value.astimezone(UTC)
        return value.replace(tzinfo=None) if dialect.name == "sqlite" else value

    def process_result_value(self, value: datetime | None, dialect: Dialect) -> datetime | None:
        if value is None:
            return None
        return value.replace(tzinfo=UTC) if value.tzinfo is None else value.astimezone(UTC)

    def result_processor(self, dialect: Dialect, coltype: Any) -> Any:
        if dialect.name != "sqlite":
            return super().result_processor(dialect, coltype)

        # SQLite hands back the text SQLAlchemy wrote ("2026-06-01 00:00:00.000000");
        # fromisoformat reads it several times faster than the dialect's regular expression,
        # which mattered for history queries (1,440 rows: 7 ms of 33 ms in a profile).
        def _to_utc(value: Any) -> datetime | None:
            if value is None:
                return None
            if isinstance(value, str):
                return datetime.fromisoformat(value).replace(tzinfo=UTC)
            return self.process_result_value(value, dialect)

        return _to_utc


class Base(DeclarativeBase):
    metadata = MetaData(naming_convention=NAMING_CONVENTION)
    type_annotation_map: ClassVar[dict[Any, Any]] = {
        datetime: UtcDateTime,
        dict[str, Any]: JSON,
        uuid.UUID: Uuid,
    }


class Site(Base):
    __tablename__ = "sites"

    site_id: Mapped[str] = mapped_column(String(64), primary_key=True)
    created_at: Mapped[datetime]


class Gateway(Base):
    __tablename__ = "gateways"

    gateway_id: Mapped[str] = mapped_column(String(64), primary_key=True)
    site_id: Mapped[str] = mapped_column(String(64))
    state: Mapped[str | None] = mapped_column(String(16))  # online | offline | lost, from status
    state_at: Mapped[datetime | None]
    last_seen_at: Mapped[datetime | None]  # arrival of anything from this gateway
    last_sequence: Mapped[int | None] = mapped_column(BigInteger)
    agent_version: Mapped[str | None] = mapped_column(String(32))
    last_status: Mapped[dict[str, Any] | None]


class Asset(Base):
    __tablename__ = "assets"

    asset_id: Mapped[str] = mapped_column(String(64), primary_key=True)
    site_id: Mapped[str] = mapped_column(String(64), index=True)
    gateway_id: Mapped[str | None] = mapped_column(String(64))
    asset_class: Mapped[str] = mapped_column(String(64), default="")
    description: Mapped[str] = mapped_column(String(500), default="")
    registered_at: Mapped[datetime]


class LayoutRow(Base):
    __tablename__ = "layouts"

    digest: Mapped[str] = mapped_column(String(16), primary_key=True)
    body: Mapped[dict[str, Any]]
    first_gateway_id: Mapped[str | None] = mapped_column(String(64))
    first_seen_at: Mapped[datetime]


class MessageRow(Base):
    __tablename__ = "messages"
    __table_args__ = (
        UniqueConstraint("gateway_id", "sequence"),
        UniqueConstraint("message_id"),
        # covers the history query, one form per dialect (see "History index" above)
        Index(
            "ix_messages_history",
            "asset_id",
            "window_start",
            "id",
            postgresql_include=["layout_digest", "values_f32", "quality"],
        ).ddl_if(dialect="postgresql"),
        Index(
            "ix_messages_history_lite",
            "asset_id",
            "window_start",
            "id",
            "layout_digest",
            "values_f32",
            "quality",
        ).ddl_if(dialect="sqlite"),
    )

    id: Mapped[int] = mapped_column(BigId, primary_key=True, autoincrement=True)
    message_id: Mapped[uuid.UUID]
    gateway_id: Mapped[str] = mapped_column(String(64))
    sequence: Mapped[int] = mapped_column(BigInteger)
    site_id: Mapped[str] = mapped_column(String(64))
    asset_id: Mapped[str] = mapped_column(ForeignKey("assets.asset_id"))
    window_start: Mapped[datetime]
    window_s: Mapped[float] = mapped_column(Float)
    clock_sync: Mapped[str] = mapped_column(String(16))
    shaft_speed_hz: Mapped[float | None] = mapped_column(Float)
    shaft_speed_source: Mapped[str | None] = mapped_column(String(16))
    load_fraction: Mapped[float | None] = mapped_column(Float)
    flow_m3_per_h: Mapped[float | None] = mapped_column(Float)
    suction_pressure_kpa: Mapped[float | None] = mapped_column(Float)
    fluid_temperature_c: Mapped[float | None] = mapped_column(Float)
    quality: Mapped[dict[str, Any] | None]  # {channel: {"flags": [...], "spikes_removed": n}}
    layout_digest: Mapped[str] = mapped_column(ForeignKey("layouts.digest"))
    values_f32: Mapped[bytes] = mapped_column(LargeBinary)
    received_at: Mapped[datetime]


class QuarantineRow(Base):
    __tablename__ = "quarantine"
    __table_args__ = (UniqueConstraint("fingerprint"),)

    id: Mapped[int] = mapped_column(BigId, primary_key=True, autoincrement=True)
    fingerprint: Mapped[str] = mapped_column(String(64))  # SHA-256 of source, topic and payload
    received_at: Mapped[datetime]
    source: Mapped[str] = mapped_column(String(8))  # mqtt | http
    topic: Mapped[str | None] = mapped_column(String(512))
    reason: Mapped[str] = mapped_column(String(32), index=True)
    detail: Mapped[str] = mapped_column(Text)
    payload: Mapped[bytes] = mapped_column(LargeBinary)
    site_id: Mapped[str | None] = mapped_column(String(64))
    gateway_id: Mapped[str | None] = mapped_column(String(64))
    asset_id: Mapped[str | None] = mapped_column(String(64))
    message_id: Mapped[uuid.UUID | None]
    sequence: Mapped[int | None] = mapped_column(BigInteger)
    layout_digest: Mapped[str | None] = mapped_column(String(16))
    attempts: Mapped[int] = mapped_column(Integer, default=1)
    resolved_at: Mapped[datetime | None]
    resolution: Mapped[str | None] = mapped_column(String(16))  # readmitted


class EdgeAlarmRow(Base):
    __tablename__ = "edge_alarms"
    __table_args__ = (UniqueConstraint("message_id"),)

    id: Mapped[int] = mapped_column(BigId, primary_key=True, autoincrement=True)
    message_id: Mapped[uuid.UUID]
    gateway_id: Mapped[str] = mapped_column(String(64))
    site_id: Mapped[str] = mapped_column(String(64))
    asset_id: Mapped[str] = mapped_column(String(64), index=True)
    raised_at: Mapped[datetime]
    kind: Mapped[str] = mapped_column(String(32))
    cleared: Mapped[bool]
    body: Mapped[dict[str, Any]]
    received_at: Mapped[datetime]


class DropReportRow(Base):
    __tablename__ = "drop_reports"
    __table_args__ = (UniqueConstraint("message_id"),)

    id: Mapped[int] = mapped_column(BigId, primary_key=True, autoincrement=True)
    message_id: Mapped[uuid.UUID]
    gateway_id: Mapped[str] = mapped_column(String(64), index=True)
    site_id: Mapped[str] = mapped_column(String(64))
    at: Mapped[datetime]
    dropped_count: Mapped[int] = mapped_column(BigInteger)
    body: Mapped[dict[str, Any]]
    received_at: Mapped[datetime]


class ApiKey(Base):
    __tablename__ = "api_keys"

    key_id: Mapped[str] = mapped_column(String(16), primary_key=True)
    name: Mapped[str] = mapped_column(String(100))
    secret_sha256: Mapped[str] = mapped_column(String(64))
    scopes: Mapped[str] = mapped_column(String(64))  # space-separated: read ingest admin
    sites: Mapped[str | None] = mapped_column(Text)  # space-separated; NULL = every site
    created_at: Mapped[datetime]
    revoked_at: Mapped[datetime | None]


class IdempotencyRecord(Base):
    __tablename__ = "idempotency_records"

    key_id: Mapped[str] = mapped_column(String(16), primary_key=True)
    idempotency_key: Mapped[str] = mapped_column(String(200), primary_key=True)
    request_sha256: Mapped[str] = mapped_column(String(64))
    status_code: Mapped[int] = mapped_column(Integer)
    response: Mapped[dict[str, Any]]
    created_at: Mapped[datetime]


def import_all_models() -> None:
    """Import every ``prognosis_service.*.models`` module so ``Base.metadata`` holds every table
    (packages such as ``alerts`` register their tables on this shared Base)."""
    import importlib
    import pkgutil

    import prognosis_service

    for mod in pkgutil.walk_packages(prognosis_service.__path__, "prognosis_service."):
        if mod.name.endswith(".models"):
            importlib.import_module(mod.name)


def object_applies(dialect: str) -> Callable[[Any, str | None, str, bool, Any], bool]:
    """An Alembic ``include_object`` hook that leaves out indexes made for another dialect
    (``Index(...).ddl_if(dialect=...)``), which autogenerate would otherwise call missing."""

    def include(obj: Any, _name: str | None, type_: str, reflected: bool, _other: Any) -> bool:
        if type_ != "index" or reflected:
            return True
        only = getattr(obj, "_ddl_if", None)
        return only is None or only.dialect is None or only.dialect == dialect

    return include
