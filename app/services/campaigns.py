"""Campaigns and their model settings (overrides of ``model.DEFAULT_SETTINGS``)."""

from __future__ import annotations

import copy
import math
from collections.abc import Mapping
from datetime import datetime, timezone
from typing import TYPE_CHECKING, Any

from sqlalchemy.orm import Session, sessionmaker

import model
from app.database import begin_write, run_write
from app.problems import ALREADY_EXISTS, FieldProblem, ProblemError, invalid_input, not_found
from app.schemas import CampaignCreate, CampaignOut
from app.store import audit
from app.store import campaigns as campaign_store
from app.tables import Campaign, Job

if TYPE_CHECKING:
    from app.services.jobs import Progress


def default_settings() -> dict[str, Any]:
    return copy.deepcopy(dict(model.DEFAULT_SETTINGS))


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


def check_overrides(overrides: Mapping[str, Any], prefix: str = "settings") -> None:
    """422 unless the model accepts these overrides."""
    problems = settings_problems(overrides, default_settings(), prefix)
    if not problems:
        try:
            model.resolve_settings(overrides)
        except model.SettingsError as exc:
            problems = [(f"{prefix}.{path}" if path != "settings" else prefix, reason) for path, reason in exc.problems]
    if problems:
        raise invalid_input(problems)


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


def campaign_lock(slug: str) -> str:
    """Writer lock name shared by ingest, corrections, settings changes and re-evaluation."""
    return f"campaign:{slug}"


def effective_settings(campaign: Campaign) -> dict[str, Any]:
    """The campaign's settings as the model uses them (defaults with overrides)."""
    return model.resolve_settings(campaign.model_settings or {})


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


def get_campaign_or_404(session: Session, slug: str) -> Campaign:
    campaign = campaign_store.get_campaign(session, slug)
    if campaign is None:
        raise not_found(f"campaign {slug!r}")
    return campaign


def create_campaign(session: Session, data: CampaignCreate, actor: str) -> Campaign:
    check_overrides(merge_patch({}, data.settings))

    def work() -> Campaign:
        begin_write(session, "campaigns")
        if campaign_store.get_campaign(session, data.slug) is not None:
            raise ProblemError(
                409, "Campaign exists", f"campaign {data.slug!r} already exists", type_=ALREADY_EXISTS
            )
        campaign = campaign_store.add_campaign(
            session,
            Campaign(
                slug=data.slug,
                name=data.name,
                timezone=data.timezone,
                description=data.description,
                model_settings=merge_patch({}, data.settings),
                settings_version=1,
                created_at=datetime.now(timezone.utc),
            ),
        )
        audit.record(session, actor, "campaign.create", campaign_slug=data.slug, target=data.slug,
                     detail={"name": data.name, "settings": campaign.model_settings})
        return campaign

    return run_write(session, work)


def change_settings(session: Session, slug: str, patch: Mapping[str, Any], actor: str) -> tuple[Campaign, Job]:
    """Apply a merge patch to the campaign's overrides, bump its version, queue re-evaluation."""
    from app.services import jobs

    problems = settings_problems(patch, default_settings())
    if problems:
        raise invalid_input(problems)

    def work() -> tuple[Campaign, Job]:
        # Same lock as ingest: no shot is evaluated with the old settings after the bump.
        begin_write(session, campaign_lock(slug))
        campaign = get_campaign_or_404(session, slug)
        new = merge_patch(campaign.model_settings or {}, patch)
        check_overrides(new)
        version = campaign_store.set_model_settings(session, campaign.id, new)
        audit.record(session, actor, "campaign.settings", campaign_slug=slug, target=slug,
                     detail={"patch": dict(patch), "settings_version": version})
        job = jobs.queue_reevaluation(session, campaign.id, version)
        session.flush()
        session.refresh(campaign)
        return campaign, job

    return run_write(session, work)


MODEL_UPGRADE_ACTOR = "wakeledger (model upgrade)"


def queue_model_upgrade_reevaluations(session: Session, actor: str = MODEL_UPGRADE_ACTOR) -> list[str]:
    """Queue the "reevaluate" job of every campaign holding evaluations by another model
    version, unless one is already queued or running; returns the new job ids (start them)."""
    from app.services import jobs
    from app.store import jobs as job_store
    from app.store import shots as shot_store

    ids = shot_store.campaign_ids_evaluated_by_other_model(session, model.MODEL_VERSION)
    campaigns = [(c.id, c.slug) for c in (campaign_store.get_campaign_by_id(session, i) for i in ids) if c is not None]
    session.rollback()  # end the read: each write below begins with its campaign's writer lock
    queued: list[str] = []
    for campaign_id, slug in campaigns:

        def work() -> Job | None:
            # Under the campaign lock, so two processes starting at once queue one job.
            begin_write(session, campaign_lock(slug))
            if job_store.has_unfinished_job(session, "reevaluate", campaign_id):
                return None
            current = campaign_store.get_campaign_by_id(session, campaign_id)
            if current is None:
                return None
            job = jobs.queue_reevaluation(session, campaign_id, current.settings_version)
            audit.record(session, actor, "campaign.reevaluate", campaign_slug=slug, target=slug,
                         detail={"reason": "model upgrade", "model_version": model.MODEL_VERSION, "job": job.id})
            return job

        job = run_write(session, work)
        if job is not None:
            queued.append(job.id)
    return queued


def reevaluate_now(factory: sessionmaker[Session], slug: str, actor: str, progress: Progress) -> int:
    """Run the campaign's re-evaluation in this thread (``wakeledger reevaluate``); audited.
    Returns how many shots were re-evaluated."""
    from app.services.ingest import reevaluate_campaign

    done = reevaluate_campaign(factory, slug, progress)
    with factory() as session:
        def work() -> None:
            begin_write(session)
            audit.record(session, actor, "campaign.reevaluate", campaign_slug=slug, target=slug,
                         detail={"reevaluated": done, "model_version": model.MODEL_VERSION})

        run_write(session, work)
    return done
