"""REST API under /api/v1 (JSON in, JSON or problem+json out).

Reads need the viewer role, shot writes ingest, campaign and settings writes admin
(``app.routers.deps``). /healthz and /metrics are also served at the root.
"""

from __future__ import annotations

from typing import Annotated, Any, Literal

from fastapi import APIRouter, BackgroundTasks, Body, Depends, Path, Query, Request, Response
from fastapi.responses import PlainTextResponse

from app.config import Settings
from app.errors import InvalidInput
from app.routers.deps import DB, Admin, Ingester, Viewer, get_settings
from app.routers.json_body import StrictJSONRoute
from app.schemas import (
    AuditPage,
    BatchIn,
    BatchOut,
    CampaignCreate,
    CampaignList,
    CampaignOut,
    ExclusionIn,
    ExclusionOut,
    Instant,
    JobList,
    JobOut,
    RevisionList,
    SettingsChangeOut,
    ShotPage,
    TokenCreate,
    TokenCreated,
    TokenList,
    TokenOut,
)
from app.services import administration, alerts, exclusions, health, metrics
from app.services import campaigns as campaign_service
from app.services import jobs as job_service
from app.services import shots as shot_service
from app.services.campaign_settings import change_settings
from app.services.ingest import correct_shot, ingest_shots, write_back_wal

router = APIRouter(prefix="/api/v1", tags=["api"], route_class=StrictJSONRoute)
ops_router = APIRouter(tags=["operations"], route_class=StrictJSONRoute)

ShotBody = Annotated[dict[str, Any], Body(description="a shot in the API JSON shape; unknown fields are kept")]


# --- campaigns ---------------------------------------------------------------------------------


@router.post("/campaigns", status_code=201, response_model=CampaignOut)
def create_campaign(data: CampaignCreate, session: DB, who: Admin, response: Response) -> CampaignOut:
    campaign = campaign_service.create_campaign(session, data, who.actor)
    response.headers["Location"] = f"/api/v1/campaigns/{campaign.slug}"
    return campaign_service.campaign_out(campaign, 0)


@router.get("/campaigns", response_model=CampaignList)
def list_campaigns(session: DB, _who: Viewer) -> CampaignList:
    return campaign_service.campaign_list(session)


@router.get("/campaigns/{slug}", response_model=CampaignOut)
def get_campaign(slug: str, session: DB, _who: Viewer) -> CampaignOut:
    return campaign_service.campaign_detail(session, slug)


@router.patch("/campaigns/{slug}/settings", status_code=202, response_model=SettingsChangeOut)
def patch_settings(
    slug: str,
    patch: Annotated[dict[str, Any], Body(description="JSON merge patch of the settings overrides (null resets)")],
    session: DB,
    who: Admin,
    response: Response,
) -> SettingsChangeOut:
    campaign, job = change_settings(session, slug, patch, who.actor)
    response.headers["Location"] = f"/api/v1/jobs/{job.id}"
    return SettingsChangeOut(
        campaign=campaign_service.campaign_out(campaign), job=job_service.job_out(job, campaign.slug)
    )


@router.get("/jobs", response_model=JobList)
def list_jobs(session: DB, _who: Admin) -> JobList:
    """Queued and running jobs (oldest first), then the latest finished ones."""
    return JobList(items=job_service.job_list(session))


@router.get("/jobs/{job_id}", response_model=JobOut)
def get_job(job_id: str, session: DB, _who: Viewer) -> JobOut:
    return job_service.job_detail(session, job_id)


@router.delete("/jobs/{job_id}", response_model=JobOut)
def cancel_job(job_id: str, session: DB, who: Viewer) -> JobOut:
    """Cancel a job (the token that queued it, or an admin): a queued job at once, a running
    one at its next progress report (``cancel_requested`` until then); 409 once it has finished."""
    return job_service.cancel_job(session, job_id, who)


# --- tokens and the audit trail (admins) ----------------------------------------------------------


@router.get("/tokens", response_model=TokenList)
def list_tokens(session: DB, _who: Admin) -> TokenList:
    """Every token with its state, expiry, last use (to the minute) and open browser sessions."""
    return administration.token_list(session)


