"""REST API under /api/v1 (JSON in, JSON or problem+json out).

Reads need the viewer role, shot writes ingest, campaign and settings writes admin
(app.services.auth). /healthz and /metrics are also served at the root.
"""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, Body, Depends, Query, Request, Response
from fastapi.responses import PlainTextResponse
from pydantic import AwareDatetime
from sqlalchemy import text
from sqlalchemy.orm import Session

import model
from app.config import Settings
from app.deps import get_session, get_settings
from app.problems import ProblemError, invalid_input, not_found
from app.schemas import (
    BatchIn,
    BatchItemOut,
    BatchOut,
    CampaignCreate,
    CampaignList,
    CampaignOut,
    JobOut,
    RevisionList,
    SettingsChangeOut,
    ShotPage,
)
from app.services import campaigns as campaign_service
from app.services import jobs as job_service
from app.services import metrics
from app.services import shots as shot_service
from app.services.auth import TokenInfo, require_role
from app.services.ingest import correct_shot, ingest_shots
from app.store import campaigns as campaign_store
from app.store import jobs as job_store
from app.store.shots import ShotFilter

router = APIRouter(prefix="/api/v1", tags=["api"])
ops_router = APIRouter(tags=["operations"])

DB = Annotated[Session, Depends(get_session)]
Viewer = Annotated[TokenInfo, Depends(require_role("viewer"))]
Ingester = Annotated[TokenInfo, Depends(require_role("ingest"))]
Admin = Annotated[TokenInfo, Depends(require_role("admin"))]
ShotBody = Annotated[dict[str, Any], Body(description="a shot in the API JSON shape; unknown fields are kept")]


# --- campaigns ---------------------------------------------------------------------------------


@router.post("/campaigns", status_code=201, response_model=CampaignOut)
def create_campaign(data: CampaignCreate, session: DB, who: Admin, response: Response) -> CampaignOut:
    campaign = campaign_service.create_campaign(session, data, who.actor)
    response.headers["Location"] = f"/api/v1/campaigns/{campaign.slug}"
    return campaign_service.campaign_out(campaign, 0)


@router.get("/campaigns", response_model=CampaignList)
def list_campaigns(session: DB, _who: Viewer) -> CampaignList:
    counts = campaign_store.shot_counts(session)
    return CampaignList(items=[campaign_service.campaign_out(c, counts.get(c.id, 0))
                               for c in campaign_store.list_campaigns(session)])


@router.get("/campaigns/{slug}", response_model=CampaignOut)
def get_campaign(slug: str, session: DB, _who: Viewer) -> CampaignOut:
    campaign = campaign_service.get_campaign_or_404(session, slug)
    return campaign_service.campaign_out(campaign, campaign_store.shot_counts(session).get(campaign.id, 0))


@router.patch("/campaigns/{slug}/settings", status_code=202, response_model=SettingsChangeOut)
def change_settings(
    slug: str,
    patch: Annotated[dict[str, Any], Body(description="JSON merge patch of the settings overrides (null resets)")],
    session: DB,
    who: Admin,
    request: Request,
    response: Response,
) -> SettingsChangeOut:
    campaign, job = campaign_service.change_settings(session, slug, patch, who.actor)
    request.app.state.jobs.start(job.id)
    response.headers["Location"] = f"/api/v1/jobs/{job.id}"
    return SettingsChangeOut(campaign=campaign_service.campaign_out(campaign),
                             job=job_service.job_out(job, campaign.slug))


@router.get("/jobs/{job_id}", response_model=JobOut)
def get_job(job_id: str, session: DB, _who: Viewer) -> JobOut:
    job = job_store.get_job(session, job_id)
    if job is None:
        raise not_found(f"job {job_id!r}")
    campaign = campaign_store.get_campaign_by_id(session, job.campaign_id) if job.campaign_id else None
    return job_service.job_out(job, campaign.slug if campaign else None)


# --- shots ---------------------------------------------------------------------------------------


@router.post("/campaigns/{slug}/shots", status_code=201)
def post_shot(slug: str, payload: ShotBody, session: DB, who: Ingester, response: Response) -> dict[str, Any]:
    """Store and evaluate one shot: 201 when new, 200 when the identical shot is already stored."""
    result = ingest_shots(session, slug, [payload], who.actor, batch=False)
    [item] = result.items
    if item.outcome != "created":
        response.status_code = 200
    response.headers["Location"] = f"/api/v1/campaigns/{slug}/shots/{item.shot_id}"
    return shot_service.shot_details_by_pk(session, [item.shot_pk])[item.shot_pk]


