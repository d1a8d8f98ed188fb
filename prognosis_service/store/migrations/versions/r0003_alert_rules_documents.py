"""Alert rules set through the API: alert_rules_documents.

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-02
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0003"
down_revision: str | None = "0002"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "alert_rules_documents",
        sa.Column("version", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("body", sa.JSON(), nullable=False),
        sa.Column("set_by", sa.String(length=100), nullable=False),
        sa.Column("set_at", sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint("version", name=op.f("pk_alert_rules_documents")),
    )


def downgrade() -> None:
    op.drop_table("alert_rules_documents")
