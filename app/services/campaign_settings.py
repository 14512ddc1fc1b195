"""Changing a campaign's model settings: a JSON merge patch of its overrides, a new
settings version and the queued re-evaluation, in one transaction."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from sqlalchemy.orm import Session

from app.database import begin_write, run_write
from app.errors import InvalidInput
from app.services import reevaluation
from app.services.campaigns import (
    campaign_lock,
    check_overrides,
    default_settings,
    merge_patch,
    require_campaign,
    settings_problems,
)
from app.store import audit
from app.store import campaigns as campaign_store
from app.tables import Campaign, Job


def change_settings(session: Session, slug: str, patch: Mapping[str, Any], actor: str) -> tuple[Campaign, Job]:
    """Apply a merge patch to the campaign's overrides, bump its version, queue re-evaluation."""
    problems = settings_problems(patch, default_settings())
    if problems:
        raise InvalidInput(problems)

    def work() -> tuple[Campaign, Job]:
        # Same lock as ingest: no shot is evaluated with the old settings after the bump.
        begin_write(session, campaign_lock(slug))
        campaign = require_campaign(session, slug)
        new = merge_patch(campaign.model_settings or {}, patch)
        check_overrides(new)
        version = campaign_store.set_model_settings(session, campaign.id, new)
        audit.record(
            session,
            actor,
            "campaign.settings",
            campaign_slug=slug,
            target=slug,
            detail={"patch": dict(patch), "settings_version": version},
        )
        job = reevaluation.queue(session, campaign.id, version, actor)
        session.flush()
        session.refresh(campaign)
        return campaign, job

    return run_write(session, work)