@router.post("/tokens", status_code=201, response_model=TokenCreated)
def create_token(data: TokenCreate, session: DB, who: Admin, response: Response) -> TokenCreated:
    """A new token; the answer is the only place it is ever shown."""
    created = administration.create_token(session, data, who)
    response.headers["Location"] = f"/api/v1/tokens/{created.id}"
    return created


@router.delete("/tokens/{token_id}", response_model=TokenOut)
def revoke_token(token_id: Annotated[int, Path(ge=1, le=2**31 - 1)], session: DB, who: Admin) -> TokenOut:
    """Revoke a token now; its browser sessions end with it."""
    return administration.revoke_token(session, token_id, who)


@router.get("/audit", response_model=AuditPage)
def audit_trail(
    session: DB,
    _who: Admin,
    campaign: str | None = None,
    action: Annotated[str | None, Query(description="an action, or a prefix ending in '.' (e.g. token.)")] = None,
    actor: str | None = None,
    before: Annotated[int | None, Query(ge=1, le=2**63 - 1, description="entries older than this id")] = None,
    limit: Annotated[int, Query(ge=1, le=administration.MAX_AUDIT_PAGE)] = 100,
) -> AuditPage:
    """Every write, newest first: who, what, which campaign, when."""
    return administration.audit_page(session, campaign=campaign, action=action, actor=actor, before=before, limit=limit)


# --- shots ---------------------------------------------------------------------------------------


@router.post("/campaigns/{slug}/shots", status_code=201)
def post_shot(
    slug: str,
    payload: ShotBody,
    session: DB,
    who: Ingester,
    response: Response,
    settings: Annotated[Settings, Depends(get_settings)],
) -> dict[str, Any]:
    """Store and evaluate one shot: 201 when new, 200 when the identical shot is already stored."""
    result = ingest_shots(
        session,
        slug,
        [payload],
        who.actor,
        batch=False,
        max_future=settings.max_future,
        alert_policy=alerts.AlertPolicy.from_settings(settings),
    )
    [item] = result.items
    if item.outcome != "created":
        response.status_code = 200
    response.headers["Location"] = f"/api/v1/campaigns/{slug}/shots/{item.shot_id}"
    assert item.shot_pk is not None
    return shot_service.shot_details_by_pk(session, [item.shot_pk])[item.shot_pk]


@router.post("/campaigns/{slug}/shots/batch", status_code=201, response_model=BatchOut)
def post_batch(
    slug: str,
    batch: BatchIn,
    session: DB,
    who: Ingester,
    response: Response,
    settings: Annotated[Settings, Depends(get_settings)],
    after_answer: BackgroundTasks,
) -> BatchOut:
    """All or nothing: 422 lists every failing shot index and field; 409 on a conflicting replay."""
    if len(batch.shots) > settings.max_batch_shots:
        raise InvalidInput([("shots", f"at most {settings.max_batch_shots} shots per batch, got {len(batch.shots)}")])
    result = ingest_shots(
        session,
        slug,
        batch.shots,
        who.actor,
        batch=True,
        max_future=settings.max_future,
        alert_policy=alerts.AlertPolicy.from_settings(settings),
        defer_checkpoint=True,
    )
    after_answer.add_task(write_back_wal, session)  # the stored batch is answered before its WAL pages are copied
    created = result.count("created")
    if created == 0:
        response.status_code = 200
    return BatchOut.model_validate(  # the items as dicts: pydantic checks them in one call
        {
            "created": created,
            "unchanged": result.count("unchanged"),
            "duplicates_in_batch": result.count("duplicate_in_batch"),
            "items": [
                {"index": i.index, "shot_id": i.shot_id, "outcome": i.outcome, "status": i.status} for i in result.items
            ],
        }
    )


def _split(values: list[str] | None) -> list[str]:
    return [v for item in values or [] for v in item.split(",") if v]


