"""GET /api/v1/campaigns/{slug}/summary: the weekly summary as CSV, JSON, HTML or Parquet."""

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
) -> Response:
    export = exports.weekly_export(session, slug, week, format)
    return file_response(export.body, MEDIA_TYPES[format], export.file_name, inline=format in _INLINE)
