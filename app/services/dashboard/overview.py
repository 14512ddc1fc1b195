"""The overview and the campaign list: status and flag counts, the chart feeds with the
figures beside them, the weekly-summary links, and the live feed that keeps open pages
current (new shots, counts, and the text the table shows for them).
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any
from urllib.parse import quote

from sqlalchemy.orm import Session

from app.errors import InvalidInput
from app.plain import rounded
from app.presentation.fields import field_label
from app.presentation.numbers import MISSING, format_number
from app.services.dashboard.feed_reads import CachedReader, SeriesRequest, campaign_marks, campaign_reads
from app.services.dashboard.figures import (
    CALIBRATION_FIELDS,
    DEFAULT_REGIME_AXES,
    PHASE_FIELD,
    TIMELINE_FIELDS,
    CalibrationSummary,
    FlagCodeCount,
    PhaseSummary,
    calibration_figure,
    calibration_summary,
    flag_code_counts,
    flag_figure,
    map_series,
    phase_data,
    phase_figure,
    phase_series,
    phase_summary,
    regime_figure,
    timeline_figure,
    timeline_series,
)
from app.services.dashboard.table import TABLE_NOTES_CHARS, TABLE_VALUE_COLUMNS
from app.services.phase_spread import JITTER_SOURCE_NAMES, JITTER_SOURCES, NEIGHBOUR_WINDOW_SHOTS
from app.store import dashboard as store
from app.store.dashboard import ShotRow
from app.tables import Campaign
from app.times import IsoWeek, campaign_zone, chart_time, current_week, format_utc, local_text, local_time

log = logging.getLogger(__name__)

LIVE_MAX_ROWS = 200
LATEST_OUTSIDE_ROWS = 8
# The values beside each of the latest outside shots (all among the live feed's columns).
OUTSIDE_VALUE_COLUMNS = (
    "plasma_density_cm3",
    "driver_sigma_r_mm",
    "seed_position_mm",
    "efolds_exit",
    "growth_margin_efolds",
)
# Everything a live update may need to extend the overview's charts and the table.
LIVE_VALUE_COLUMNS = tuple(dict.fromkeys((*TIMELINE_FIELDS, *TABLE_VALUE_COLUMNS, PHASE_FIELD, *CALIBRATION_FIELDS)))


def campaign_week(campaign: Campaign, now: datetime | None = None) -> str:
    """The current ISO week in the campaign's zone, as a label (``2026-W47``)."""
    return current_week(campaign_zone(campaign.timezone), now).label


def summary_url(campaign: Campaign, week: str | None = None, fmt: str = "html") -> str:
    return f"/api/v1/campaigns/{campaign.slug}/summary?week={week or campaign_week(campaign)}&format={fmt}"


@dataclass(frozen=True)
class SummaryLinks:
    """Where the weekly-summary links point: the latest ISO week with shots (the current
    week for an empty campaign), and the current week too when that is another week."""

    week: str
    url: str
    this_week: str | None = None
    this_week_url: str | None = None


def summary_links(campaign: Campaign, latest_taken_at: datetime | None, now: datetime | None = None) -> SummaryLinks:
    zone = campaign_zone(campaign.timezone)
    this_week = campaign_week(campaign, now)
    latest = local_time(latest_taken_at, zone)
    week = IsoWeek.containing(latest, zone).label if latest else this_week
    if week == this_week:
        return SummaryLinks(week, summary_url(campaign, week))
    return SummaryLinks(week, summary_url(campaign, week), this_week, summary_url(campaign, this_week))


def campaign_summary_links(session: Session, campaign: Campaign, now: datetime | None = None) -> SummaryLinks:
    return summary_links(campaign, store.latest_taken_at(session, campaign.id), now)


# -------------------------------------------------------------------------- pages


@dataclass
class CampaignCard:
    campaign: Campaign
    counts: dict[str, int]
    latest_local: str  # empty for a campaign without shots
    summary: SummaryLinks

    @property
    def total(self) -> int:
        return sum(self.counts.values())


def campaign_cards(session: Session) -> list[CampaignCard]:
    return [
        CampaignCard(c, counts, local_text(latest, campaign_zone(c.timezone)), summary_links(c, latest))
        for c, counts, latest in store.campaigns_with_status_counts(session)
    ]


