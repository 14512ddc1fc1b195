"""Audit index: entries by (campaign_slug, id), so a campaign's latest audited write (one of
the overview's change marks) is one index seek on every feed and poll.

Revision ID: 0006_audit_campaign_index
Revises: 0005_overview_index
Create Date: 2026-12-02
"""

from __future__ import annotations

from alembic import op

revision = "0006_audit_campaign_index"
down_revision = "0005_overview_index"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_index("ix_audit_trail_campaign_id", "audit_trail", ["campaign_slug", "id"])


def downgrade() -> None:
    op.drop_index("ix_audit_trail_campaign_id", table_name="audit_trail")
