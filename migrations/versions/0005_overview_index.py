"""Overview index: shots by (campaign_id, id), so the latest shot of a campaign (the live
cursor, the key of the cached counts) is one index seek on every feed and poll.

Revision ID: 0005_overview_index
Revises: 0004_alert_targets
Create Date: 2026-12-02
"""

from __future__ import annotations

from alembic import op

revision = "0005_overview_index"
down_revision = "0004_alert_targets"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_index("ix_shots_campaign_id_id", "shots", ["campaign_id", "id"])


def downgrade() -> None:
    op.drop_index("ix_shots_campaign_id_id", table_name="shots")
