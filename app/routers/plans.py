"""The planner's API under /api/v1/plans (viewer role; nothing is stored).

Four questions about a base shot on the closed-form model: a scan over one or two axes, the
nominal window of each field, the nearest nominal shot, and the sensitivity table
(``app.services.planner.answers``). The endpoints are plain ``def``: the model's work runs in the
threadpool. Answers are written once by orjson (``json_bytes``), numpy arrays natively and NaN
as null; a scan's answer is sent as it is written, piece by piece (``json_pieces_response``).
Problems are RFC 9457 documents naming each failing field (``axes.0.start``).
"""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Response

from app.routers.deps import DB, ViewerQuestion
from app.routers.json_body import StrictJSONRoute
from app.routers.plan_schemas import (
    NearestIn,
    NearestOut,
    ScanIn,
    ScanOut,
    SensitivitiesIn,
    SensitivitiesOut,
    WindowIn,
    WindowsOut,
)
from app.routers.responses import json_pieces_response, numeric_json_response
from app.services.planner import answers

router = APIRouter(prefix="/api/v1/plans", tags=["planner"], route_class=StrictJSONRoute)

PROBLEMS: dict[int | str, dict[str, Any]] = {
    401: {"description": "no valid token"},
    404: {"description": "the campaign or stored shot named does not exist"},
    422: {"description": "invalid request; errors names each failing field (base.plasma.density_cm3, axes.0.start)"},
}


@router.post("/scan", response_model=ScanOut, responses=PROBLEMS)
def plan_scan(request: ScanIn, session: DB, _who: ViewerQuestion) -> Response:
    """Evaluate the base over a grid of one or two input fields (every point the base with those values)."""
    base = answers.resolve_base(session, request.base, request.campaign)
    axes = [a.model_dump() for a in request.axes]
    result = answers.scan(base, axes, request.outputs)
    return json_pieces_response(answers.scan_answer(base, result, request.output_encoding))


@router.post("/window", response_model=WindowsOut, responses=PROBLEMS)
def plan_window(request: WindowIn, session: DB, _who: ViewerQuestion) -> Response:
    """The interval of each field around the base value (others fixed) where the status is nominal."""
    base = answers.resolve_base(session, request.base, request.campaign)
    return numeric_json_response(answers.window_answer(base, answers.windows(base, request.fields)))


@router.post("/nearest", response_model=NearestOut, responses=PROBLEMS)
def plan_nearest(request: NearestIn, session: DB, _who: ViewerQuestion) -> Response:
    """The nominal shot nearest to the base, varying one to four positive fields within a factor 10."""
    base = answers.resolve_base(session, request.base, request.campaign)
    return numeric_json_response(answers.nearest_answer(base, answers.nearest(base, request.vary)))


@router.post("/sensitivities", response_model=SensitivitiesOut, responses=PROBLEMS)
def plan_sensitivities(request: SensitivitiesIn, session: DB, _who: ViewerQuestion) -> Response:
    """d ln(output)/d ln(input) of the key outputs for every positive input the base sets, largest first."""
    base = answers.resolve_base(session, request.base, request.campaign)
    return numeric_json_response(answers.sensitivity_answer(base, answers.sensitivities(base)))
