"""The planner page ``/campaigns/{slug}/plan`` (``?shot=ID`` to start from a stored shot) and its JSON feeds.

The page is served like every other page (``pages.render``: the one Jinja environment, the strict
Content-Security-Policy); its script (app/static/js/plan.js) posts the base and the axes to the
feeds below and draws what they answer: figures built on the server and every number as the
server's text. The feeds take the campaign of the path (its settings; a stored base is one of its
shots) and answer problems as RFC 9457 documents naming the failing field.
"""

from __future__ import annotations

from urllib.parse import quote

from fastapi import APIRouter, Request, Response

from app.routers.deps import DB, PathCampaign, ViewerQuestion
from app.routers.json_body import StrictJSONRoute
from app.routers.pages import PageCampaign, PageNotFound, render, site
from app.routers.plan_schemas import MapIn, PanelsIn, PointIn
from app.routers.responses import numeric_json_response
from app.services.planner import answers
from app.services.planner import page as planner_page

router = APIRouter(include_in_schema=False, route_class=StrictJSONRoute)


@router.get("/campaigns/{slug}/plan")
def plan_page(request: Request, campaign: PageCampaign, session: DB, shot: str | None = None) -> Response:
    page = planner_page.plan_page(session, campaign, shot)
    if page is None:
        raise PageNotFound(f"Shot {shot!r} in campaign {campaign.slug!r}")
    feeds = site(request, f"/campaigns/{quote(campaign.slug, safe='')}/plan")
    page.config["feeds"] = {name: f"{feeds}/{name}" for name in ("map", "panels", "point")}
    return render(request, "plan.html", {"campaign": campaign, "page": page, "active": "plan"})


@router.post("/campaigns/{slug}/plan/map")
def plan_map(body: MapIn, _who: ViewerQuestion, campaign: PathCampaign, session: DB) -> Response:
    base = answers.resolve_base(session, body.base, campaign.slug)
    axes = [a.model_dump() for a in body.axes]
    return numeric_json_response(planner_page.map_view(base, axes, body.contour, body.curves))


@router.post("/campaigns/{slug}/plan/panels")
def plan_panels(body: PanelsIn, _who: ViewerQuestion, campaign: PathCampaign, session: DB) -> Response:
    base = answers.resolve_base(session, body.base, campaign.slug)
    return numeric_json_response(planner_page.panels_view(base, body.vary))


@router.post("/campaigns/{slug}/plan/point")
def plan_point(body: PointIn, _who: ViewerQuestion, campaign: PathCampaign, session: DB) -> Response:
    base = answers.resolve_base(session, body.base, campaign.slug)
    return numeric_json_response(planner_page.point_view(base, body.values))