@router.post("/campaigns/{slug}/shots/batch", status_code=201, response_model=BatchOut)
def post_batch(slug: str, batch: BatchIn, session: DB, who: Ingester, response: Response,
               settings: Annotated[Settings, Depends(get_settings)]) -> BatchOut:
    """All or nothing: 422 lists every failing shot index and field; 409 on a conflicting replay."""
    if len(batch.shots) > settings.max_batch_shots:
        raise invalid_input([("shots", f"at most {settings.max_batch_shots} shots per batch, got {len(batch.shots)}")])
    result = ingest_shots(session, slug, batch.shots, who.actor, batch=True)
    created = result.count("created")
    if created == 0:
        response.status_code = 200
    return BatchOut(
        created=created,
        unchanged=result.count("unchanged"),
        duplicates_in_batch=result.count("duplicate_in_batch"),
        items=[BatchItemOut(index=i.index, shot_id=i.shot_id, outcome=i.outcome, status=i.status)  # type: ignore[arg-type]
               for i in result.items],
    )


def _split(values: list[str] | None) -> list[str]:
    return [v for item in values or [] for v in item.split(",") if v]


@router.get("/campaigns/{slug}/shots", response_model=ShotPage)
def list_shots(
    slug: str,
    session: DB,
    _who: Viewer,
    status: Annotated[list[str] | None, Query(description="nominal, marginal, outside (repeat or comma-separate)")] = None,
    flag: Annotated[list[str] | None, Query(description="flag code(s); a shot matches if any fired")] = None,
    taken_from: Annotated[AwareDatetime | None, Query(alias="from", description="taken_at >= from")] = None,
    taken_to: Annotated[AwareDatetime | None, Query(alias="to", description="taken_at < to")] = None,
    seed_method: Annotated[list[str] | None, Query()] = None,
    order: Literal["asc", "desc"] = "asc",
    cursor: str | None = None,
    limit: Annotated[int, Query(ge=1, le=1000)] = 100,
) -> dict[str, Any]:
    statuses, codes = _split(status), _split(flag)
    problems = [("status", f"unknown status {s!r}") for s in statuses if s not in ("nominal", "marginal", "outside")]
    known = set(model.FLAG_CODES)
    problems += [("flag", f"unknown flag code {c!r}") for c in codes if c not in known]
    if problems:
        raise invalid_input(problems)
    f = ShotFilter(status=statuses, flag_code=codes, taken_from=taken_from, taken_to=taken_to,
                   seed_method=_split(seed_method), descending=order == "desc")
    return shot_service.shot_page(session, slug, f, cursor, limit)


@router.get("/campaigns/{slug}/shots/{shot_id}")
def get_shot(slug: str, shot_id: str, session: DB, _who: Viewer) -> dict[str, Any]:
    return shot_service.shot_detail(session, slug, shot_id)


@router.put("/campaigns/{slug}/shots/{shot_id}")
def put_shot(
    slug: str,
    shot_id: str,
    payload: ShotBody,
    session: DB,
    who: Ingester,
    reason: Annotated[str, Query(max_length=2000, description="why the shot is corrected")] = "",
) -> dict[str, Any]:
    """Store a correction as a new revision (re-evaluated); an identical body changes nothing."""
    correct_shot(session, slug, shot_id, payload, who.actor, reason)
    return shot_service.shot_detail(session, slug, shot_id)


@router.get("/campaigns/{slug}/shots/{shot_id}/revisions", response_model=RevisionList)
def list_revisions(slug: str, shot_id: str, session: DB, _who: Viewer) -> dict[str, Any]:
    return {"items": shot_service.revision_list(session, slug, shot_id)}


@router.post("/evaluate")
def what_if(
    payload: ShotBody,
    session: DB,
    _who: Viewer,
    campaign: Annotated[str | None, Query(description="use this campaign's settings")] = None,
) -> dict[str, Any]:
    """Evaluate a shot body without storing anything."""
    settings, version = None, None
    if campaign is not None:
        c = campaign_service.get_campaign_or_404(session, campaign)
        settings, version = campaign_service.effective_settings(c), c.settings_version
    return shot_service.what_if(payload, settings, version)


# --- operations --------------------------------------------------------------------------------------


def healthz(request: Request) -> dict[str, str]:
    try:
        with request.app.state.session_factory() as session:
            session.execute(text("SELECT 1"))
    except Exception as exc:
        raise ProblemError(503, "Service unavailable", f"database check failed: {type(exc).__name__}") from None
    return {"status": "ok", "database": "ok"}


def metrics_text(_who: Viewer) -> PlainTextResponse:
    return PlainTextResponse(metrics.render(), media_type=metrics.CONTENT_TYPE)


for _r in (router, ops_router):
    _r.add_api_route("/healthz", healthz, methods=["GET"], tags=["operations"])
    _r.add_api_route("/metrics", metrics_text, methods=["GET"], tags=["operations"],
                     response_class=PlainTextResponse)
