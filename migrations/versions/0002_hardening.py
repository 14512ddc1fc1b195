"""Hardening: token expiry and last use, browser sessions, job leases and checkpoints,
the fields a shot left to their defaults.

Revision ID: 0002_hardening
Revises: 0001
Create Date: 2026-12-01
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0002_hardening"
down_revision = "0001"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("api_tokens", schema=None) as batch_op:
        batch_op.add_column(sa.Column("expires_at", sa.DateTime(timezone=True), nullable=True))
        batch_op.add_column(sa.Column("last_used_at", sa.DateTime(timezone=True), nullable=True))
        batch_op.add_column(sa.Column("created_by", sa.String(length=200), nullable=False, server_default=""))

    op.create_table(
        "browser_sessions",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("session_sha256", sa.String(length=64), nullable=False),
        sa.Column("token_id", sa.Integer(), nullable=False),
        sa.Column("csrf_token", sa.String(length=64), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("expires_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("last_seen_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("revoked_at", sa.DateTime(timezone=True), nullable=True),
        sa.ForeignKeyConstraint(["token_id"], ["api_tokens.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("session_sha256"),
    )
    with op.batch_alter_table("browser_sessions", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_browser_sessions_token_id"), ["token_id"], unique=False)

    with op.batch_alter_table("jobs", schema=None) as batch_op:
        batch_op.add_column(sa.Column("submitted_by", sa.String(length=200), nullable=False, server_default=""))
        batch_op.add_column(sa.Column("submitter_token_id", sa.Integer(), nullable=True))
        batch_op.add_column(sa.Column("lease_owner", sa.String(length=200), nullable=True))
        batch_op.add_column(sa.Column("lease_expires_at", sa.DateTime(timezone=True), nullable=True))
        batch_op.add_column(sa.Column("heartbeat_at", sa.DateTime(timezone=True), nullable=True))
        batch_op.add_column(sa.Column("attempts", sa.Integer(), nullable=False, server_default="0"))
        batch_op.add_column(sa.Column("cancel_requested_at", sa.DateTime(timezone=True), nullable=True))
        batch_op.add_column(sa.Column("checkpoint", sa.LargeBinary(), nullable=True))
        batch_op.create_foreign_key(
            "fk_jobs_submitter_token_id", "api_tokens", ["submitter_token_id"], ["id"], ondelete="SET NULL"
        )
        batch_op.create_index("ix_jobs_state_created", ["state", "created_at"], unique=False)

    with op.batch_alter_table("evaluations", schema=None) as batch_op:
        batch_op.add_column(sa.Column("defaulted_fields", sa.JSON(), nullable=False, server_default="[]"))


def downgrade() -> None:
    with op.batch_alter_table("evaluations", schema=None) as batch_op:
        batch_op.drop_column("defaulted_fields")
    with op.batch_alter_table("jobs", schema=None) as batch_op:
        batch_op.drop_index("ix_jobs_state_created")
        batch_op.drop_constraint("fk_jobs_submitter_token_id", type_="foreignkey")
        for name in (
            "checkpoint",
            "cancel_requested_at",
            "attempts",
            "heartbeat_at",
            "lease_expires_at",
            "lease_owner",
            "submitter_token_id",
            "submitted_by",
        ):
            batch_op.drop_column(name)
    with op.batch_alter_table("browser_sessions", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_browser_sessions_token_id"))
    op.drop_table("browser_sessions")
    with op.batch_alter_table("api_tokens", schema=None) as batch_op:
        for name in ("created_by", "last_used_at", "expires_at"):
            batch_op.drop_column(name)
