"""The weekly summary as one self-contained HTML report: inline CSS (the palette's
custom properties) and SVG charts, no script, nothing fetched, prints cleanly on A4."""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import Any
from zoneinfo import ZoneInfo

import numpy as np
from markupsafe import Markup, escape

from app.presentation.templates import render
from app.services.export_table import NOT_EVALUATED
from app.services.phase_spread import JITTER_SOURCE_NAMES, NEIGHBOUR_WINDOW_SHOTS
from app.services.weekly import report_charts as charts
from app.services.weekly.summary import STATUSES, FlaggedShot, WeeklySummary, export_file_name
from app.store.exports import FlagRow
from app.times import campaign_zone, local_text, local_wall_texts

# Flagged shots listed in the HTML report per status; the CSV/JSON exports list all.
HTML_FLAGGED_LIMIT = 500


def _charts(summary: WeeklySummary) -> dict[str, Any]:
    shots = summary.shots
    tz = campaign_zone(summary.timezone)
    start = summary.start_local
    days = [(start + timedelta(days=d)) for d in range(7)]
    day_labels = [d.strftime("%a %d %b") for d in days]
    local_day = np.array([(t.astimezone(tz).date() - start.date()).days for t in shots.taken_at], dtype=int)
    hours = np.array([(t - summary.start_utc).total_seconds() / 3600.0 for t in shots.taken_at], dtype=float)
    week_hours = (summary.end_utc - summary.start_utc).total_seconds() / 3600.0
    day_ticks = [
        ((datetime.combine(d.date(), datetime.min.time(), tzinfo=tz) - start).total_seconds() / 3600.0, label)
        for d, label in zip(days, day_labels, strict=True)
    ]
    groups = [*STATUSES, NOT_EVALUATED]
    per_day = {g: [int(np.count_nonzero((local_day == d) & (shots.status == g))) for d in range(7)] for g in groups}
    per_day = {g: v for g, v in per_day.items() if g in STATUSES or any(v)}
    density = shots.inputs["plasma.density_cm3"]
    finite_density = density[np.isfinite(density)]
    # From the median: one wild density (a wrong unit) must not move every offset.
    density_offset_pct = 100.0 * (density / np.median(finite_density) - 1.0) if finite_density.size else density
    return {
        "per_day": charts.stacked_bars_svg(
            day_labels, per_day, title="Shots per day by status", x_label=f"day ({summary.timezone})", y_label="shots"
        ),
        "growth": charts.scatter_svg(
            hours,
            shots.outputs["growth_margin_efolds"],
            shots.status,
            title="Growth margin over the week",
            x_label=f"time ({summary.timezone})",
            y_label="growth margin [e-folds]",
            x_range=(0.0, week_hours),
            x_ticks=day_ticks,
        ),
        "phase": charts.scatter_svg(
            density_offset_pct,
            shots.inputs["measured.modulation_phase_rad"],
            shots.status,
            title="Measured phase against density offset",
            x_label="density offset from the week's median [%]",
            y_label="measured phase [rad]",
        ),
        "mismatch": charts.histogram_svg(
            shots.outputs["frequency_mismatch_pct"],
            title="Frequency mismatch (measured against expected)",
            x_label="frequency mismatch [%]",
        ),
    }


@dataclass
class SentenceGroup:
    """One flag sentence and every shot of one status that carries it (time order)."""

    code: str
    severity: str
    message: str
    shots: list[FlaggedShot] = field(default_factory=list)


def sentence_groups(shots: list[FlaggedShot]) -> list[SentenceGroup]:
    """The shots grouped by identical flag sentences, the most frequent first: the report
    says each sentence once, then lists its shots. A shot without a stored flag is a
    group of its own kind (empty code)."""
    groups: dict[tuple[str, str, str], SentenceGroup] = {}
    for shot in shots:
        reasons: list[FlagRow | None] = list(shot.reasons) or [None]
        for f in reasons:
            key = (f.code, f.severity, f.message) if f is not None else ("", "", "")
            group = groups.get(key)
            if group is None:
                group = groups[key] = SentenceGroup(*key)
            group.shots.append(shot)
    return sorted(groups.values(), key=lambda g: (-len(g.shots), g.code, g.message))


# One sentence and its shots, as the report's markup has them (written here, not in the template: a
# week of 10,000 flagged shots has over 10,000 sentences, and the template's loop took a third of a second).
SENTENCE_HTML = (
    '<div class="sentence">\n'
    '  <p>{said}    <span class="note">— {count} shot{plural}</span></p>\n'
    '  <p class="shots">{shots}\n{more}</p>\n'
    "</div>"
)
NO_STORED_FLAG_HTML = '<span class="note">no stored flag</span>'


def shot_cells(shots: list[FlaggedShot], zone: ZoneInfo) -> dict[int, str]:
    """Each shot as the report lists it, its local time as a tooltip (by ``id`` of the shot), made once
    per shot: a week of 10,000 flagged shots lists 30,000 of them under their sentences."""
    local = local_wall_texts([shot.taken_at for shot in shots], zone)  # digits, "-", ":" and " ": nothing to escape
    return {
        id(shot): f'<code title="{at}">{escape(shot.shot_id)}</code>' for shot, at in zip(shots, local, strict=True)
    }


def sentences_html(groups: list[SentenceGroup], cells: dict[int, str], limit: int) -> Markup:
    """The sentences of one status, each with the first ``limit`` of its shots."""
    blocks = []
    kinds: dict[tuple[str, str], str] = {}  # a handful of codes and severities in thousands of sentences
    for g in groups:
        kind = kinds.get((g.code, g.severity))
        if kind is None:
            code, severity = escape(g.code), escape(g.severity)
            kind = f'<code>{code}</code> <span class="status {severity}">{severity}</span>: '
            kinds[g.code, g.severity] = kind
        said = f"{kind}{escape(g.message)}" if g.code else NO_STORED_FLAG_HTML
        count = len(g.shots)
        blocks.append(
            SENTENCE_HTML.format(
                said=said,
                count=count,
                plural="" if count == 1 else "s",
                shots=", ".join([cells[id(shot)] for shot in g.shots[:limit]]),
                more=f'<span class="note">and {count - limit} more</span>' if count > limit else "",
            )
        )
    return Markup("\n".join(blocks))


def render_html(summary: WeeklySummary, *, links: bool = False) -> str:
    """The report; ``links``: it is served by the API, so the week's other files are links relative to
    its own address (a file written by the CLI names them instead)."""
    flagged = {status: [s for s in summary.flagged_shots if s.status == status] for status in ("outside", "marginal")}
    zone = campaign_zone(summary.timezone)
    cells = shot_cells(summary.flagged_shots, zone)
    sentences = {
        status: sentences_html(sentence_groups(rows), cells, HTML_FLAGGED_LIMIT) for status, rows in flagged.items()
    }
    return render(
        "summary_report.html",
        s=summary,
        charts=_charts(summary),
        flagged=flagged,
        sentences=sentences,
        flagged_limit=HTML_FLAGGED_LIMIT,
        local=lambda t: local_text(t, zone),
        phase_window_shots=NEIGHBOUR_WINDOW_SHOTS - 1,
        jitter_sources=list(JITTER_SOURCE_NAMES.items()),
        file_stem=export_file_name(summary.campaign_slug, summary.week.label, "").rstrip("."),
        summary_csv=export_file_name(summary.campaign_slug, summary.week.label, "csv", "summary"),
        links=links,
    )
