"""A covering index for the indicator-history query, replacing (asset_id, window_start).

PostgreSQL: ``(asset_id, window_start, id) INCLUDE (layout_digest, values_f32, quality)``;
SQLite has no ``INCLUDE``, so the same columns go into the key. See "History index" in
prognosis_service/store/models.py for the measurement and the price.

Revision ID: 0005
Revises: 0004
Create Date: 2026-12-02
"""

from __future__ import annotations

from collections.abc import Sequence

from alembic import op

revision: str = "0005"
down_revision: str | None = "0004"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

_KEY = ["asset_id", "window_start", "id"]
_COVERED = ["layout_digest", "values_f32", "quality"]


def upgrade() -> None:
    if op.get_bind().dialect.name == "postgresql":
        op.create_index("ix_messages_history", "messages", _KEY, postgresql_include=_COVERED)
    else:
        op.create_index("ix_messages_history_lite", "messages", _KEY + _COVERED)
    op.drop_index("ix_messages_asset_id_window_start", table_name="messages")


def downgrade() -> None:
    op.create_index("ix_messages_asset_id_window_start", "messages", ["asset_id", "window_start"])
    if op.get_bind().dialect.name == "postgresql":
        op.drop_index("ix_messages_history", table_name="messages")
    else:
        op.drop_index("ix_messages_history_lite", table_name="messages")
