"""A campaign's weekly export, as the API and the CLI ask for it: the week read (default:
the current week in the campaign's zone), the summary built, the file rendered."""

from __future__ import annotations

from dataclasses import dataclass

from sqlalchemy.orm import Session

from app.errors import FieldProblem, InvalidInput
from app.services.campaigns import require_campaign
from app.services.weekly.summary import WeeklySummary, build_weekly_summary, export_file_name
from app.services.weekly.table import EXPORT_FORMATS, render_export
from app.tables import Campaign
from app.times import IsoWeek, WeekFormatError, campaign_zone, current_week


@dataclass(frozen=True)
class WeeklyExport:
    body: bytes
    file_name: str


def week_problems(week: str | None, fmt: str | None) -> tuple[IsoWeek | None, list[FieldProblem]]:
    """The ISO week asked for (None: the current one) and the problems of the request."""
    problems: list[FieldProblem] = []
    iso_week = None
    if week is not None:
        try:
            iso_week = IsoWeek.parse(week)
        except WeekFormatError as exc:
            problems.append(("week", str(exc)))
    if fmt is not None and fmt not in EXPORT_FORMATS:
        problems.append(("format", f"unknown format {fmt!r}; choose one of {', '.join(EXPORT_FORMATS)}"))
    return iso_week, problems


def week_or_current(campaign: Campaign, week: IsoWeek | None) -> IsoWeek:
    return week or current_week(campaign_zone(campaign.timezone))


def campaign_week_summary(session: Session, slug: str, week: IsoWeek | None) -> WeeklySummary:
    """The summary of the campaign's week (default: the current week); NotFound for an unknown campaign."""
    campaign = require_campaign(session, slug)
    return build_weekly_summary(session, campaign, week_or_current(campaign, week))


def weekly_export(session: Session, slug: str, week: str | None, fmt: str) -> WeeklyExport:
    """The week's file in ``fmt``; InvalidInput names a bad week or format."""
    iso_week, problems = week_problems(week, fmt)
    if problems:
        raise InvalidInput(problems)
    summary = campaign_week_summary(session, slug, iso_week)
    return WeeklyExport(render_export(summary, fmt), export_file_name(summary.campaign_slug, summary.week.label, fmt))
