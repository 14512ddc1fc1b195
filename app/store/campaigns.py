"""Campaign rows."""

from __future__ import annotations

from typing import Any

from sqlalchemy import func, select, update
from sqlalchemy.orm import Session

from app.store.exclusions import counted
from app.tables import Campaign, Shot


def get_campaign(session: Session, slug: str) -> Campaign | None:
    return session.scalar(select(Campaign).where(Campaign.slug == slug))


def get_campaign_by_id(session: Session, campaign_id: int) -> Campaign | None:
    return session.get(Campaign, campaign_id)


def list_campaigns(session: Session) -> list[Campaign]:
    return list(session.scalars(select(Campaign).order_by(Campaign.created_at, Campaign.id)))


def shot_counts(session: Session) -> dict[int, int]:
    """Counted shots per campaign (excluded shots left out)."""
    rows = session.execute(select(Shot.campaign_id, func.count()).where(*counted(Shot.id)).group_by(Shot.campaign_id))
    return {cid: n for cid, n in rows}


def add_campaign(session: Session, campaign: Campaign) -> Campaign:
    session.add(campaign)
    session.flush()
    return campaign


def set_model_settings(session: Session, campaign_id: int, overrides: dict[str, Any]) -> int:
    """Store new overrides and bump settings_version; returns the new version."""
    session.execute(
        update(Campaign)
        .where(Campaign.id == campaign_id)
        .values(model_settings=overrides, settings_version=Campaign.settings_version + 1)
    )
    version = session.scalar(select(Campaign.settings_version).where(Campaign.id == campaign_id))
    assert version is not None
    return version
