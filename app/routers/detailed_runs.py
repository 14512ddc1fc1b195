"""REST routes of detailed envelope runs: /api/v1/campaigns/{slug}/shots/{shot_id}/detailed-runs."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Body, Depends, Path, Response

from app.config import Settings
from app.routers.deps import DB, ExpensiveRead, Ingester, Viewer, get_settings
from app.routers.json_body import StrictJSONRoute
from app.routers.responses import json_response  # stored results are large: encoded once
from app.services import jobs as job_service
from app.services.detailed_runs import lifecycle as runs

router = APIRouter(prefix="/api/v1", tags=["detailed runs"], route_class=StrictJSONRoute)

RUNS = "/campaigns/{slug}/shots/{shot_id}/detailed-runs"
# Run ids are database integers: a larger number names no run (and would overflow the query).
RunId = Annotated[int, Path(ge=1, le=2**31 - 1, description="the run's id")]


@router.post(RUNS, status_code=202)
def start_detailed_run(
    slug: str,
    shot_id: str,
    session: DB,
    who: Ingester,
    response: Response,
    settings: Annotated[Settings, Depends(get_settings)],
    params: Annotated[runs.RunParameters | None, Body(description="optional run parameters")] = None,
) -> dict[str, Any]:
    """Queue an envelope solver run of the shot's current revision; follow it at the Location (the job).

    429 when the campaign or the token already has as many unfinished jobs as it may."""
    limits = job_service.JobLimits(settings.max_jobs_per_campaign, settings.max_jobs_per_token)
    job = runs.start_run(session, slug, shot_id, params or runs.RunParameters(), who, limits)
    response.headers["Location"] = f"/api/v1/jobs/{job.id}"
    return {
        "job_id": job.id,
        "job": job_service.job_out(job, slug).model_dump(mode="json"),
        "runs_url": runs.runs_url(slug, shot_id),
    }


@router.get(RUNS)
def list_detailed_runs(slug: str, shot_id: str, session: DB, _who: Viewer) -> Response:
    """Stored runs of the shot, newest first, without their results."""
    return json_response({"items": runs.list_runs(session, slug, shot_id)})


@router.get(RUNS + "/{run_id}")
def get_detailed_run(
    slug: str, shot_id: str, run_id: RunId, session: DB, _who: Viewer, _budget: ExpensiveRead
) -> Response:
    """One stored run with its full result (arrays as lists, SI units, null for NaN)."""
    return json_response(runs.get_run(session, slug, shot_id, run_id))


@router.get(RUNS + "/{run_id}/figures")
def get_detailed_run_figures(
    slug: str, shot_id: str, run_id: RunId, session: DB, _who: Viewer, _budget: ExpensiveRead
) -> Response:
    """The run as the shot page draws it: key numbers, validity note and three Plotly figures (decimated)."""
    return json_response(runs.run_view(session, slug, shot_id, run_id))