@dataclass
class Overview:
    campaign: Campaign
    counts: dict[str, int]
    flag_counts: list[FlagCodeCount]
    figures: dict[str, dict[str, Any]]
    regime_options: list[tuple[str, str]]
    regime_axes: tuple[str, str]
    live_cursor: int
    latest_outside: list[dict[str, Any]]  # newest first, as live rows (the server's text)
    outside_columns: list[tuple[str, str]]  # (column, label)
    outside_rows: int = LATEST_OUTSIDE_ROWS
    excluded_count: int = 0  # shots kept but counted nowhere on the page

    @property
    def total(self) -> int:
        return sum(self.counts.values())


# Charts the overview loads from /campaigns/{slug}/charts/{name}.json after the page.
CHART_FEEDS = {
    "timeline": timeline_figure,
    "phase": phase_figure,
    "calibration": calibration_figure,
}


def phase_facts(summary: PhaseSummary) -> list[tuple[str, str]]:
    sample = f" (from 1 in {summary.thinned_step} shots)" if summary.thinned_step > 1 else ""
    window = NEIGHBOUR_WINDOW_SHOTS - 1
    j = summary.jitter
    facts = [
        ("shots with a measured phase", format_number(summary.shots_with_phase)),
        (
            "measured shot-to-shot phase jitter (robust spread about the circular mean "
            f"of {window} neighbouring shots)",
            f"{format_number(j.measured_phase_std_rad)} rad{sample}",
        ),
        (
            "expected phase jitter (shot-to-shot)",
            f"{format_number(j.expected_phase_jitter_rad)} rad",
        ),
    ]
    for path in JITTER_SOURCES:
        if path not in j.spread_pct:
            continue
        facts.append(
            (
                f"\u2003from {JITTER_SOURCE_NAMES[path]}: {format_number(j.spread_pct[path])} % shot-to-shot "
                f"\u00d7 {format_number(j.phase_per_ln_rad.get(path))} rad per unit ln",
                f"{format_number(j.expected_by_source_rad.get(path))} rad",
            )
        )
    return facts


def calibration_facts(summary: CalibrationSummary) -> list[tuple[str, str]]:
    offset = summary.median_density_offset
    sample = f" (from 1 in {summary.thinned_step} shots)" if summary.thinned_step > 1 else ""
    return [
        ("shots with a measured frequency", format_number(summary.shots_with_frequency)),
        ("implied density offset (median)", MISSING if offset is None else f"{format_number(100 * offset)} %{sample}"),
    ]


# Chart feeds by campaign, chart and parameters, kept while the campaign's change marks
# stand still: every viewer of an overview shares one computation per new shot, which reads
# only the new shots when nothing else changed (feed_reads).
_FEEDS: dict[tuple[Any, ...], tuple[tuple[Any, ...], dict[str, Any]]] = {}
_FEEDS_MAX = 64


def chart_feed(session: Session, campaign: Campaign, name: str, **params: Any) -> dict[str, Any]:
    """A chart drawn from the shots stored up to now, that cursor for the live feed, and
    the figures shown beside it (computed once per change of the campaign's marks)."""
    marks = campaign_marks(session, campaign)
    where = (str(session.get_bind().engine.url), campaign.id, name, tuple(sorted(params.items())))
    cached = _FEEDS.get(where)
    if cached is not None and cached[0] == marks:
        return cached[1]
    feed = _chart_feed(session, campaign, name, marks, **params)
    if len(_FEEDS) >= _FEEDS_MAX:
        _FEEDS.clear()
    _FEEDS[where] = (marks, feed)
    return feed


def _page_series() -> dict[str, SeriesRequest]:
    """The series the feeds of a page read, by chart (series that thin alike share one read,
    feed_reads; built when asked, from the module caps of the moment)."""
    return {
        "timeline": timeline_series(),
        "phase": phase_series(),
        "calibration": map_series(*CALIBRATION_FIELDS),
        "regime": map_series(*DEFAULT_REGIME_AXES),
    }


# The shots that have the values of each chart a page loads at once, by status: one pass over
# the campaign that the page's feeds share (the first to need it counts, the others wait for it).
_COUNTED_VALUES = CachedReader.values_counted(_page_series())


