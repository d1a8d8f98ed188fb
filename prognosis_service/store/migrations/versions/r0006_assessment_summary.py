"""The fleet view's per-asset summary beside the full assessment result.

``asset_assessments.summary`` holds the few fields of ``result`` the fleet view lists (and the
fitted model's state, for the probability within a chosen horizon), so listing a fleet reads
about a kilobyte per asset instead of the whole result with its indicator table (about 6 kB).
Rows assessed before this revision have no summary; the view falls back to their result until
the assessor next writes them.

Revision ID: 0006
Revises: 0005
Create Date: 2026-12-03
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0006"
down_revision: str | None = "0005"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.add_column("asset_assessments", sa.Column("summary", sa.JSON(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("asset_assessments") as batch:
        batch.drop_column("summary")
