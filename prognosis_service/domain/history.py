"""Indicator history of one asset by name and time range, raw or downsampled into buckets."""

from __future__ import annotations

import json
import math
import re
import struct
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from prognosis_service.domain.errors import InvalidInputError, NotFoundError
from prognosis_service.domain.pagination import decode_cursor, encode_cursor
from prognosis_service.store.models import LayoutRow, MessageRow
from shared_schema import IndicatorLayout

__all__ = ["Bucket", "History", "Point", "indicator_history", "indicator_names", "parse_every"]

_EVERY = re.compile(r"^([1-9][0-9]{0,5})(s|m|h|d)$")
_UNIT_S = {"s": 1, "m": 60, "h": 3600, "d": 86400}
_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
MAX_RANGE_ROWS = 500_000


def parse_every(every: str) -> timedelta:
    """``30s``, ``15m``, ``1h``, ``7d`` → a bucket width (at least one second)."""
    m = _EVERY.match(every)
    if m is None:
        raise InvalidInputError(
            f"every must be a number and one of s, m, h, d (e.g. '1h'), got {every!r}"
        )
    return timedelta(seconds=int(m.group(1)) * _UNIT_S[m.group(2)])


@dataclass(frozen=True, slots=True)
class Point:
    window_start: datetime
    value: float | None
    quality_flags: tuple[str, ...]


@dataclass(frozen=True, slots=True)
class Bucket:
    start: datetime
    count: int  # values present in the bucket
    flagged: int  # of which carried a quality flag on the indicator's channel
    mean: float | None
    min: float | None
    max: float | None


@dataclass(frozen=True, slots=True)
class History:
    asset_id: str
    indicator: str
    unit: str
    items: list[Point] | list[Bucket]
    next_cursor: str | None


_LAYOUTS: dict[str, IndicatorLayout] = {}  # by digest: content-addressed, so never stale


class _Layouts:
    """Where ``name`` sits in each layout: (index, unit, channel), or None if absent."""

    def __init__(self, session: Session, name: str) -> None:
        self.session = session
        self.name = name
        self._found: dict[str, tuple[int, str, str] | None] = {}

    def position(self, digest: str) -> tuple[int, str, str] | None:
        if digest not in self._found:
            layout = _LAYOUTS.get(digest)
            if layout is None:
                body = self.session.scalar(select(LayoutRow.body).where(LayoutRow.digest == digest))
                if body is not None:
                    layout = IndicatorLayout.model_validate(body)
                    if len(_LAYOUTS) < 10_000:
                        _LAYOUTS[digest] = layout
            found = None
            if layout is not None:
                for i, spec in enumerate(layout.indicators):
                    if spec.name == self.name:
                        found = (i, spec.unit, spec.channel)
                        break
            self._found[digest] = found
        return self._found[digest]


def indicator_names(session: Session, asset_id: str) -> list[tuple[str, str]]:
    """(name, unit) of every indicator in the layouts this asset's messages used."""
    digests = session.scalars(
        select(MessageRow.layout_digest).where(MessageRow.asset_id == asset_id).distinct()
    ).all()
    names: dict[str, str] = {}
    for digest in digests:
        body = session.scalar(select(LayoutRow.body).where(LayoutRow.digest == digest))
        if body is not None:
            for spec in IndicatorLayout.model_validate(body).indicators:
                names.setdefault(spec.name, spec.unit)
    return sorted(names.items())


def _unit_of(session: Session, name: str) -> str:
    channel = name.split(".", 1)[0]
    for body in session.scalars(select(LayoutRow.body)):
        for spec in body.get("indicators", []):
            if spec.get("name") == name and spec.get("channel") == channel:
                return str(spec.get("unit"))
    raise NotFoundError("indicator not found in any known layout")


_F32 = struct.Struct("<f")
_SELECT = (
    "SELECT id, window_start, layout_digest, values_f32, quality FROM messages"
    " WHERE asset_id = {p} AND window_start >= {p} AND window_start < {p}"
)
_AFTER = " AND (window_start > {p} OR (window_start = {p} AND id > {p}))"
_ORDER = " ORDER BY window_start, id LIMIT {p}"


def _sqlite_text(value: datetime) -> str:
    """A time as SQLite stores it (SQLAlchemy's naive UTC text), for comparing in SQL."""
    return value.astimezone(UTC).replace(tzinfo=None).isoformat(" ", "microseconds")


