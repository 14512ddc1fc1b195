"""Alerts: per-campaign notification targets, the log of their deliveries, and the instant
before which a queued job (a delivery waiting out its backoff) is not claimed.

Revision ID: 0004_alert_targets
Revises: 0003_shot_exclusion
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0004_alert_targets"
down_revision = "0003_shot_exclusion"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "alert_targets",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("campaign_id", sa.Integer(), nullable=False),
        sa.Column("url", sa.Text(), nullable=False),
        sa.Column("statuses", sa.JSON(), nullable=False),
        sa.Column("flags", sa.JSON(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("created_by", sa.String(length=200), nullable=False),
        sa.ForeignKeyConstraint(["campaign_id"], ["campaigns.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sqlite_autoincrement=True,
    )
    with op.batch_alter_table("alert_targets", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_alert_targets_campaign_id"), ["campaign_id"], unique=False)

    op.create_table(
        "alert_deliveries",
        sa.Column("id", sa.BigInteger().with_variant(sa.Integer(), "sqlite"), nullable=False),
        sa.Column("campaign_id", sa.Integer(), nullable=False),
        sa.Column("target_id", sa.Integer(), nullable=True),
        sa.Column("target_url", sa.Text(), nullable=False),
        sa.Column("job_id", sa.String(length=36), nullable=True),
        sa.Column("shot_id", sa.String(length=128), nullable=False),
        sa.Column("shot_revision", sa.Integer(), nullable=False),
        sa.Column("attempt", sa.Integer(), nullable=False),
        sa.Column("attempted_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("status_code", sa.Integer(), nullable=True),
        sa.Column("error", sa.Text(), nullable=False),
        sa.Column("outcome", sa.String(length=16), nullable=False),
        sa.Column("next_attempt_at", sa.DateTime(timezone=True), nullable=True),
        sa.ForeignKeyConstraint(["campaign_id"], ["campaigns.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["target_id"], ["alert_targets.id"], ondelete="SET NULL"),
        sa.PrimaryKeyConstraint("id"),
    )
    with op.batch_alter_table("alert_deliveries", schema=None) as batch_op:
        batch_op.create_index("ix_alert_deliveries_campaign_id", ["campaign_id", "id"], unique=False)

    with op.batch_alter_table("jobs", schema=None) as batch_op:
        batch_op.add_column(sa.Column("not_before", sa.DateTime(timezone=True), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("jobs", schema=None) as batch_op:
        batch_op.drop_column("not_before")
    with op.batch_alter_table("alert_deliveries", schema=None) as batch_op:
        batch_op.drop_index("ix_alert_deliveries_campaign_id")
    op.drop_table("alert_deliveries")
    with op.batch_alter_table("alert_targets", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_alert_targets_campaign_id"))
    op.drop_table("alert_targets")
