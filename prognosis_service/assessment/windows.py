"""Stored indicator messages as windows: decoded values, operating point and quality verdict."""

from __future__ import annotations

import uuid
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any

import numpy as np
from numpy.typing import NDArray
from sqlalchemy import and_, or_, select
from sqlalchemy.orm import Session

from prognosis_service.store.models import LayoutRow, MessageRow
from shared_schema import IndicatorLayout, QualityFlag

__all__ = ["Window", "WindowKey", "after_key", "before_key", "load_windows", "names_of"]

WindowKey = tuple[datetime, uuid.UUID]
"""The order of windows everywhere: window start, then message id (so results do not depend on
which consumer stored a message first)."""

# A flag that says the channel's values cannot be trusted; spikes_removed is a repair the gateway
# already made, so the window stays usable.
_BAD_FLAGS = frozenset(f.value for f in QualityFlag) - {QualityFlag.SPIKES_REMOVED.value}

_NAMES: dict[str, tuple[tuple[str, ...], tuple[str, ...]]] = {}  # digest -> (names, units)


@dataclass(frozen=True, slots=True)
class Window:
    """One stored message, decoded.

    ``values`` are in the order of ``names`` (NaN: not computed). ``excluded_reason`` is None for
    a usable window, else the plain-words reason it is left out of the assessment.
    """

    row_id: int
    message_id: uuid.UUID
    window_start: datetime
    shaft_speed_hz: float | None
    load_fraction: float | None
    quality: dict[str, Any] | None
    names: tuple[str, ...]
    units: tuple[str, ...]
    values: NDArray

    @property
    def key(self) -> WindowKey:
        return (self.window_start, self.message_id)

    @property
    def operating(self) -> tuple[float, float]:
        return (
            float("nan") if self.shaft_speed_hz is None else float(self.shaft_speed_hz),
            float("nan") if self.load_fraction is None else float(self.load_fraction),
        )

    @property
    def bad_channels(self) -> dict[str, list[str]]:
        """Channels with flags that make their values untrustworthy, and those flags."""
        out: dict[str, list[str]] = {}
        for channel, entry in (self.quality or {}).items():
            flags = sorted(set(entry.get("flags", ())) & _BAD_FLAGS)
            if flags:
                out[channel] = flags
        return out

    @property
    def excluded_reason(self) -> str | None:
        bad = self.bad_channels
        if bad:
            parts = ", ".join(f"{ch} {' and '.join(fl)}" for ch, fl in sorted(bad.items()))
            return f"quality flags: {parts}"
        if self.shaft_speed_hz is None or self.load_fraction is None:
            return "no operating point: shaft speed or load missing"
        return None

    def by_name(self) -> dict[str, float | None]:
        return {
            n: (None if not np.isfinite(v) else float(v))
            for n, v in zip(self.names, self.values, strict=True)
        }

    def aligned(self, names: Sequence[str]) -> NDArray:
        """Values in the order of ``names`` (NaN for indicators this window lacks)."""
        if tuple(names) == self.names:
            return self.values
        index = {n: i for i, n in enumerate(self.names)}
        return np.array(
            [self.values[index[n]] if n in index else np.nan for n in names], dtype=float
        )


def names_of(session: Session, digest: str) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """Indicator names and units of a layout (cached: layouts are content-addressed)."""
    found = _NAMES.get(digest)
    if found is None:
        body = session.scalar(select(LayoutRow.body).where(LayoutRow.digest == digest))
        if body is None:
            return (), ()
        layout = IndicatorLayout.model_validate(body)
        found = (
            tuple(s.name for s in layout.indicators),
            tuple(s.unit for s in layout.indicators),
        )
        if len(_NAMES) < 10_000:
            _NAMES[digest] = found
    return found


def after_key(key: WindowKey) -> Any:
    ws, mid = key
    return or_(
        MessageRow.window_start > ws,
        and_(MessageRow.window_start == ws, MessageRow.message_id > mid),
    )


def before_key(key: WindowKey) -> Any:
    ws, mid = key
    return or_(
        MessageRow.window_start < ws,
        and_(MessageRow.window_start == ws, MessageRow.message_id < mid),
    )


_COLUMNS = (
    MessageRow.id,
    MessageRow.message_id,
    MessageRow.window_start,
    MessageRow.shaft_speed_hz,
    MessageRow.load_fraction,
    MessageRow.quality,
    MessageRow.layout_digest,
    MessageRow.values_f32,
)


def load_windows(
    session: Session, asset_id: str, *conditions: Any, limit: int | None = None
) -> list[Window]:
    """The asset's windows matching ``conditions``, in (window_start, message_id) order."""
    stmt = (
        select(*_COLUMNS)
        .where(MessageRow.asset_id == asset_id, *conditions)
        .order_by(MessageRow.window_start, MessageRow.message_id)
    )
    if limit is not None:
        stmt = stmt.limit(limit)
    out = []
    for row in session.execute(stmt):
        names, units = names_of(session, row.layout_digest)
        values = np.frombuffer(row.values_f32, dtype="<f4").astype(float)
        if values.size != len(names):
            names, units = tuple(f"?{i}" for i in range(values.size)), ("",) * values.size
        out.append(
            Window(
                row_id=int(row.id),
                message_id=row.message_id,
                window_start=row.window_start,
                shaft_speed_hz=row.shaft_speed_hz,
                load_fraction=row.load_fraction,
                quality=row.quality,
                names=names,
                units=units,
                values=values,
            )
        )
    return out
