"""Campaigns: lookup, the writer lock, creation, and the checks of their model settings
(overrides of ``model.DEFAULT_SETTINGS``). Changing settings is ``campaign_settings``."""

from __future__ import annotations

import copy
import math
from collections.abc import Mapping
from datetime import UTC, datetime
from typing import Any

from sqlalchemy.orm import Session

import model
from app.database import begin_write, run_write
from app.errors import AlreadyExists, FieldProblem, InvalidInput, NotFound
from app.schemas import CampaignCreate, CampaignList, CampaignOut
from app.store import audit
from app.store import campaigns as campaign_store
from app.tables import Campaign


def campaign_lock(slug: str) -> str:
    """Writer lock name shared by ingest, corrections, settings changes and re-evaluation."""
    return f"campaign:{slug}"


def find_campaign(session: Session, slug: str) -> Campaign | None:
    return campaign_store.get_campaign(session, slug)


def require_campaign(session: Session, slug: str) -> Campaign:
    """The campaign, or NotFound naming it."""
    campaign = campaign_store.get_campaign(session, slug)
    if campaign is None:
        raise NotFound(f"campaign {slug!r}")
    return campaign


def default_settings() -> dict[str, Any]:
    return copy.deepcopy(dict(model.DEFAULT_SETTINGS))


def effective_settings(campaign: Campaign) -> dict[str, Any]:
    """The campaign's settings as the model uses them (defaults with overrides)."""
    return model.resolve_settings(campaign.model_settings or {})


def settings_problems(
    overrides: Mapping[str, Any], defaults: Mapping[str, Any], prefix: str = "settings"
) -> list[FieldProblem]:
    """Field by field: every override names a known setting and keeps its kind.

    The model's own checks (positive values, limit order) follow in ``check_overrides``.
    """
    problems: list[FieldProblem] = []
    for key, value in overrides.items():
        path = f"{prefix}.{key}"
        if key not in defaults:
            problems.append((path, "unknown setting"))
            continue
        default = defaults[key]
        if value is None:
            continue  # merge-patch null: back to the default
        if isinstance(default, Mapping):
            if not isinstance(value, Mapping):
                problems.append((path, "must be an object"))
            else:
                problems.extend(settings_problems(value, default, path))
        elif isinstance(default, bool):
            if not isinstance(value, bool):
                problems.append((path, "must be true or false"))
        elif isinstance(default, (int, float)):
            if isinstance(value, bool) or not isinstance(value, (int, float)):
                problems.append((path, "must be a number"))
            elif not math.isfinite(value):
                problems.append((path, "must be finite"))
        elif isinstance(default, str):
            if not isinstance(value, str):
                problems.append((path, "must be a string"))
        elif isinstance(default, (list, tuple)):
            if not isinstance(value, list):
                problems.append((path, "must be a list"))
    return problems


def override_problems(overrides: Mapping[str, Any], prefix: str = "settings") -> list[FieldProblem]:
    """Every problem of a whole set of overrides: kinds first, then the model's own checks."""
    problems = settings_problems(overrides, default_settings(), prefix)
    if not problems:
        try:
            model.resolve_settings(overrides)
        except model.SettingsError as exc:
            problems = [(f"{prefix}.{path}" if path != "settings" else prefix, reason) for path, reason in exc.problems]
    return problems


def check_overrides(overrides: Mapping[str, Any], prefix: str = "settings") -> None:
    """InvalidInput unless the model accepts these overrides."""
    problems = override_problems(overrides, prefix)
    if problems:
        raise InvalidInput(problems)


def merge_patch(target: Mapping[str, Any], patch: Mapping[str, Any]) -> dict[str, Any]:
    """JSON merge patch (RFC 7386): objects merge, null removes a key."""
    out = copy.deepcopy(dict(target))
    for key, value in patch.items():
        if value is None:
            out.pop(key, None)
        elif isinstance(value, Mapping) and isinstance(out.get(key), Mapping):
            out[key] = merge_patch(out[key], value)
        elif isinstance(value, Mapping):
            out[key] = merge_patch({}, value)
        else:
            out[key] = copy.deepcopy(value)
    return {k: v for k, v in out.items() if v != {}}


def merge_patch_between(old: Mapping[str, Any], new: Mapping[str, Any]) -> dict[str, Any]:
    """The RFC 7386 merge patch that turns ``old`` into ``new`` (null removes a key)."""
    patch: dict[str, Any] = {}
    for key in set(old) | set(new):
        if key not in new:
            patch[key] = None
        elif isinstance(new[key], Mapping) and isinstance(old.get(key), Mapping):
            sub = merge_patch_between(old[key], new[key])
            if sub:
                patch[key] = sub
        elif old.get(key) != new[key]:
            patch[key] = new[key]
    return patch


def campaign_out(campaign: Campaign, shot_count: int | None = None) -> CampaignOut:
    return CampaignOut(
        slug=campaign.slug,
        name=campaign.name,
        timezone=campaign.timezone,
        description=campaign.description,
        settings=campaign.model_settings or {},
        effective_settings=effective_settings(campaign),
        settings_version=campaign.settings_version,
        created_at=campaign.created_at,
        shot_count=shot_count,
    )


def campaign_list(session: Session) -> CampaignList:
    counts = campaign_store.shot_counts(session)
    return CampaignList(items=[campaign_out(c, counts.get(c.id, 0)) for c in campaign_store.list_campaigns(session)])


def campaign_detail(session: Session, slug: str) -> CampaignOut:
    campaign = require_campaign(session, slug)
    return campaign_out(campaign, campaign_store.shot_counts(session).get(campaign.id, 0))


def create_campaign(session: Session, data: CampaignCreate, actor: str) -> Campaign:
    check_overrides(merge_patch({}, data.settings))

    def work() -> Campaign:
        begin_write(session, "campaigns")
        if campaign_store.get_campaign(session, data.slug) is not None:
            raise AlreadyExists(f"campaign {data.slug!r} already exists")
        campaign = campaign_store.add_campaign(
            session,
            Campaign(
                slug=data.slug,
                name=data.name,
                timezone=data.timezone,
                description=data.description,
                model_settings=merge_patch({}, data.settings),
                settings_version=1,
                created_at=datetime.now(UTC),
            ),
        )
        audit.record(
            session,
            actor,
            "campaign.create",
            campaign_slug=data.slug,
            target=data.slug,
            detail={"name": data.name, "settings": campaign.model_settings},
        )
        return campaign

    return run_write(session, work)
