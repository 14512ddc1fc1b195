"""GET /api/v1/campaigns/{slug}/summary: the weekly summary as CSV (the shots, or with
``table=summary`` the figures), JSON, HTML or Parquet."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Query, Response

from app.routers.deps import DB, ExpensiveRead, Viewer
from app.routers.json_body import StrictJSONRoute
from app.routers.responses import file_response
from app.services.weekly import exports
from app.services.weekly.table import MEDIA_TYPES

router = APIRouter(prefix="/api/v1", tags=["summary"], route_class=StrictJSONRoute)

# HTML opens in the browser tab (the dashboard links to it); the others download.
_INLINE = {"html", "json"}


@router.get(
    "/campaigns/{slug}/summary",
    responses={200: {"content": {t.split(";")[0]: {} for t in MEDIA_TYPES.values()}}},
)
def weekly_summary(
    slug: str,
    session: DB,
    _who: Viewer,
    _budget: ExpensiveRead,
    week: Annotated[
        str | None,
        Query(description="ISO week in the campaign's time zone, e.g. 2026-W47 (default: the current week)"),
    ] = None,
    format: Annotated[str, Query(description="csv, json, html or parquet")] = "json",
    table: Annotated[
        str,
        Query(
            description="what a CSV holds: shots (one row per shot, the default) or summary (one row per figure "
            "of the week: counts, ranges, phase stability, the density scale with its interval, changes, "
            "scaling exponents); JSON, HTML and Parquet carry both"
        ),
    ] = "shots",
) -> Response:
    export = exports.weekly_export(session, slug, week, format, table)
    return file_response(export.body, MEDIA_TYPES[format], export.file_name, inline=format in _INLINE)
