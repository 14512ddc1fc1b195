"""Shot exclusion: a shot marked as a test or junk shot (when, why, by whom), kept and
left out of counts, charts and summaries.

Revision ID: 0003_shot_exclusion
Revises: 0002_hardening
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0003_shot_exclusion"
down_revision = "0002_hardening"
branch_labels = None
depends_on = None

_EXCLUDED = sa.text("excluded_at IS NOT NULL")


def upgrade() -> None:
    with op.batch_alter_table("shots", schema=None) as batch_op:
        batch_op.add_column(sa.Column("excluded_at", sa.DateTime(timezone=True), nullable=True))
        batch_op.add_column(sa.Column("excluded_reason", sa.Text(), nullable=True))
        batch_op.add_column(sa.Column("excluded_by", sa.String(length=200), nullable=True))
    op.create_index(
        "ix_shots_excluded",
        "shots",
        ["campaign_id", "id"],
        unique=False,
        sqlite_where=_EXCLUDED,
        postgresql_where=_EXCLUDED,
    )


def downgrade() -> None:
    op.drop_index("ix_shots_excluded", table_name="shots")
    with op.batch_alter_table("shots", schema=None) as batch_op:
        for name in ("excluded_by", "excluded_reason", "excluded_at"):
            batch_op.drop_column(name)