def _chart_feed(
    session: Session, campaign: Campaign, name: str, marks: tuple[Any, ...], **params: Any
) -> dict[str, Any]:
    reader = CachedReader(session, campaign, campaign_reads(session, campaign, marks), shared=_page_series())
    cursor = reader.reads.upto_pk
    if name == "regime" and (params["x"], params["y"]) != DEFAULT_REGIME_AXES:
        # Counted and read for itself, and not kept: the reads of every pair a viewer looks at would pile up.
        return {"figure": regime_figure(session, campaign, upto_pk=cursor, **params), "cursor": cursor}
    totals = reader.value_counts(_COUNTED_VALUES)[name]
    if name == "phase":  # the chart and its figures from one read of the phases
        data = phase_data(session, campaign, cursor, totals=totals, reader=reader)
        return {
            "figure": phase_figure(session, campaign, upto_pk=cursor, data=data, reader=reader),
            "cursor": cursor,
            "facts": phase_facts(phase_summary(session, campaign, data=data)),
        }
    if name == "calibration":  # the chart's counts are the figures' count too
        return {
            "figure": calibration_figure(session, campaign, upto_pk=cursor, totals=totals, reader=reader),
            "cursor": cursor,
            "facts": calibration_facts(calibration_summary(session, campaign, cursor, totals=totals, reader=reader)),
        }
    if name == "regime":
        figure = regime_figure(session, campaign, upto_pk=cursor, totals=totals, reader=reader, **params)
        return {"figure": figure, "cursor": cursor}
    figure = timeline_figure(session, campaign, upto_pk=cursor, totals=totals, reader=reader)
    return {"figure": figure, "cursor": cursor}


def regime_feed(session: Session, campaign: Campaign, x: str, y: str) -> dict[str, Any]:
    """The regime map of any two numeric columns; InvalidInput names an axis that is not one."""
    problems = [
        (axis, "not a numeric input or output")
        for axis, name in (("x", x), ("y", y))
        if name not in store.NUMERIC_COLUMNS
    ]
    if problems:
        raise InvalidInput(problems, f"cannot plot {', '.join(n for n in (x, y) if n not in store.NUMERIC_COLUMNS)}")
    return chart_feed(session, campaign, "regime", x=x, y=y)


LIVE_EXTRA_MAX = 4


def live_extra(fields: str) -> list[str]:
    """The numeric columns a live page asks for besides the usual ones (the regime map's axes)."""
    return [f for f in fields.split(",") if f in store.NUMERIC_COLUMNS][:LIVE_EXTRA_MAX]


def regime_options() -> list[tuple[str, str]]:
    """(column, label) of every numeric input and output, inputs first."""
    return [(name, field_label(name)) for name in store.NUMERIC_COLUMNS]


@dataclass(frozen=True)
class CampaignCounts:
    """Shots by status and by flag code, with the latest shot id they were counted at."""

    latest_pk: int
    counts: dict[str, int]
    flags: list[FlagCodeCount]
    latest_outside: list[ShotRow]


# Counts by campaign, recomputed only when the campaign's change marks move (a new shot, an
# audited write, a running job's progress), so the steady poll reads three index seeks
# whatever the campaign's size. Keyed by the database too: one process may serve several.
_COUNTS: dict[tuple[str, int], tuple[tuple[Any, ...], CampaignCounts]] = {}
_COUNTS_MAX_CAMPAIGNS = 256


def campaign_counts(session: Session, campaign: Campaign) -> CampaignCounts:
    marks = campaign_marks(session, campaign)
    where = (str(session.get_bind().engine.url), campaign.id)
    cached = _COUNTS.get(where)
    if cached is not None and cached[0] == marks:
        return cached[1]
    reads = campaign_reads(session, campaign, marks)  # after new shots only, only they are counted
    upto = reads.upto_pk
    counts = reads.read(
        ("status counts",),
        1,
        lambda after: store.status_counts(session, campaign.id, upto_pk=upto, after_pk=after),
        lambda old, new: {status: n + new.get(status, 0) for status, n in old.items()},
    )
    flags = reads.read(
        ("flag counts",),
        1,
        lambda after: store.flag_counts(session, campaign.id, upto_pk=upto, after_pk=after),
        _added_flag_counts,
    )
    fresh = CampaignCounts(
        upto,
        dict(counts),
        flag_code_counts(session, campaign, flags),
        store.shot_page(
            session,
            campaign.id,
            store.ShotFilter(status="outside"),
            sort="taken_at",
            descending=True,
            offset=0,
            limit=LATEST_OUTSIDE_ROWS,
            value_columns=OUTSIDE_VALUE_COLUMNS,
        ),
    )
    if len(_COUNTS) >= _COUNTS_MAX_CAMPAIGNS:
        _COUNTS.clear()
    _COUNTS[where] = (marks, fresh)
    return fresh


