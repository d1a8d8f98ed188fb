"""Assessment tables: maintenance_events, asset_assessments, health_points.

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-02
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0004"
down_revision: str | None = "0003"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

_ID = sa.BigInteger().with_variant(sa.Integer(), "sqlite")


def _time(name: str, nullable: bool) -> sa.Column:
    return sa.Column(name, sa.DateTime(timezone=True), nullable=nullable)


def upgrade() -> None:
    op.create_table(
        "asset_assessments",
        sa.Column("asset_id", sa.String(length=64), nullable=False),
        sa.Column("status", sa.String(length=24), nullable=False),
        sa.Column("message", sa.Text(), nullable=False),
        sa.Column("cursor_id", sa.BigInteger(), nullable=False),
        _time("last_window_start", True),
        sa.Column("last_message_id", sa.Uuid(), nullable=True),
        sa.Column("backlog", sa.Boolean(), nullable=False),
        _time("segment_start", True),
        sa.Column("events_digest", sa.String(length=64), nullable=False),
        sa.Column("lease_owner", sa.String(length=64), nullable=True),
        _time("lease_until", True),
        sa.Column("state", sa.JSON(), nullable=True),
        sa.Column("result", sa.JSON(), nullable=True),
        _time("as_of", True),
        _time("updated_at", True),
        sa.ForeignKeyConstraint(
            ["asset_id"], ["assets.asset_id"], name=op.f("fk_asset_assessments_asset_id_assets")
        ),
        sa.PrimaryKeyConstraint("asset_id", name=op.f("pk_asset_assessments")),
    )
    op.create_table(
        "health_points",
        sa.Column("id", _ID, autoincrement=True, nullable=False),
        sa.Column("asset_id", sa.String(length=64), nullable=False),
        sa.Column("message_row_id", sa.BigInteger(), nullable=False),
        sa.Column("message_id", sa.Uuid(), nullable=False),
        _time("window_start", False),
        _time("segment_start", False),
        sa.Column("regime", sa.Integer(), nullable=True),
        sa.Column("anomaly_score", sa.Float(), nullable=True),
        sa.Column("control_limit", sa.Float(), nullable=True),
        sa.Column("health", sa.JSON(), nullable=True),
        sa.Column("excluded", sa.Boolean(), nullable=False),
        sa.Column("excluded_reason", sa.String(length=200), nullable=True),
        sa.ForeignKeyConstraint(
            ["asset_id"], ["assets.asset_id"], name=op.f("fk_health_points_asset_id_assets")
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_health_points")),
    )
    op.create_index(
        "ix_health_points_asset_id_window_start",
        "health_points",
        ["asset_id", "window_start"],
        unique=False,
    )
    op.create_table(
        "maintenance_events",
        sa.Column("event_id", sa.Uuid(), nullable=False),
        sa.Column("asset_id", sa.String(length=64), nullable=False),
        _time("at", False),
        sa.Column("kind", sa.String(length=16), nullable=False),
        sa.Column("component", sa.String(length=64), nullable=False),
        sa.Column("failure_mode", sa.String(length=32), nullable=True),
        sa.Column("notes", sa.Text(), nullable=False),
        sa.Column("performed_by", sa.String(length=100), nullable=False),
        _time("recorded_at", False),
        sa.Column("recorded_by", sa.String(length=16), nullable=True),
        sa.ForeignKeyConstraint(
            ["asset_id"], ["assets.asset_id"], name=op.f("fk_maintenance_events_asset_id_assets")
        ),
        sa.PrimaryKeyConstraint("event_id", name=op.f("pk_maintenance_events")),
    )
    op.create_index(
        "ix_maintenance_events_asset_id_at",
        "maintenance_events",
        ["asset_id", "at"],
        unique=False,
    )


def downgrade() -> None:
    op.drop_index("ix_maintenance_events_asset_id_at", table_name="maintenance_events")
    op.drop_table("maintenance_events")
    op.drop_index("ix_health_points_asset_id_window_start", table_name="health_points")
    op.drop_table("health_points")
    op.drop_table("asset_assessments")
