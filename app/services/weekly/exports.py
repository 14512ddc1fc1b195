"""A campaign's weekly export, as the API and the CLI ask for it: the week read (default:
the current week in the campaign's zone), the file made ready, then written.

A CSV holds one of two tables (``EXPORT_TABLES``): ``shots`` (one row per shot, the default;
only the week's shots are read, none of the summary's figures are computed) or ``summary``
(one row per figure, ``app.services.weekly.summary_rows``). JSON, Parquet and HTML carry the
summary and the shots together.
"""

from __future__ import annotations

import io
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import BinaryIO

from sqlalchemy.orm import Session

from app.errors import FieldProblem, InvalidInput
from app.services.campaigns import require_campaign
from app.services.files import write_atomically
from app.services.weekly.formats import EXPORT_FORMATS, EXPORT_TABLES
from app.services.weekly.summary import build_weekly_summary, export_file_name, week_shots
from app.services.weekly.table import (
    Progress,
    write_export,
    write_shots_csv,
    write_summary_csv,
)
from app.tables import Campaign
from app.times import IsoWeek, WeekFormatError, campaign_zone, current_week


@dataclass(frozen=True)
class WeeklyExport:
    body: bytes
    file_name: str


@dataclass(frozen=True)
class WeekFile:
    """A week's file ready to be written: what was read, and how it is written."""

    campaign_slug: str
    week: IsoWeek
    timezone: str  # the zone the week was computed in
    fmt: str
    table: str
    shot_count: int
    writer: Callable[[BinaryIO, Progress | None], None]

    @property
    def file_name(self) -> str:
        return export_file_name(self.campaign_slug, self.week.label, self.fmt, self.table)

    @property
    def is_empty(self) -> bool:
        return self.shot_count == 0

    def write(self, out: BinaryIO, progress: Progress | None = None) -> None:
        self.writer(out, progress)

    def body(self) -> bytes:
        buffer = io.BytesIO()
        self.write(buffer)
        return buffer.getvalue()

    def write_file(self, path: Path, progress: Progress | None = None) -> Path:
        """Write the file to ``path`` atomically (never half-written)."""
        return write_atomically(path, lambda out: self.write(out, progress))


def week_problems(week: str | None, fmt: str | None, table: str = "shots") -> tuple[IsoWeek | None, list[FieldProblem]]:
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
    if table not in EXPORT_TABLES:
        problems.append(("table", f"unknown table {table!r}; choose one of {', '.join(EXPORT_TABLES)}"))
    elif table == "summary" and fmt is not None and fmt != "csv":
        problems.append(("table", f"the summary table is a CSV file; {fmt} carries the summary already"))
    return iso_week, problems


def week_or_current(campaign: Campaign, week: IsoWeek | None) -> IsoWeek:
    return week or current_week(campaign_zone(campaign.timezone))


def week_file(
    session: Session, slug: str, week: IsoWeek | None, fmt: str, table: str = "shots", *, served: bool = False
) -> WeekFile:
    """The week's file in ``fmt`` ready to write (``served``: the HTML report links to the other files);
    NotFound for an unknown campaign."""
    campaign = require_campaign(session, slug)
    iso_week = week_or_current(campaign, week)
    zone = campaign_zone(campaign.timezone)
    if fmt == "csv" and table == "shots":
        shots = week_shots(session, campaign, iso_week)
        return WeekFile(
            campaign.slug,
            iso_week,
            zone.key,
            fmt,
            table,
            len(shots),
            lambda out, p: write_shots_csv(shots, zone, out, p),
        )
    summary = build_weekly_summary(session, campaign, iso_week)
    if table == "summary":
        writer: Callable[[BinaryIO, Progress | None], None] = lambda out, p: write_summary_csv(summary, out, p)  # noqa: E731
    else:
        writer = lambda out, p: write_export(summary, fmt, out, p, links=served)  # noqa: E731
    return WeekFile(campaign.slug, iso_week, summary.timezone, fmt, table, summary.shot_count, writer)


def weekly_export(session: Session, slug: str, week: str | None, fmt: str, table: str = "shots") -> WeeklyExport:
    """The week's file in ``fmt`` (the API's answer); InvalidInput names a bad week, format or table."""
    iso_week, problems = week_problems(week, fmt, table)
    if problems:
        raise InvalidInput(problems)
    ready = week_file(session, slug, iso_week, fmt, table, served=True)
    return WeeklyExport(ready.body(), ready.file_name)