def _added_flag_counts(old: list[store.FlagCount], new: list[store.FlagCount]) -> list[store.FlagCount]:
    shots: dict[tuple[str, str], int] = {}
    for row in (*old, *new):
        shots[row.code, row.severity] = shots.get((row.code, row.severity), 0) + row.shots
    return [store.FlagCount(code, severity, n) for (code, severity), n in sorted(shots.items())]


def warm_overviews(factory: Callable[[], Session], campaigns: int) -> None:
    """Compute the counts and chart feeds of the ``campaigns`` campaigns with the latest shots into
    the caches above (at start-up, in the background: at 100,000 shots a read of the whole
    campaign costs about 0.4 s of CPU, which the first viewer after a restart would wait for)."""
    try:
        with factory() as session:
            ids = [c.id for c in store.campaigns_by_latest_shot(session, campaigns)]
        for campaign_id in ids:
            with factory() as session:
                campaign = session.get(Campaign, campaign_id)
                if campaign is None:  # deleted meanwhile
                    continue
                campaign_counts(session, campaign)
                for name in CHART_FEEDS:
                    chart_feed(session, campaign, name)
                regime_feed(session, campaign, *DEFAULT_REGIME_AXES)
    except Exception:  # the warm-up only saves time: a viewer reads afresh what it left out
        log.exception("warming the overviews failed")


def overview(session: Session, campaign: Campaign, shot_url: str | None = None) -> Overview:
    counted = campaign_counts(session, campaign)
    flags = counted.flags
    return Overview(
        campaign=campaign,
        counts=dict(counted.counts),
        flag_counts=flags,
        figures={"flags": flag_figure(flags)},
        regime_options=regime_options(),
        regime_axes=DEFAULT_REGIME_AXES,
        live_cursor=counted.latest_pk,
        latest_outside=live_rows(
            counted.latest_outside, campaign, shot_url or f"/campaigns/{quote(campaign.slug)}/shots/{{shot_id}}"
        ),
        outside_columns=[(name, field_label(name)) for name in OUTSIDE_VALUE_COLUMNS],
        excluded_count=store.excluded_count(session, campaign.id),
    )


# --------------------------------------------------------------------------- live


def live_rows(rows: Sequence[ShotRow], campaign: Campaign, shot_url: str) -> list[dict[str, Any]]:
    """New shots for open pages: chart values as numbers, and the table's text for each
    value and time from the server's own formatters (the script never formats a number)."""
    zone = campaign_zone(campaign.timezone)
    out = []
    for row in rows:
        out.append(
            {
                "pk": row.pk,
                "shot_id": row.shot_id,
                "url": shot_url.format(shot_id=row.shot_id),
                "taken_at": format_utc(row.taken_at),
                "t": chart_time(row.taken_at, zone),
                "taken_local": local_text(row.taken_at, zone),
                "revision": row.revision,
                "status": row.status,
                "seed_method": row.seed_method,
                "flags": [{"code": c, "severity": s} for c, s in row.flags],
                "notes": row.notes[:TABLE_NOTES_CHARS],
                "tags": row.tags,
                "values": {k: rounded(v) for k, v in row.values.items()},
                "text": {k: format_number(v) for k, v in row.values.items()},
            }
        )
    return out


def live_update(
    session: Session, campaign: Campaign, since: int, shot_url: str, extra_columns: Sequence[str] = ()
) -> dict[str, Any]:
    """Counts now, and the shots stored after the cursor ``since`` (oldest first, bounded)."""
    columns = tuple(dict.fromkeys((*LIVE_VALUE_COLUMNS, *extra_columns)))
    counted = campaign_counts(session, campaign)
    latest = counted.latest_pk
    rows = (
        store.shots_after(session, campaign.id, since, limit=LIVE_MAX_ROWS, value_columns=columns)
        if since < latest
        else []
    )
    cursor = rows[-1].pk if rows else max(since, 0)
    if not rows and since > latest:
        cursor = latest  # the cursor ran past the campaign (e.g. a deleted shot): resync
    flags = counted.flags
    counts = counted.counts
    return {
        "cursor": cursor,
        "more": cursor < latest,
        "counts": counts,
        "counts_text": {
            **{k: format_number(v) for k, v in counts.items()},
            "total": format_number(sum(counts.values())),
        },
        "flag_counts": {f.code: f.by_severity for f in flags},
        "shots": live_rows(rows, campaign, shot_url),
    }
