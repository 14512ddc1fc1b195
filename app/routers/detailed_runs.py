"""REST routes of detailed envelope runs: /api/v1/campaigns/{slug}/shots/{shot_id}/detailed-runs."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Body, Depends, Request, Response
from sqlalchemy.orm import Session

from app.deps import get_session
from app.routers.pages import json_response  # stored results are large: encoded once, not walked by FastAPI
from app.services import detailed_runs as run_service
from app.services import jobs as job_service
from app.services.auth import TokenInfo, require_role

router = APIRouter(prefix="/api/v1", tags=["detailed runs"])

DB = Annotated[Session, Depends(get_session)]
Viewer = Annotated[TokenInfo, Depends(require_role("viewer"))]
Ingester = Annotated[TokenInfo, Depends(require_role("ingest"))]
RUNS = "/campaigns/{slug}/shots/{shot_id}/detailed-runs"


@router.post(RUNS, status_code=202)
def start_detailed_run(
    slug: str,
    shot_id: str,
    session: DB,
    who: Ingester,
    request: Request,
    response: Response,
    params: Annotated[run_service.RunParameters | None, Body(description="optional run parameters")] = None,
) -> dict[str, Any]:
    """Queue an envelope solver run of the shot's current revision; follow it at the Location (the job)."""
    job = run_service.start_run(session, slug, shot_id, params or run_service.RunParameters(), who.actor)
    request.app.state.jobs.start(job.id)
    response.headers["Location"] = f"/api/v1/jobs/{job.id}"
    return {"job_id": job.id, "job": job_service.job_out(job, slug).model_dump(mode="json"),
            "runs_url": run_service.runs_url(slug, shot_id)}


@router.get(RUNS)
def list_detailed_runs(slug: str, shot_id: str, session: DB, _who: Viewer) -> Response:
    """Stored runs of the shot, newest first, without their results."""
    return json_response({"items": run_service.list_runs(session, slug, shot_id)})


@router.get(RUNS + "/{run_id}")
def get_detailed_run(slug: str, shot_id: str, run_id: int, session: DB, _who: Viewer) -> Response:
    """One stored run with its full result (arrays as lists, SI units, null for NaN)."""
    return json_response(run_service.get_run(session, slug, shot_id, run_id))


@router.get(RUNS + "/{run_id}/figures")
def get_detailed_run_figures(slug: str, shot_id: str, run_id: int, session: DB, _who: Viewer) -> Response:
    """The run as the shot page draws it: key numbers, validity note and three Plotly figures (decimated)."""
    return json_response(run_service.run_view(session, slug, shot_id, run_id))