def _fetch(
    session: Session,
    asset_id: str,
    start: datetime,
    end: datetime,
    limit: int,
    after: tuple[datetime, int] | None = None,
) -> list[tuple[int, datetime, str, bytes, dict[str, Any] | None]]:
    """(id, window_start, layout digest, packed values, quality) oldest first, on the driver.

    Measured at 1,000 assets × 60 days hourly (1,440 rows a query, 300 queries): the ORM
    select spent 4 ms of 13 ms CPU turning rows into typed values (times through the type
    decorator, JSON for every row); on the driver the times come back as text (SQLite) or
    datetimes (psycopg) and only non-null quality is parsed.
    """
    conn = session.connection()
    lite = conn.dialect.name == "sqlite"
    p = "?" if lite else "%s"
    sql = _SELECT.format(p=p)
    params: list[Any] = [asset_id, start, end]
    if after is not None:
        sql += _AFTER.format(p=p)
        params += [after[0], after[0], after[1]]
    sql += _ORDER.format(p=p)
    params.append(limit)
    if lite:
        params = [_sqlite_text(v) if isinstance(v, datetime) else v for v in params]
    rows = conn.exec_driver_sql(sql, tuple(params)).all()
    if not lite:
        return [tuple(r) for r in rows]
    out = []
    parse = datetime.fromisoformat
    for id_, ws, digest, blob, quality in rows:
        out.append(
            (
                id_,
                parse(ws).replace(tzinfo=UTC),
                digest,
                blob,
                None if quality is None else json.loads(quality),
            )
        )
    return out


def indicator_history(
    session: Session,
    asset_id: str,
    name: str,
    *,
    start: datetime,
    end: datetime,
    every: str | None = None,
    limit: int = 2000,
    cursor: str | None = None,
) -> History:
    """One indicator of one asset over ``[start, end)``, oldest first.

    With ``every``, values are grouped into buckets aligned to the Unix epoch, each with its
    count, mean, minimum and maximum; missing values (not computed at the gateway) are skipped.
    Rows are read by the ``(asset_id, window_start)`` index and values unpacked here (the
    packed layout of store/models.py); bucketing in Python over at most a few thousand rows
    costs less than a millisecond.
    """
    if end <= start:
        raise InvalidInputError(f"end must be after start, got start={start} end={end}")
    unit = _unit_of(session, name)
    layouts = _Layouts(session, name)
    if every is None:
        after = None
        if cursor:
            ws_text, last_id = decode_cursor(cursor, 2)
            after = (_parse_time(ws_text), _int(last_id))
        rows = _fetch(session, asset_id, start, end, limit + 1, after)
        points = []
        for _, ws, digest, blob, quality in rows[:limit]:
            value, flags = _value(layouts, digest, blob, quality)
            points.append(Point(ws, value, flags))
        nxt = None
        if len(rows) > limit:
            last = rows[limit - 1]
            nxt = encode_cursor(last[1].isoformat(), last[0])
        return History(asset_id, name, unit, points, nxt)

    width = parse_every(every)
    lo = start
    if cursor:
        (after_text,) = decode_cursor(cursor, 1)
        lo = max(start, _parse_time(after_text) + width)
    first = _EPOCH + ((lo - _EPOCH) // width) * width
    acc: dict[int, list[float]] = {}
    flagged: dict[int, int] = {}
    for _, ws, digest, blob, quality in _fetch(session, asset_id, max(lo, start), end,
                                               MAX_RANGE_ROWS):  # fmt: skip
        value, flags = _value(layouts, digest, blob, quality)
        if value is None:
            continue
        k = (ws - first) // width
        bucket = acc.get(k)
        if bucket is None:
            acc[k] = [value]
        else:
            bucket.append(value)
        if flags:
            flagged[k] = flagged.get(k, 0) + 1
    keys = sorted(acc)
    buckets = [
        Bucket(
            start=first + k * width,
            count=len(acc[k]),
            flagged=flagged.get(k, 0),
            mean=math.fsum(acc[k]) / len(acc[k]),
            min=min(acc[k]),
            max=max(acc[k]),
        )
        for k in keys[:limit]
    ]
    nxt = encode_cursor(buckets[-1].start.isoformat()) if len(keys) > limit else None
    return History(asset_id, name, unit, buckets, nxt)


def _value(
    layouts: _Layouts, digest: str, blob: bytes, quality: dict[str, Any] | None
) -> tuple[float | None, tuple[str, ...]]:
    pos = layouts.position(digest)
    if pos is None:
        return None, ()
    index, _, channel = pos
    (v,) = _F32.unpack_from(blob, 4 * index)
    flags: tuple[str, ...] = ()
    if quality and channel in quality:
        flags = tuple(quality[channel].get("flags", ()))
    return (None if v != v else v), flags  # NaN: not computed


def _int(text: Any) -> int:
    try:
        return int(text)
    except (TypeError, ValueError):
        raise InvalidInputError("cursor is not valid; pass next_cursor back unchanged") from None


def _parse_time(text: Any) -> datetime:
    try:
        value = datetime.fromisoformat(str(text))
    except ValueError:
        raise InvalidInputError("cursor is not valid; pass next_cursor back unchanged") from None
    return value if value.tzinfo else value.replace(tzinfo=UTC)