@router.get("/campaigns/{slug}/shots", response_model=ShotPage)
def list_shots(
    slug: str,
    session: DB,
    _who: Viewer,
    status: Annotated[
        list[str] | None, Query(description="nominal, marginal, outside (repeat or comma-separate)")
    ] = None,
    flag: Annotated[list[str] | None, Query(description="flag code(s); a shot matches if any fired")] = None,
    taken_from: Annotated[Instant | None, Query(alias="from", description="taken_at >= from (ISO 8601)")] = None,
    taken_to: Annotated[Instant | None, Query(alias="to", description="taken_at < to (ISO 8601)")] = None,
    seed_method: Annotated[list[str] | None, Query()] = None,
    excluded: Annotated[
        exclusions.ExcludedMode,
        Query(description="excluded shots: left out (omit, the default), listed with the others, or alone"),
    ] = "omit",
    order: Literal["asc", "desc"] = "asc",
    cursor: str | None = None,
    limit: Annotated[int, Query(ge=1, le=1000)] = 100,
) -> dict[str, Any]:
    return shot_service.shot_page(
        session,
        slug,
        status=_split(status),
        flag=_split(flag),
        taken_from=taken_from,
        taken_to=taken_to,
        seed_method=_split(seed_method),
        descending=order == "desc",
        excluded=excluded,
        cursor=cursor,
        limit=limit,
    )


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
    settings: Annotated[Settings, Depends(get_settings)],
    reason: Annotated[str, Query(max_length=2000, description="why the shot is corrected")] = "",
) -> dict[str, Any]:
    """Store a correction as a new revision (re-evaluated); an identical body changes nothing."""
    correct_shot(
        session,
        slug,
        shot_id,
        payload,
        who.actor,
        reason,
        max_future=settings.max_future,
        alert_policy=alerts.AlertPolicy.from_settings(settings),
    )
    return shot_service.shot_detail(session, slug, shot_id)


@router.get("/campaigns/{slug}/shots/{shot_id}/revisions", response_model=RevisionList)
def list_revisions(slug: str, shot_id: str, session: DB, _who: Viewer) -> dict[str, Any]:
    return {"items": shot_service.revision_list(session, slug, shot_id)}


EXCLUSION = "/campaigns/{slug}/shots/{shot_id}/exclusion"


@router.post(
    EXCLUSION,
    status_code=201,
    response_model=ExclusionOut,
    responses={200: {"model": ExclusionOut, "description": "already excluded with the same reason: nothing changed"}},
)
def exclude_shot(
    slug: str, shot_id: str, data: ExclusionIn, session: DB, who: Ingester, response: Response
) -> dict[str, Any]:
    """Exclude a shot (a test shot, wrong units) from counts, charts and summaries, with a reason.

    The shot is kept and shown, marked; the shot list and the table's CSV show it with
    ``excluded=include``. 201 when excluded now, 200 when it already was with the same reason,
    409 when it already is with another reason (restore it first). Audited as ``shot.exclude``."""
    outcome = exclusions.exclude_shot(session, slug, shot_id, data.reason, who.actor)
    if not outcome.changed:
        response.status_code = 200
    return outcome.state


@router.delete(EXCLUSION, response_model=ExclusionOut)
def restore_shot(slug: str, shot_id: str, session: DB, who: Ingester) -> dict[str, Any]:
    """Count an excluded shot again (audited as ``shot.restore``); a shot that is not excluded
    stays as it is (200 either way)."""
    return exclusions.restore_shot(session, slug, shot_id, who.actor).state


@router.post("/evaluate")
def what_if(
    payload: ShotBody,
    session: DB,
    _who: Viewer,
    campaign: Annotated[str | None, Query(description="use this campaign's settings")] = None,
) -> dict[str, Any]:
    """Evaluate a shot body without storing anything."""
    return shot_service.what_if(session, payload, campaign)


# --- operations --------------------------------------------------------------------------------------


def healthz(request: Request) -> dict[str, str]:
    return health.check(request.app.state.session_factory)


def metrics_text(_who: Viewer) -> PlainTextResponse:
    return PlainTextResponse(metrics.render(), media_type=metrics.CONTENT_TYPE)


for _r in (router, ops_router):
    _r.add_api_route("/healthz", healthz, methods=["GET"], tags=["operations"])
    _r.add_api_route("/metrics", metrics_text, methods=["GET"], tags=["operations"], response_class=PlainTextResponse)
