"""Indicator history of one asset by name and time range, raw or downsampled into buckets."""

from __future__ import annotations

import math
import re
import struct
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from typing import Any

from sqlalchemy import and_, or_, select
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
    """
    if end <= start:
        raise InvalidInputError(f"end must be after start, got start={start} end={end}")
    unit = _unit_of(session, name)
    layouts = _Layouts(session, name)
    cols = (
        MessageRow.id,
        MessageRow.window_start,
        MessageRow.layout_digest,
        MessageRow.values_f32,
        MessageRow.quality,
    )
    base = (MessageRow.asset_id == asset_id, MessageRow.window_start < end)
    if every is None:
        stmt = select(*cols).where(*base, MessageRow.window_start >= start)
        if cursor:
            ws_text, last_id = decode_cursor(cursor, 2)
            ws = _parse_time(ws_text)
            stmt = stmt.where(
                or_(
                    MessageRow.window_start > ws,
                    and_(MessageRow.window_start == ws, MessageRow.id > int(last_id)),
                )
            )
        rows = (
            session.connection()
            .execute(stmt.order_by(MessageRow.window_start, MessageRow.id).limit(limit + 1))
            .all()
        )
        points = []
        for row in rows[:limit]:
            value, flags = _value(layouts, row.layout_digest, row.values_f32, row.quality)
            points.append(Point(row.window_start, value, flags))
        nxt = None
        if len(rows) > limit:
            last = rows[limit - 1]
            nxt = encode_cursor(last.window_start.isoformat(), last.id)
        return History(asset_id, name, unit, points, nxt)

    width = parse_every(every)
    lo = start
    if cursor:
        (after,) = decode_cursor(cursor, 1)
        lo = max(start, _parse_time(after) + width)
    first = _EPOCH + ((lo - _EPOCH) // width) * width
    rows = (
        session.connection()
        .execute(
            select(*cols)
            .where(*base, MessageRow.window_start >= max(lo, start))
            .order_by(MessageRow.window_start, MessageRow.id)
            .limit(MAX_RANGE_ROWS)
        )
        .all()
    )
    acc: dict[int, list[float]] = {}
    flagged: dict[int, int] = {}
    for row in rows:
        value, flags = _value(layouts, row.layout_digest, row.values_f32, row.quality)
        if value is None:
            continue
        k = (row.window_start - first) // width
        acc.setdefault(k, []).append(value)
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
    (v,) = struct.unpack_from("<f", blob, 4 * index)
    flags: tuple[str, ...] = ()
    if quality and channel in quality:
        flags = tuple(quality[channel].get("flags", ()))
    return (None if math.isnan(v) else v), flags


def _parse_time(text: Any) -> datetime:
    try:
        value = datetime.fromisoformat(str(text))
    except ValueError:
        raise InvalidInputError("cursor is not valid; pass next_cursor back unchanged") from None
    return value if value.tzinfo else value.replace(tzinfo=UTC)
