"""GET /api/v1/campaigns/{slug}/calibration: the model against measurement of a campaign or
a period of it (density scale, its changes, scaling checks, drivers); the campaign's page of
the same name and its figure feed."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Query, Request, Response

from app.routers.deps import DB, ExpensiveRead, Viewer
from app.routers.json_body import StrictJSONRoute
from app.routers.pages import PageCampaign, render
from app.schemas import Instant
from app.services import calibration
from app.services.dashboard import calibration_page as calibration_page_service

router = APIRouter(prefix="/api/v1", tags=["calibration"], route_class=StrictJSONRoute)


@router.get("/campaigns/{slug}/calibration")
def campaign_calibration(
    slug: str,
    session: DB,
    _who: Viewer,
    _budget: ExpensiveRead,
    taken_from: Annotated[Instant | None, Query(alias="from", description="taken_at >= from (ISO 8601)")] = None,
    taken_to: Annotated[Instant | None, Query(alias="to", description="taken_at < to (ISO 8601)")] = None,
) -> dict[str, Any]:
    """Density scale (median of (f_meas/f_ref)^2 at density_scale 1, 95 % interval), its changes,
    the scaling checks and the drivers of the outcome, for shots taken in [from, to)."""
    return calibration.calibration_answer(session, slug, taken_from, taken_to)


page_router = APIRouter(include_in_schema=False)


@page_router.get("/campaigns/{slug}/calibration")
def calibration_page(
    request: Request,
    campaign: PageCampaign,
    session: DB,
    taken_from: Annotated[str, Query(alias="from", max_length=64)] = "",
    taken_to: Annotated[str, Query(alias="to", max_length=64)] = "",
) -> Response:
    """The campaign's calibration page; ``from`` / ``to`` are days of the campaign's zone or ISO instants."""
    start, end, problem = calibration_page_service.period(campaign, taken_from, taken_to)
    page = calibration_page_service.calibration_page(session, campaign.slug, start, end)
    context = {"campaign": campaign, "page": page, "active": "calibration", "period_problem": problem}
    context.update(period_from=taken_from, period_to=taken_to)
    return render(request, "calibration.html", context)
