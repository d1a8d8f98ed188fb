"""Tables of the alert engine: alerts, rule condition state, webhook subscriptions, deliveries."""

from __future__ import annotations

import uuid
from datetime import datetime
from typing import Any

from sqlalchemy import JSON, ForeignKey, Index, Integer, String, Text, UniqueConstraint
from sqlalchemy.orm import Mapped, mapped_column

from prognosis_service.store.models import Base, BigId

__all__ = [
    "AlertConditionRow",
    "AlertRow",
    "AlertRulesDocument",
    "DeliveryRow",
    "SubscriptionRow",
]


class AlertRow(Base):
    """Every alert ever raised, with its lifecycle (the engine's live ones and the history)."""

    __tablename__ = "alerts"
    __table_args__ = (
        Index("ix_alerts_site_id_state", "site_id", "state"),
        Index("ix_alerts_asset_id_opened_at", "asset_id", "opened_at"),
    )

    alert_id: Mapped[uuid.UUID] = mapped_column(primary_key=True)
    site_id: Mapped[str] = mapped_column(String(64))
    asset_id: Mapped[str | None] = mapped_column(String(64))
    gateway_id: Mapped[str | None] = mapped_column(String(64))
    kind: Mapped[str] = mapped_column(String(64))
    qualifier: Mapped[str] = mapped_column(String(64), default="")
    severity: Mapped[str] = mapped_column(String(16))
    state: Mapped[str] = mapped_column(String(16))  # open | acknowledged | resolved
    opened_at: Mapped[datetime]
    summary: Mapped[str] = mapped_column(String(500))
    detail: Mapped[dict[str, Any]]
    acknowledged_at: Mapped[datetime | None]
    acknowledged_by: Mapped[str | None] = mapped_column(String(100))
    resolved_at: Mapped[datetime | None]
    resolved_by: Mapped[str | None] = mapped_column(String(100))
    resolution: Mapped[str | None] = mapped_column(String(200))
    revision: Mapped[int] = mapped_column(Integer)
    updated_at: Mapped[datetime]


class AlertConditionRow(Base):
    """The engine's memory of one condition key (``site/target/kind/qualifier``)."""

    __tablename__ = "alert_conditions"

    condition_key: Mapped[str] = mapped_column(String(300), primary_key=True)
    site_id: Mapped[str] = mapped_column(String(64), index=True)
    body: Mapped[dict[str, Any]]
    updated_at: Mapped[datetime]


class SubscriptionRow(Base):
    """A webhook subscription. The secret is sealed (``signing.SecretSealer``), never plain."""

    __tablename__ = "webhook_subscriptions"

    subscription_id: Mapped[uuid.UUID] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(100))
    url: Mapped[str] = mapped_column(String(2048))
    site_id: Mapped[str | None] = mapped_column(String(64))  # filter; NULL = every site
    asset_id: Mapped[str | None] = mapped_column(String(64))  # filter; NULL = every asset
    kinds: Mapped[list[str] | None] = mapped_column(JSON)  # filter; NULL = every kind
    min_severity: Mapped[str] = mapped_column(String(16))
    secret_sealed: Mapped[str] = mapped_column(Text)
    previous_secret_sealed: Mapped[str | None] = mapped_column(Text)
    previous_secret_expires_at: Mapped[datetime | None]
    secret_rotated_at: Mapped[datetime | None]
    status: Mapped[str] = mapped_column(String(16), index=True)  # active | paused | gone
    paused_at: Mapped[datetime | None]
    pause_reason: Mapped[str | None] = mapped_column(Text)
    last_status: Mapped[int | None] = mapped_column(Integer)
    last_error: Mapped[str | None] = mapped_column(Text)
    last_attempt_at: Mapped[datetime | None]
    last_delivered_at: Mapped[datetime | None]
    consecutive_failures: Mapped[int] = mapped_column(Integer, default=0)
    created_at: Mapped[datetime]


class DeliveryRow(Base):
    """One event for one subscription; written before the first attempt, so none is lost."""

    __tablename__ = "webhook_deliveries"
    __table_args__ = (
        UniqueConstraint("event_id", "subscription_id"),
        Index("ix_webhook_deliveries_state_next_attempt_at", "state", "next_attempt_at"),
    )

    delivery_id: Mapped[int] = mapped_column(BigId, primary_key=True, autoincrement=True)
    event_id: Mapped[uuid.UUID]
    subscription_id: Mapped[uuid.UUID] = mapped_column(
        ForeignKey("webhook_subscriptions.subscription_id", ondelete="CASCADE"), index=True
    )
    event_type: Mapped[str] = mapped_column(String(64))
    body: Mapped[str] = mapped_column(Text)  # the CloudEvent JSON, byte-for-byte what is sent
    state: Mapped[str] = mapped_column(String(16))  # pending|in_flight|delivered|failed|cancelled
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    next_attempt_at: Mapped[datetime]
    lease_expires_at: Mapped[datetime | None]
    claimed_by: Mapped[str | None] = mapped_column(String(64))
    claim_token: Mapped[str | None] = mapped_column(String(32))
    last_status: Mapped[int | None] = mapped_column(Integer)
    last_error: Mapped[str | None] = mapped_column(Text)
    last_attempt_at: Mapped[datetime | None]
    delivered_at: Mapped[datetime | None]
    created_at: Mapped[datetime]


class AlertRulesDocument(Base):
    """Alert rules set through the API (admin); they override the rules file while present.

    One row per version; the newest is in force. Keeping the old versions shows who changed
    what and when, and lets an operator go back.
    """

    __tablename__ = "alert_rules_documents"

    version: Mapped[int] = mapped_column(Integer, primary_key=True, autoincrement=True)
    body: Mapped[dict[str, Any]]
    set_by: Mapped[str] = mapped_column(String(100))
    set_at: Mapped[datetime]
