"""Tables of the assessment: maintenance events, per-asset assessment state, health points."""

from __future__ import annotations

import uuid
from datetime import datetime
from typing import Any

from sqlalchemy import BigInteger, Boolean, Float, ForeignKey, Index, Integer, String, Text
from sqlalchemy.orm import Mapped, mapped_column

from prognosis_service.store.models import Base, BigId

__all__ = ["AssetAssessment", "HealthPointRow", "MaintenanceEventRow"]


class MaintenanceEventRow(Base):
    """An inspection, repair, replacement or failure recorded by an operator."""

    __tablename__ = "maintenance_events"
    __table_args__ = (Index("ix_maintenance_events_asset_id_at", "asset_id", "at"),)

    event_id: Mapped[uuid.UUID] = mapped_column(primary_key=True)
    asset_id: Mapped[str] = mapped_column(ForeignKey("assets.asset_id"))
    at: Mapped[datetime]
    kind: Mapped[str] = mapped_column(String(16))  # inspection | repair | replacement | failure
    component: Mapped[str] = mapped_column(String(64), default="")
    failure_mode: Mapped[str | None] = mapped_column(String(32))
    notes: Mapped[str] = mapped_column(Text, default="")
    performed_by: Mapped[str] = mapped_column(String(100), default="")
    recorded_at: Mapped[datetime]
    recorded_by: Mapped[str | None] = mapped_column(String(16))  # API key id


class AssetAssessment(Base):
    """One asset's assessment: processing cursors, lease, fitted state and the latest result.

    ``cursor_id`` is the highest message row id looked at; ``last_window_start`` and
    ``last_message_id`` are the (window_start, message_id) key of the last window processed in
    order. ``state`` holds the fitted estimators (``to_state()`` of each) and ``result`` the
    latest summary (forecast model, diagnosis) the API serves.
    """

    __tablename__ = "asset_assessments"

    asset_id: Mapped[str] = mapped_column(ForeignKey("assets.asset_id"), primary_key=True)
    status: Mapped[str] = mapped_column(String(24), default="no_baseline")
    message: Mapped[str] = mapped_column(Text, default="")
    cursor_id: Mapped[int] = mapped_column(BigInteger, default=0)
    last_window_start: Mapped[datetime | None]
    last_message_id: Mapped[uuid.UUID | None]
    backlog: Mapped[bool] = mapped_column(Boolean, default=False)
    segment_start: Mapped[datetime | None]
    events_digest: Mapped[str] = mapped_column(String(64), default="")
    lease_owner: Mapped[str | None] = mapped_column(String(64))
    lease_until: Mapped[datetime | None]
    state: Mapped[dict[str, Any] | None]
    result: Mapped[dict[str, Any] | None]
    summary: Mapped[dict[str, Any] | None]  # what the fleet view lists: fleet_summary(result)
    as_of: Mapped[datetime | None]
    updated_at: Mapped[datetime | None]


class HealthPointRow(Base):
    """One window's health: regime, T² and its limit, health indices, or why it was excluded."""

    __tablename__ = "health_points"
    __table_args__ = (Index("ix_health_points_asset_id_window_start", "asset_id", "window_start"),)

    id: Mapped[int] = mapped_column(BigId, primary_key=True, autoincrement=True)
    asset_id: Mapped[str] = mapped_column(ForeignKey("assets.asset_id"))
    message_row_id: Mapped[int] = mapped_column(BigInteger)
    message_id: Mapped[uuid.UUID]
    window_start: Mapped[datetime]
    segment_start: Mapped[datetime]
    regime: Mapped[int | None] = mapped_column(Integer)
    anomaly_score: Mapped[float | None] = mapped_column(Float)
    control_limit: Mapped[float | None] = mapped_column(Float)
    health: Mapped[dict[str, Any] | None]  # {failure mode: health index}
    excluded: Mapped[bool] = mapped_column(Boolean, default=False)
    excluded_reason: Mapped[str | None] = mapped_column(String(200))
