"""Initial tables: sites, gateways, assets, layouts, messages, quarantine, alarms, keys.

Revision ID: 0001
Revises:
Create Date: 2026-12-02 10:00:20.552480
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0001"
down_revision: str | None = None
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "api_keys",
        sa.Column("key_id", sa.String(length=16), nullable=False),
        sa.Column("name", sa.String(length=100), nullable=False),
        sa.Column("secret_sha256", sa.String(length=64), nullable=False),
        sa.Column("scopes", sa.String(length=64), nullable=False),
        sa.Column("sites", sa.Text(), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("revoked_at", sa.DateTime(timezone=True), nullable=True),
        sa.PrimaryKeyConstraint("key_id", name=op.f("pk_api_keys")),
    )
    op.create_table(
        "assets",
        sa.Column("asset_id", sa.String(length=64), nullable=False),
        sa.Column("site_id", sa.String(length=64), nullable=False),
        sa.Column("gateway_id", sa.String(length=64), nullable=True),
        sa.Column("asset_class", sa.String(length=64), nullable=False),
        sa.Column("description", sa.String(length=500), nullable=False),
        sa.Column("registered_at", sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint("asset_id", name=op.f("pk_assets")),
    )
    with op.batch_alter_table("assets", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_assets_site_id"), ["site_id"], unique=False)

    op.create_table(
        "drop_reports",
        sa.Column(
            "id",
            sa.BigInteger().with_variant(sa.Integer(), "sqlite"),
            autoincrement=True,
            nullable=False,
        ),
        sa.Column("message_id", sa.Uuid(), nullable=False),
        sa.Column("gateway_id", sa.String(length=64), nullable=False),
        sa.Column("site_id", sa.String(length=64), nullable=False),
        sa.Column("at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("dropped_count", sa.BigInteger(), nullable=False),
        sa.Column("body", sa.JSON(), nullable=False),
        sa.Column("received_at", sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_drop_reports")),
        sa.UniqueConstraint("message_id", name=op.f("uq_drop_reports_message_id")),
    )
    with op.batch_alter_table("drop_reports", schema=None) as batch_op:
        batch_op.create_index(
            batch_op.f("ix_drop_reports_gateway_id"), ["gateway_id"], unique=False
        )

    op.create_table(
        "edge_alarms",
        sa.Column(
            "id",
            sa.BigInteger().with_variant(sa.Integer(), "sqlite"),
            autoincrement=True,
            nullable=False,
        ),
        sa.Column("message_id", sa.Uuid(), nullable=False),
        sa.Column("gateway_id", sa.String(length=64), nullable=False),
        sa.Column("site_id", sa.String(length=64), nullable=False),
        sa.Column("asset_id", sa.String(length=64), nullable=False),
        sa.Column("raised_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("kind", sa.String(length=32), nullable=False),
        sa.Column("cleared", sa.Boolean(), nullable=False),
        sa.Column("body", sa.JSON(), nullable=False),
        sa.Column("received_at", sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_edge_alarms")),
        sa.UniqueConstraint("message_id", name=op.f("uq_edge_alarms_message_id")),
    )
    with op.batch_alter_table("edge_alarms", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_edge_alarms_asset_id"), ["asset_id"], unique=False)

    op.create_table(
        "gateways",
        sa.Column("gateway_id", sa.String(length=64), nullable=False),
        sa.Column("site_id", sa.String(length=64), nullable=False),
        sa.Column("state", sa.String(length=16), nullable=True),
        sa.Column("state_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("last_seen_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("last_sequence", sa.BigInteger(), nullable=True),
        sa.Column("agent_version", sa.String(length=32), nullable=True),
        sa.Column("last_status", sa.JSON(), nullable=True),
        sa.PrimaryKeyConstraint("gateway_id", name=op.f("pk_gateways")),
    )
    op.create_table(
        "idempotency_records",
        sa.Column("key_id", sa.String(length=16), nullable=False),
        sa.Column("idempotency_key", sa.String(length=200), nullable=False),
        sa.Column("request_sha256", sa.String(length=64), nullable=False),
        sa.Column("status_code", sa.Integer(), nullable=False),
        sa.Column("response", sa.JSON(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint("key_id", "idempotency_key", name=op.f("pk_idempotency_records")),
    )
    op.create_table(
        "layouts",
        sa.Column("digest", sa.String(length=16), nullable=False),
        sa.Column("body", sa.JSON(), nullable=False),
        sa.Column("first_gateway_id", sa.String(length=64), nullable=True),
        sa.Column("first_seen_at", sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint("digest", name=op.f("pk_layouts")),
    )
    op.create_table(
        "quarantine",
        sa.Column(
            "id",
            sa.BigInteger().with_variant(sa.Integer(), "sqlite"),
            autoincrement=True,
            nullable=False,
        ),
        sa.Column("fingerprint", sa.String(length=64), nullable=False),
        sa.Column("received_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("source", sa.String(length=8), nullable=False),
        sa.Column("topic", sa.String(length=512), nullable=True),
        sa.Column("reason", sa.String(length=32), nullable=False),
        sa.Column("detail", sa.Text(), nullable=False),
        sa.Column("payload", sa.LargeBinary(), nullable=False),
        sa.Column("site_id", sa.String(length=64), nullable=True),
        sa.Column("gateway_id", sa.String(length=64), nullable=True),
        sa.Column("asset_id", sa.String(length=64), nullable=True),
        sa.Column("message_id", sa.Uuid(), nullable=True),
        sa.Column("sequence", sa.BigInteger(), nullable=True),
        sa.Column("layout_digest", sa.String(length=16), nullable=True),
        sa.Column("attempts", sa.Integer(), nullable=False),
        sa.Column("resolved_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("resolution", sa.String(length=16), nullable=True),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_quarantine")),
        sa.UniqueConstraint("fingerprint", name=op.f("uq_quarantine_fingerprint")),
    )
    with op.batch_alter_table("quarantine", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_quarantine_reason"), ["reason"], unique=False)

    op.create_table(
        "sites",
        sa.Column("site_id", sa.String(length=64), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint("site_id", name=op.f("pk_sites")),
    )
    op.create_table(
        "messages",
        sa.Column(
            "id",
            sa.BigInteger().with_variant(sa.Integer(), "sqlite"),
            autoincrement=True,
            nullable=False,
        ),
        sa.Column("message_id", sa.Uuid(), nullable=False),
        sa.Column("gateway_id", sa.String(length=64), nullable=False),
        sa.Column("sequence", sa.BigInteger(), nullable=False),
        sa.Column("site_id", sa.String(length=64), nullable=False),
        sa.Column("asset_id", sa.String(length=64), nullable=False),
        sa.Column("window_start", sa.DateTime(timezone=True), nullable=False),
        sa.Column("window_s", sa.Float(), nullable=False),
        sa.Column("clock_sync", sa.String(length=16), nullable=False),
        sa.Column("shaft_speed_hz", sa.Float(), nullable=True),
        sa.Column("shaft_speed_source", sa.String(length=16), nullable=True),
        sa.Column("load_fraction", sa.Float(), nullable=True),
        sa.Column("flow_m3_per_h", sa.Float(), nullable=True),
        sa.Column("suction_pressure_kpa", sa.Float(), nullable=True),
        sa.Column("fluid_temperature_c", sa.Float(), nullable=True),
        sa.Column("quality", sa.JSON(), nullable=True),
        sa.Column("layout_digest", sa.String(length=16), nullable=False),
        sa.Column("values_f32", sa.LargeBinary(), nullable=False),
        sa.Column("received_at", sa.DateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(
            ["asset_id"], ["assets.asset_id"], name=op.f("fk_messages_asset_id_assets")
        ),
        sa.ForeignKeyConstraint(
            ["layout_digest"], ["layouts.digest"], name=op.f("fk_messages_layout_digest_layouts")
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_messages")),
        sa.UniqueConstraint("gateway_id", "sequence", name=op.f("uq_messages_gateway_id_sequence")),
        sa.UniqueConstraint("message_id", name=op.f("uq_messages_message_id")),
    )
    with op.batch_alter_table("messages", schema=None) as batch_op:
        batch_op.create_index(
            "ix_messages_asset_id_window_start", ["asset_id", "window_start"], unique=False
        )


def downgrade() -> None:
    with op.batch_alter_table("messages", schema=None) as batch_op:
        batch_op.drop_index("ix_messages_asset_id_window_start")

    op.drop_table("messages")
    op.drop_table("sites")
    with op.batch_alter_table("quarantine", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_quarantine_reason"))

    op.drop_table("quarantine")
    op.drop_table("layouts")
    op.drop_table("idempotency_records")
    op.drop_table("gateways")
    with op.batch_alter_table("edge_alarms", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_edge_alarms_asset_id"))

    op.drop_table("edge_alarms")
    with op.batch_alter_table("drop_reports", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_drop_reports_gateway_id"))

    op.drop_table("drop_reports")
    with op.batch_alter_table("assets", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_assets_site_id"))

    op.drop_table("assets")
    op.drop_table("api_keys")
