"""GET /api/v1/campaigns/{slug}/summary: the weekly summary as CSV, JSON, HTML or Parquet."""

from __future__ import annotations

from datetime import datetime, timezone
from typing import Annotated
from zoneinfo import ZoneInfo

from fastapi import APIRouter, Depends, Query, Response
from sqlalchemy.orm import Session

from app.deps import get_session
from app.problems import invalid_input
from app.services import campaigns as campaign_service
from app.services.auth import TokenInfo, require_role
from app.services.export_formats import EXPORT_FORMATS, MEDIA_TYPES, export_file_name, render_export
from app.services.summary import IsoWeek, WeekFormatError, build_weekly_summary

router = APIRouter(prefix="/api/v1", tags=["summary"])

# HTML opens in the browser tab (the dashboard links to it); the others download.
_INLINE = {"html", "json"}


@router.get(
    "/campaigns/{slug}/summary",
    responses={200: {"content": {t.split(";")[0]: {} for t in MEDIA_TYPES.values()}}},
)
def weekly_summary(
    slug: str,
    session: Annotated[Session, Depends(get_session)],
    _who: Annotated[TokenInfo, Depends(require_role("viewer"))],
    week: Annotated[
        str | None,
        Query(description="ISO week in the campaign's timezone, e.g. 2026-W47 (default: the current week)"),
    ] = None,
    format: Annotated[str, Query(description="csv, json, html or parquet")] = "json",
) -> Response:
    problems = []
    iso_week = None
    if week is not None:
        try:
            iso_week = IsoWeek.parse(week)
        except WeekFormatError as exc:
            problems.append(("week", str(exc)))
    if format not in EXPORT_FORMATS:
        problems.append(("format", f"unknown format {format!r}; choose one of {', '.join(EXPORT_FORMATS)}"))
    if problems:
        raise invalid_input(problems)
    campaign = campaign_service.get_campaign_or_404(session, slug)
    if iso_week is None:
        iso_week = IsoWeek.containing(datetime.now(timezone.utc), ZoneInfo(campaign.timezone))
    summary = build_weekly_summary(session, campaign, iso_week)
    body = render_export(summary, format)
    name = export_file_name(campaign.slug, iso_week.label, format)
    disposition = "inline" if format in _INLINE else "attachment"
    return Response(
        content=body,
        media_type=MEDIA_TYPES[format],
        headers={"Content-Disposition": f'{disposition}; filename="{name}"', "Cache-Control": "no-store"},
    )
