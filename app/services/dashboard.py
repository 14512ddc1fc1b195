"""What the dashboard pages show: page data and Plotly figure dicts.

Charts are plain figure dicts (``{"data": [...], "layout": {...}}``) that the static
JavaScript hands to Plotly. Every point trace carries ``meta`` = {status, x, y} naming
the fields it plots, so live updates can extend the right traces without knowing the
chart. Palette, status shapes and layout defaults come from app.services.charts.
Large series are decimated in SQL (app.store.dashboard).
"""

from __future__ import annotations

import html
import math
from collections.abc import Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime, timezone
from typing import Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

import numpy as np
from sqlalchemy.orm import Session

from app.services.charts import INK, OKABE_ITO, SEVERITY_STYLES, STATUS_STYLES, axis, layout
from app.services.phase_spread import NEIGHBOUR_WINDOW_SHOTS, PhaseJitter, circular_mean_rad, phase_jitter
from app.services.summary import OUTPUT_UNITS, IsoWeek, input_path, unit_of
from app.store import dashboard as store
from app.store.dashboard import STATUSES, ShotFilter, ShotRow
from app.store.summary import EVALUATION_OUTPUT_COLUMNS, SHOT_INPUT_COLUMNS
from app.tables import Campaign, Shot

# Limits that keep a 100,000-shot campaign's pages small and quick.
# Plotly's WebGL traces (scattergl) compile code at run time, which the pages' CSP
# forbids (no 'unsafe-eval'), so every chart is SVG and long series are thinned.
TIMELINE_NOMINAL_POINTS = 1500
FLAGGED_POINTS_CAP = 1000  # per flagged status and chart; past it, 1 in k over the whole range
SCATTER_NOMINAL_POINTS = 3000
PHASE_MAX_BINS = 80
PHASE_MIN_SHOTS_PER_BIN = 5
PHASE_MAX_ROWS = 20000  # shots the phase figures are computed from; past it, 1 in k
TABLE_PAGE_SIZE = 100
LIVE_MAX_ROWS = 200

TIMELINE_FIELDS = (
    "plasma_density_cm3", "driver_population", "seed_position_mm", "driver_sigma_z_mm", "driver_sigma_r_mm",
)
TABLE_VALUE_COLUMNS = (
    "plasma_density_cm3",
    "driver_population",
    "driver_sigma_z_mm",
    "seed_position_mm",
    "efolds_exit",
    "growth_margin_efolds",
)
PHASE_FIELD = "measured_modulation_phase_rad"
CALIBRATION_FIELDS = ("plasma_frequency_ghz", "measured_modulation_freq_ghz")
# Everything a live update may need to extend the overview's charts and the table.
LIVE_VALUE_COLUMNS = tuple(dict.fromkeys((*TIMELINE_FIELDS, *TABLE_VALUE_COLUMNS, PHASE_FIELD, *CALIBRATION_FIELDS)))
DEFAULT_REGIME_AXES = ("plasma_density_cm3", "efolds_exit")
SEED_METHODS = ("ionization_front", "electron_bunch", "none")

# Short axis and column titles for the key quantities (the full name is in hover and tooltips).
SHORT_LABELS = {
    "plasma_density_cm3": "density [cm⁻³]",
    "driver_population": "population",
    "seed_position_mm": "seed position [mm]",
    "driver_sigma_z_mm": "σ_z [mm]",
    "driver_sigma_r_mm": "σ_r [mm]",
    "efolds_exit": "e-folds at exit",
    "growth_margin_efolds": "growth margin [e-folds]",
}


# ------------------------------------------------------------------------ labels & time


def field_key(column: str) -> str:
    """The public name of a numeric column: dotted input path or output name."""
    return column if column in EVALUATION_OUTPUT_COLUMNS else input_path(column)


def field_unit(column: str) -> str:
    unit = OUTPUT_UNITS.get(column) if column in EVALUATION_OUTPUT_COLUMNS else unit_of(input_path(column))
    return "" if unit in (None, "1", "-", "\u2013") else unit


def field_label(column: str) -> str:
    unit = field_unit(column)
    return f"{field_key(column)} [{unit}]" if unit else field_key(column)


def campaign_zone(campaign: Campaign) -> ZoneInfo:
    try:
        return ZoneInfo(campaign.timezone or "UTC")
    except (ZoneInfoNotFoundError, ValueError):
        return ZoneInfo("UTC")


def local_time(moment: datetime | None, zone: ZoneInfo) -> datetime | None:
    moment = store.as_utc(moment)
    return moment.astimezone(zone) if moment else None


def chart_time(moment: datetime | None, zone: ZoneInfo) -> str | None:
    """Plotly date axes have no zone: local wall-clock text, axis titled with the zone."""
    local = local_time(moment, zone)
    return local.replace(tzinfo=None).isoformat(sep=" ", timespec="seconds") if local else None


def current_week(campaign: Campaign, now: datetime | None = None) -> str:
    return IsoWeek.containing(now or datetime.now(timezone.utc), campaign_zone(campaign)).label


def summary_url(campaign: Campaign, week: str | None = None, fmt: str = "html") -> str:
    return f"/api/v1/campaigns/{campaign.slug}/summary?week={week or current_week(campaign)}&format={fmt}"


@dataclass(frozen=True)
class SummaryLinks:
    """Where the weekly-summary links point: the latest ISO week with shots (the current
    week for an empty campaign), and the current week too when that is another week."""

    week: str
    url: str
    this_week: str | None = None
    this_week_url: str | None = None


def summary_links(campaign: Campaign, latest_taken_at: datetime | None, now: datetime | None = None) -> SummaryLinks:
    this_week = current_week(campaign, now)
    latest = local_time(latest_taken_at, campaign_zone(campaign))
    week = IsoWeek.containing(latest, campaign_zone(campaign)).label if latest else this_week
    if week == this_week:
        return SummaryLinks(week, summary_url(campaign, week))
    return SummaryLinks(week, summary_url(campaign, week), this_week, summary_url(campaign, this_week))


def campaign_summary_links(session: Session, campaign: Campaign, now: datetime | None = None) -> SummaryLinks:
    return summary_links(campaign, store.latest_taken_at(session, campaign.id), now)


def format_number(value: Any, digits: int = 4) -> str:
    """How numbers read on the pages: 4 significant digits, a dash for none."""
    if value is None:
        return "\u2014"
    if isinstance(value, bool):
        return str(value).lower()
    if isinstance(value, int):
        return f"{value:,}" if abs(value) >= 10000 else str(value)
    if isinstance(value, float):
        return f"{value:.{digits}g}" if math.isfinite(value) else "\u2014"
    return str(value)


def _number(value: Any) -> float | None:
    if value is None:
        return None
    value = float(value)
    return float(f"{value:.6g}") if math.isfinite(value) else None


def _numbers(values: Sequence[Any]) -> list[float | None]:
    return [_number(v) for v in values]


def text_for_chart(value: str) -> str:
    """Plotly renders a few HTML-like tags in hover text: escape user text first."""
    return html.escape(value, quote=False)


# -------------------------------------------------------------------------- figures


def _point_trace(
    status: str,
    x: list[Any],
    y: list[Any],
    ids: list[str],
    *,
    x_field: str,
    y_field: str,
    total: int,
    axes: tuple[str, str] = ("x", "y"),
    showlegend: bool = True,
    note: str = "",
) -> dict[str, Any]:
    style = STATUS_STYLES[status]
    shown = f"{len(x):,} of {total:,}" if len(x) != total else f"{total:,}"
    return {
        "type": "scatter",
        "mode": "markers",
        "name": f"{status} ({shown}{note})",
        "legendgroup": status,
        "showlegend": showlegend,
        "x": x,
        "y": y,
        "customdata": ids,
        "xaxis": axes[0],
        "yaxis": axes[1],
        "marker": {
            "color": style.colour,
            "symbol": style.symbol,
            "size": 7 if status == "nominal" else 8,
            "opacity": 0.75 if status == "nominal" else 0.95,
            "line": {"width": 1, "color": style.colour},
        },
        "hovertemplate": "%{customdata}<br>x %{x}<br>y %{y:.5g}<extra>" + status + "</extra>",
        "meta": {"status": status, "x": x_field, "y": y_field},
    }


@dataclass
class _StatusSeries:
    status: str
    series: store.Series


def _series_by_status(
    session: Session,
    campaign: Campaign,
    columns: Sequence[str],
    *,
    nominal_points: int,
    required: Sequence[str] = (),
    upto_pk: int | None = None,
) -> list[_StatusSeries]:
    """Nominal shots thinned to ``nominal_points``; flagged shots all kept up to a cap."""
    wanted = {"shot_id": Shot.shot_id, "taken_at": Shot.taken_at}
    wanted.update({name: store.NUMERIC_COLUMNS[name] for name in columns})
    needed = [store.NUMERIC_COLUMNS[name] for name in required]
    totals = store.counts_with_values(session, campaign.id, needed, upto_pk=upto_pk)
    out = []
    for status in STATUSES:
        series = store.status_series(
            session,
            campaign.id,
            status,
            wanted,
            total=totals.get(status, 0),
            max_points=nominal_points if status == "nominal" else FLAGGED_POINTS_CAP,
            required=needed,
            upto_pk=upto_pk,
        )
        out.append(_StatusSeries(status, series))
    return out


def _series_note(item: _StatusSeries) -> str:
    return f", 1 in {item.series.step}" if item.series.step > 1 else ""


def timeline_figure(session: Session, campaign: Campaign, upto_pk: int | None = None) -> dict[str, Any]:
    """Key conditions against time, one panel each, flagged shots marked by shape and colour."""
    zone = campaign_zone(campaign)
    by_status = _series_by_status(session, campaign, TIMELINE_FIELDS, nominal_points=TIMELINE_NOMINAL_POINTS,
                                  upto_pk=upto_pk)
    panels = len(TIMELINE_FIELDS)
    gap = 0.04
    height = (1 - gap * (panels - 1)) / panels
    traces: list[dict[str, Any]] = []
    figure_layout = layout(height=190 * panels + 90, showlegend=True)
    # The same shots in every panel: their times and labels are written once.
    times = {item.status: [chart_time(t, zone) for t in item.series.columns["taken_at"]] for item in by_status}
    labels = {item.status: [text_for_chart(v) for v in item.series.columns["shot_id"]] for item in by_status}
    for i, name in enumerate(TIMELINE_FIELDS):
        axis_id = "" if i == 0 else str(i + 1)
        top = 1 - i * (height + gap)
        figure_layout[f"yaxis{axis_id}"] = axis(SHORT_LABELS.get(name, field_label(name)),
                                                domain=[top - height, top], exponentformat="power")
        figure_layout[f"xaxis{axis_id}"] = axis(
            f"taken at ({zone.key})" if i == panels - 1 else "",
            type="date",
            anchor=f"y{axis_id}",
            matches="x" if i else None,
            showticklabels=i == panels - 1,
        )
        for item in by_status:
            cols = item.series.columns
            traces.append(
                _point_trace(
                    item.status,
                    times[item.status],
                    _numbers(cols[name]),
                    labels[item.status],
                    x_field="taken_at",
                    y_field=name,
                    total=item.series.total,
                    axes=(f"x{axis_id}", f"y{axis_id}"),
                    showlegend=i == 0,
                    note=_series_note(item),
                )
            )
    for key in list(figure_layout):
        if key.startswith("xaxis") and figure_layout[key].get("matches") is None:
            figure_layout[key].pop("matches", None)
    return {"data": traces, "layout": figure_layout}


def regime_figure(session: Session, campaign: Campaign, x: str, y: str, upto_pk: int | None = None) -> dict[str, Any]:
    """Any two conditions or outputs against each other, coloured and shaped by status."""
    by_status = _series_by_status(
        session, campaign, tuple(dict.fromkeys((x, y))), nominal_points=SCATTER_NOMINAL_POINTS, required=(x, y),
        upto_pk=upto_pk,
    )
    traces = [
        _point_trace(
            item.status,
            _numbers(item.series.columns[x]),
            _numbers(item.series.columns[y]),
            [text_for_chart(s) for s in item.series.columns["shot_id"]],
            x_field=x,
            y_field=y,
            total=item.series.total,
            note=_series_note(item),
        )
        for item in by_status
    ]
    figure_layout = layout(
        height=520,
        xaxis=axis(field_label(x), exponentformat="power"),
        yaxis=axis(field_label(y), exponentformat="power"),
    )
    return {"data": traces, "layout": figure_layout}


@dataclass(frozen=True)
class PhaseSummary:
    shots_with_phase: int
    measured_phase_std_rad: float | None
    density_spread_pct: float | None
    phase_per_pct_density_rad: float | None
    expected_phase_jitter_rad: float | None
    thinned_step: int = 1  # the spreads come from about every k-th shot of a large campaign


def _phase_rows(session: Session, campaign: Campaign, upto_pk: int | None = None) -> store.PhaseRows:
    return store.phase_rows(session, campaign.id, max_rows=PHASE_MAX_ROWS, upto_pk=upto_pk)


def _jitter(rows: store.PhaseRows, part: slice = slice(None)) -> PhaseJitter:
    """The shared definition (app.services.phase_spread) over the shots with a measured phase."""
    as_array = lambda values: np.array(values[part], dtype=float)  # noqa: E731 - None becomes NaN
    return phase_jitter(as_array(rows.phase), as_array(rows.density), as_array(rows.phase_per_pct_density))


def phase_summary(session: Session, campaign: Campaign, upto_pk: int | None = None,
                  rows: store.PhaseRows | None = None) -> PhaseSummary:
    rows = rows if rows is not None else _phase_rows(session, campaign, upto_pk)
    jitter = _jitter(rows)
    return PhaseSummary(
        shots_with_phase=rows.total,
        measured_phase_std_rad=jitter.measured_phase_std_rad,
        density_spread_pct=jitter.density_spread_pct,
        phase_per_pct_density_rad=jitter.phase_per_pct_density_rad,
        expected_phase_jitter_rad=jitter.expected_phase_jitter_rad,
        thinned_step=rows.step,
    )


@dataclass(frozen=True)
class PhaseGroup:
    first_taken_at: datetime
    last_taken_at: datetime
    phase_mean_rad: float | None  # circular mean
    jitter: PhaseJitter


def phase_groups(session: Session, rows: store.PhaseRows) -> list[PhaseGroup]:
    """Consecutive shots (taken_at order) in at most PHASE_MAX_BINS groups of at least
    PHASE_MIN_SHOTS_PER_BIN shots where there are enough."""
    n = len(rows.pk)
    if n < 2:
        return []
    count = max(1, min(PHASE_MAX_BINS, n // PHASE_MIN_SHOTS_PER_BIN))
    edges = np.linspace(0, n, count + 1).round().astype(int).tolist()
    parts = [(lo, hi) for lo, hi in zip(edges[:-1], edges[1:]) if hi > lo]
    # Only the groups' first and last shots need their times (a few hundred, not every row).
    times = store.taken_at_of(session, [rows.pk[i] for lo, hi in parts for i in (lo, hi - 1)])
    phases = np.array(rows.phase, dtype=float)
    return [
        PhaseGroup(times[rows.pk[lo]], times[rows.pk[hi - 1]], circular_mean_rad(phases[lo:hi]),
                   _jitter(rows, slice(lo, hi)))
        for lo, hi in parts
    ]


def phase_figure(session: Session, campaign: Campaign, upto_pk: int | None = None,
                 rows: store.PhaseRows | None = None) -> dict[str, Any]:
    """Measured modulation phase against shot time, beside the jitter the density jitter predicts.

    Top: each shot's phase with, per group of consecutive shots, the group's circular mean ±
    the expected jitter (median phase per % density × shot-to-shot density jitter in %).
    Bottom: per group, the measured shot-to-shot phase jitter beside that expected jitter
    (both about running windows of neighbouring shots, app.services.phase_spread).
    """
    zone = campaign_zone(campaign)
    by_status = _series_by_status(
        session, campaign, (PHASE_FIELD,), nominal_points=TIMELINE_NOMINAL_POINTS, required=(PHASE_FIELD,),
        upto_pk=upto_pk,
    )
    groups = phase_groups(session, rows if rows is not None else _phase_rows(session, campaign, upto_pk))
    traces: list[dict[str, Any]] = []
    centres, upper, lower, measured_rms, expected = [], [], [], [], []
    for g in groups:
        mid = g.first_taken_at + (g.last_taken_at - g.first_taken_at) / 2
        jitter = g.jitter.expected_phase_jitter_rad
        banded = jitter is not None and g.phase_mean_rad is not None
        centres.append(chart_time(mid, zone))
        upper.append(_number(g.phase_mean_rad + jitter) if banded else None)
        lower.append(_number(g.phase_mean_rad - jitter) if banded else None)
        measured_rms.append(_number(g.jitter.measured_phase_std_rad))
        expected.append(_number(jitter))
    band = {"color": "rgba(0,158,115,0.55)", "width": 1, "shape": "hv"}
    traces.append({"type": "scatter", "mode": "lines", "x": centres, "y": lower, "line": band,
                   "name": "expected jitter band", "legendgroup": "band", "showlegend": False,
                   "hoverinfo": "skip", "xaxis": "x", "yaxis": "y"})
    traces.append({"type": "scatter", "mode": "lines", "x": centres, "y": upper, "line": band,
                   "fill": "tonexty", "fillcolor": "rgba(0,158,115,0.15)",
                   "name": "group mean \u00b1 jitter expected from shot-to-shot density jitter", "legendgroup": "band",
                   "hoverinfo": "skip", "xaxis": "x", "yaxis": "y"})
    for item in by_status:
        cols = item.series.columns
        traces.append(
            _point_trace(
                item.status,
                [chart_time(t, zone) for t in cols["taken_at"]],
                _numbers(cols[PHASE_FIELD]),
                [text_for_chart(s) for s in cols["shot_id"]],
                x_field="taken_at",
                y_field=PHASE_FIELD,
                total=item.series.total,
                note=_series_note(item),
            )
        )
    traces.append({"type": "scatter", "mode": "lines+markers", "x": centres, "y": measured_rms,
                   "name": "measured shot-to-shot phase jitter (per group)", "xaxis": "x2", "yaxis": "y2",
                   "line": {"color": INK, "width": 2}, "marker": {"symbol": "square", "size": 6}})
    traces.append({"type": "scatter", "mode": "lines", "x": centres, "y": expected,
                   "name": "expected shot-to-shot jitter (per group)", "xaxis": "x2", "yaxis": "y2",
                   "line": {"color": OKABE_ITO["bluish_green"], "width": 2, "dash": "dash"}})
    figure_layout = layout(
        height=560,
        xaxis=axis("", type="date", anchor="y", showticklabels=False),
        yaxis=axis("measured phase [rad]", domain=[0.42, 1.0]),
        xaxis2=axis(f"taken at ({zone.key})", type="date", anchor="y2", matches="x"),
        yaxis2=axis("shot-to-shot jitter [rad]", domain=[0.0, 0.32], rangemode="tozero"),
    )
    return {"data": traces, "layout": figure_layout}


@dataclass(frozen=True)
class CalibrationSummary:
    shots_with_frequency: int
    median_density_offset: float | None  # implied/set density − 1 (a fraction)


def calibration_summary(session: Session, campaign: Campaign) -> CalibrationSummary:
    n, offset = store.median_density_offset(session, campaign.id)
    return CalibrationSummary(n, offset)


def calibration_figure(session: Session, campaign: Campaign, upto_pk: int | None = None) -> dict[str, Any]:
    """Measured modulation frequency against the plasma frequency the set density predicts."""
    predicted, measured = CALIBRATION_FIELDS
    by_status = _series_by_status(
        session, campaign, CALIBRATION_FIELDS, nominal_points=SCATTER_NOMINAL_POINTS, required=CALIBRATION_FIELDS,
        upto_pk=upto_pk,
    )
    traces = []
    values: list[float] = []
    for item in by_status:
        xs = _numbers(item.series.columns[predicted])
        ys = _numbers(item.series.columns[measured])
        values.extend(v for v in (*xs, *ys) if v is not None)
        traces.append(
            _point_trace(
                item.status, xs, ys, [text_for_chart(s) for s in item.series.columns["shot_id"]],
                x_field=predicted, y_field=measured, total=item.series.total,
                note=_series_note(item),
            )
        )
    if values:
        lo, hi = min(values), max(values)
        traces.insert(0, {"type": "scatter", "mode": "lines", "x": [lo, hi], "y": [lo, hi],
                          "name": "measured = predicted", "hoverinfo": "skip",
                          "line": {"color": OKABE_ITO["sky_blue"], "dash": "dot", "width": 2}})
    figure_layout = layout(
        height=460,
        xaxis=axis("predicted plasma frequency [GHz]"),
        yaxis=axis("measured modulation frequency [GHz]"),
    )
    return {"data": traces, "layout": figure_layout}


@dataclass(frozen=True)
class FlagCodeCount:
    code: str
    by_severity: dict[str, int]

    @property
    def total(self) -> int:
        return sum(self.by_severity.values())


def flag_code_counts(session: Session, campaign: Campaign) -> list[FlagCodeCount]:
    counts: dict[str, dict[str, int]] = {}
    for row in store.flag_counts(session, campaign.id):
        counts.setdefault(row.code, {})[row.severity] = row.shots
    return [FlagCodeCount(code, counts[code]) for code in sorted(counts, key=lambda c: (-sum(counts[c].values()), c))]


def flag_figure(counts: Sequence[FlagCodeCount]) -> dict[str, Any]:
    """Shots per flag code, stacked by severity (colour and hatching)."""
    codes = [c.code for c in reversed(counts)]
    traces = []
    for severity, style in SEVERITY_STYLES.items():
        values = [c.by_severity.get(severity, 0) for c in reversed(counts)]
        if not any(values):
            continue
        traces.append({
            "type": "bar", "orientation": "h", "name": severity, "y": codes, "x": values,
            "marker": {"color": style["colour"], "line": {"color": INK, "width": 0.5},
                       "pattern": {"shape": style["pattern"], "fgcolor": "#ffffff", "fillmode": "overlay",
                                   "solidity": 0.25}},
            "hovertemplate": "%{y}: %{x} shots<extra>" + severity + "</extra>",
        })
    figure_layout = layout(
        height=max(180, 34 * len(codes) + 90),
        barmode="stack",
        xaxis=axis("shots"),
        yaxis=axis("", automargin=True),
        margin={"l": 150, "r": 20, "t": 30, "b": 45},
    )
    return {"data": traces, "layout": figure_layout}


# -------------------------------------------------------------------------- pages


@dataclass
class CampaignCard:
    campaign: Campaign
    counts: dict[str, int]
    latest_local: datetime | None
    summary: SummaryLinks

    @property
    def total(self) -> int:
        return sum(self.counts.values())


def campaign_cards(session: Session) -> list[CampaignCard]:
    return [
        CampaignCard(c, counts, local_time(latest, campaign_zone(c)), summary_links(c, latest))
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
    window = NEIGHBOUR_WINDOW_SHOTS
    return [
        ("shots with a measured phase", format_number(summary.shots_with_phase)),
        (f"measured shot-to-shot phase jitter (robust spread about a running circular mean of {window} neighbouring shots)",
         f"{format_number(summary.measured_phase_std_rad)} rad{sample}"),
        (f"shot-to-shot density jitter of those shots (robust spread about a running median of {window} neighbouring shots)",
         f"{format_number(summary.density_spread_pct)} %{sample}"),
        ("phase change per 1 % density (median)", f"{format_number(summary.phase_per_pct_density_rad)} rad/%"),
        ("expected phase jitter (shot-to-shot)", f"{format_number(summary.expected_phase_jitter_rad)} rad"),
    ]


def calibration_facts(summary: CalibrationSummary) -> list[tuple[str, str]]:
    offset = summary.median_density_offset
    return [
        ("shots with a measured frequency", format_number(summary.shots_with_frequency)),
        ("implied density offset (median)", "\u2014" if offset is None else f"{format_number(100 * offset)} %"),
    ]


# The numbers shown beside a chart, sent with it (so the page itself stays quick).
CHART_FACTS = {
    "phase": lambda session, campaign: phase_facts(phase_summary(session, campaign)),
    "calibration": lambda session, campaign: calibration_facts(calibration_summary(session, campaign)),
}


def chart_feed(session: Session, campaign: Campaign, name: str, **params: Any) -> dict[str, Any]:
    """A chart drawn from the shots stored up to now, that cursor for the live feed, and
    the figures shown beside it."""
    cursor = store.latest_shot_pk(session, campaign.id)
    if name == "phase":  # the chart and its figures from one read of the phases
        rows = _phase_rows(session, campaign, cursor)
        return {"figure": phase_figure(session, campaign, upto_pk=cursor, rows=rows), "cursor": cursor,
                "facts": phase_facts(phase_summary(session, campaign, rows=rows))}
    builder = regime_figure if name == "regime" else CHART_FEEDS[name]
    feed: dict[str, Any] = {"figure": builder(session, campaign, upto_pk=cursor, **params), "cursor": cursor}
    if name in CHART_FACTS:
        feed["facts"] = CHART_FACTS[name](session, campaign)
    return feed


def regime_options() -> list[tuple[str, str]]:
    """(column, label) of every numeric input and output, inputs first."""
    return [(name, field_label(name)) for name in store.NUMERIC_COLUMNS]


def overview(session: Session, campaign: Campaign) -> Overview:
    flags = flag_code_counts(session, campaign)
    return Overview(
        campaign=campaign,
        counts=store.status_counts(session, campaign.id),
        flag_counts=flags,
        figures={"flags": flag_figure(flags)},
        regime_options=regime_options(),
        regime_axes=DEFAULT_REGIME_AXES,
        live_cursor=store.latest_shot_pk(session, campaign.id),
    )


# --------------------------------------------------------------------------- table


class TableQueryError(ValueError):
    """A table filter could not be read; ``problems`` names each (parameter, reason)."""

    def __init__(self, problems: list[tuple[str, str]]):
        super().__init__("; ".join(f"{p}: {r}" for p, r in problems))
        self.problems = problems


@dataclass
class TableQuery:
    filter: ShotFilter
    sort: str = "taken_at"
    descending: bool = True
    page: int = 1
    # The parameters as given, to refill the form and build links.
    params: dict[str, str] = field(default_factory=dict)


def _parse_local_datetime(text: str, zone: ZoneInfo) -> datetime:
    moment = datetime.fromisoformat(text.strip().replace("Z", "+00:00"))
    if moment.tzinfo is None:
        moment = moment.replace(tzinfo=zone)
    return moment.astimezone(timezone.utc)


def parse_table_query(params: Mapping[str, str], campaign: Campaign, known_flag_codes: Sequence[str]) -> TableQuery:
    """Read the table's query parameters; unknown values are reported, not ignored."""
    zone = campaign_zone(campaign)
    problems: list[tuple[str, str]] = []
    given = {k: v.strip() for k, v in params.items() if isinstance(v, str) and v.strip()}
    flt = ShotFilter()
    if "status" in given:
        if given["status"] in STATUSES:
            flt.status = given["status"]
        else:
            problems.append(("status", f"choose one of {', '.join(STATUSES)}"))
    if "flag" in given:
        if given["flag"] in known_flag_codes:
            flt.flag_code = given["flag"]
        else:
            problems.append(("flag", f"unknown flag code {given['flag']!r}"))
    if "seed" in given:
        if given["seed"] in SEED_METHODS:
            flt.seed_method = given["seed"]
        else:
            problems.append(("seed", f"choose one of {', '.join(SEED_METHODS)}"))
    for name, attr in (("from", "taken_from"), ("to", "taken_to")):
        if name in given:
            try:
                setattr(flt, attr, _parse_local_datetime(given[name], zone))
            except ValueError:
                problems.append((name, "write a date and time, e.g. 2026-11-17T09:00"))
    if flt.taken_from and flt.taken_to and flt.taken_from >= flt.taken_to:
        problems.append(("to", "must be later than 'from'"))
    if "q" in given:
        if len(given["q"]) > 200:
            problems.append(("q", "at most 200 characters"))
        else:
            flt.text = given["q"]
    query = TableQuery(flt, params=given)
    if "sort" in given:
        if given["sort"] in store.SORT_COLUMNS:
            query.sort = given["sort"]
        else:
            problems.append(("sort", f"cannot sort by {given['sort']!r}"))
    if "dir" in given:
        if given["dir"] in ("asc", "desc"):
            query.descending = given["dir"] == "desc"
        else:
            problems.append(("dir", "asc or desc"))
    if "page" in given:
        try:
            query.page = int(given["page"])
            if query.page < 1:
                raise ValueError
        except ValueError:
            problems.append(("page", "a whole number from 1"))
    if problems:
        raise TableQueryError(problems)
    return query


@dataclass
class TablePage:
    query: TableQuery
    rows: list[ShotRow]
    total: int
    page: int
    pages: int
    page_size: int
    value_columns: tuple[str, ...]
    live_cursor: int

    @property
    def first_index(self) -> int:
        return (self.page - 1) * self.page_size + 1 if self.total else 0

    @property
    def last_index(self) -> int:
        return min(self.page * self.page_size, self.total)


def table_page(session: Session, campaign: Campaign, query: TableQuery) -> TablePage:
    total = store.count_shots(session, campaign.id, query.filter)
    pages = max(1, -(-total // TABLE_PAGE_SIZE))
    page = min(query.page, pages)
    rows = store.shot_page(
        session,
        campaign.id,
        query.filter,
        sort=query.sort,
        descending=query.descending,
        offset=(page - 1) * TABLE_PAGE_SIZE,
        limit=TABLE_PAGE_SIZE,
        value_columns=TABLE_VALUE_COLUMNS,
    )
    return TablePage(query, rows, total, page, pages, TABLE_PAGE_SIZE, TABLE_VALUE_COLUMNS,
                     store.latest_shot_pk(session, campaign.id))


# --------------------------------------------------------------------------- CSV


CSV_VALUE_COLUMNS: tuple[str, ...] = tuple(
    c for c in (*SHOT_INPUT_COLUMNS, *EVALUATION_OUTPUT_COLUMNS) if c in store.NUMERIC_COLUMNS
)


def _csv_text(value: str) -> str:
    """Keep spreadsheets from running cell text as a formula."""
    return "'" + value if value[:1] in ("=", "+", "-", "@", "\t", "\r") else value


def csv_header() -> list[str]:
    return ["shot_id", "taken_at", "revision", "status", "flags", "driver.species", "seed.method", "notes", "tags",
            *(field_key(c) for c in CSV_VALUE_COLUMNS)]


def csv_rows(session: Session, campaign: Campaign, query: TableQuery) -> Iterator[list[Any]]:
    """The filtered set, every row, in the table's order (UTC times, numbers unrounded)."""
    for row in store.iter_filtered_shots(
        session, campaign.id, query.filter, value_columns=CSV_VALUE_COLUMNS,
        sort=query.sort, descending=query.descending,
    ):
        yield [
            _csv_text(row.shot_id),
            row.taken_at.isoformat().replace("+00:00", "Z"),
            row.revision,
            row.status,
            ";".join(f"{code}:{severity}" for code, severity in row.flags),
            row.species,
            row.seed_method,
            _csv_text(row.notes),
            _csv_text(";".join(row.tags)),
            *("" if row.values[c] is None else repr(float(row.values[c])) for c in CSV_VALUE_COLUMNS),
        ]


# --------------------------------------------------------------------------- live


def live_rows(rows: Sequence[ShotRow], campaign: Campaign, shot_url: str) -> list[dict[str, Any]]:
    zone = campaign_zone(campaign)
    out = []
    for row in rows:
        local = local_time(row.taken_at, zone)
        out.append({
            "pk": row.pk,
            "shot_id": row.shot_id,
            "url": shot_url.format(shot_id=row.shot_id),
            "taken_at": row.taken_at.isoformat().replace("+00:00", "Z"),
            "t": chart_time(row.taken_at, zone),
            "taken_local": local.strftime("%Y-%m-%d %H:%M:%S") if local else "",
            "revision": row.revision,
            "status": row.status,
            "seed_method": row.seed_method,
            "flags": [{"code": c, "severity": s} for c, s in row.flags],
            "notes": row.notes[:200],
            "tags": row.tags,
            "values": {k: _number(v) for k, v in row.values.items()},
        })
    return out


def live_update(session: Session, campaign: Campaign, since: int, shot_url: str, extra_columns: Sequence[str] = ()) -> dict[str, Any]:
    """Counts now, and the shots stored after the cursor ``since`` (oldest first, bounded)."""
    columns = tuple(dict.fromkeys((*LIVE_VALUE_COLUMNS, *extra_columns)))
    rows = store.shots_after(session, campaign.id, since, limit=LIVE_MAX_ROWS, value_columns=columns)
    latest = store.latest_shot_pk(session, campaign.id)
    cursor = rows[-1].pk if rows else max(since, 0)
    if not rows and since > latest:
        cursor = latest  # the cursor ran past the campaign (e.g. a deleted shot): resync
    flags = flag_code_counts(session, campaign)
    return {
        "cursor": cursor,
        "more": cursor < latest,
        "counts": store.status_counts(session, campaign.id),
        "flag_counts": {f.code: f.by_severity for f in flags},
        "shots": live_rows(rows, campaign, shot_url),
    }


# --------------------------------------------------------------------- table columns


@dataclass(frozen=True)
class Column:
    name: str
    label: str
    full_label: str


def table_columns() -> list[Column]:
    return [Column(name, SHORT_LABELS.get(name, field_label(name)), field_label(name)) for name in TABLE_VALUE_COLUMNS]


def known_flag_codes() -> list[str]:
    from model import FLAG_CODES

    return list(FLAG_CODES)


def local_time_text(moment: datetime | None, campaign: Campaign) -> str:
    local = local_time(moment, campaign_zone(campaign))
    return local.strftime("%Y-%m-%d %H:%M:%S") if local else ""


# ------------------------------------------------------------------------ one shot


@dataclass(frozen=True)
class InputRow:
    path: str
    value: Any
    unit: str
    description: str
    valid_range: str


@dataclass(frozen=True)
class OutputRow:
    name: str
    value: float | None
    unit: str


@dataclass(frozen=True)
class FlagRow:
    code: str
    severity: str
    value: float | None
    limit: float | None
    message: str


@dataclass(frozen=True)
class RevisionRow:
    revision: int
    created_local: str
    author: str
    reason: str
    changes: list[tuple[str, Any, Any]]  # (dotted field, before, after)


@dataclass
class ShotDetail:
    shot: Shot
    taken_local: str
    status: str | None
    model_version: str | None
    settings_version: int | None
    evaluated_local: str
    inputs: list[InputRow]
    outputs: list[OutputRow]
    flags: list[FlagRow]
    revisions: list[RevisionRow]
    extra_fields: dict[str, Any]
    figures: dict[str, dict[str, Any]]
    curve_note: str
    previous_shot_id: str | None
    next_shot_id: str | None


_ENVELOPE_KEYS = ("shot_id", "taken_at", "notes", "tags")
_SECTIONS = ("driver", "plasma", "seed", "measured")


def _unknown_fields(payload: Mapping[str, Any], known_paths: set[str]) -> dict[str, Any]:
    """Fields of the posted body that the model does not read (kept verbatim)."""
    extra: dict[str, Any] = {}
    for key, value in (payload or {}).items():
        if key in _ENVELOPE_KEYS:
            continue
        if key in _SECTIONS and isinstance(value, Mapping):
            for sub, sub_value in value.items():
                if f"{key}.{sub}" not in known_paths:
                    extra[f"{key}.{sub}"] = sub_value
        else:
            extra[key] = value
    return extra


def _flatten(payload: Any, prefix: str = "") -> dict[str, Any]:
    if isinstance(payload, Mapping):
        out: dict[str, Any] = {}
        for key, value in payload.items():
            out.update(_flatten(value, f"{prefix}{key}."))
        return out
    return {prefix[:-1]: payload}


def revision_rows(revisions: Sequence[Any], campaign: Campaign) -> list[RevisionRow]:
    """Each revision with the fields it changed against the one before (newest first)."""
    rows = []
    before: dict[str, Any] = {}
    for rev in revisions:
        after = _flatten(rev.raw_payload or {})
        changes = [(k, before.get(k), after.get(k)) for k in sorted(set(before) | set(after))
                   if before.get(k) != after.get(k)] if before else []
        rows.append(RevisionRow(rev.revision, local_time_text(rev.created_at, campaign), rev.author or "",
                                rev.reason or "", changes))
        before = after
    return list(reversed(rows))


def shot_input_columns(shot: Shot) -> dict[str, Any]:
    """The shot's model inputs as one-row dotted-path columns (None -> NaN: absent)."""
    from model import INPUT_FIELDS

    columns: dict[str, Any] = {}
    for spec in INPUT_FIELDS:
        value = getattr(shot, spec.path.replace(".", "_"), None)
        if spec.kind == "enum":
            columns[spec.path] = [value]
        else:
            columns[spec.path] = [math.nan if value is None else float(value)]
    return columns


CURVE_POINTS = 80


def growth_curves(shot: Shot, settings: Mapping[str, Any]) -> dict[str, list[float | None]]:
    """δ(z) and N(z) along the plasma and N at the exit against ξ behind the seed, from the model's curve functions."""
    from model import efolds_along_bunch, growth_along_plasma

    columns = shot_input_columns(shot)
    length = float(shot.plasma_length_m)
    z = np.linspace(length / CURVE_POINTS, length, CURVE_POINTS)
    along = growth_along_plasma(columns, z, settings)

    sigma_z = float(shot.driver_sigma_z_mm)
    seeded = shot.seed_method in ("ionization_front", "electron_bunch")
    zeta_s = float(shot.seed_position_mm) if seeded and shot.seed_position_mm is not None else 0.0
    xi_max = max(zeta_s + 3.0 * sigma_z, 0.5 * sigma_z)
    xi_mm = np.linspace(xi_max / CURVE_POINTS, xi_max, CURVE_POINTS)
    return {
        "z_m": z.tolist(),
        "efolds": along["efolds"].tolist(),
        "modulation": along["modulation"].tolist(),
        "xi_mm": xi_mm.tolist(),
        "efolds_exit_xi": efolds_along_bunch(columns, xi_mm * 1e-3, settings).tolist(),
    }


def growth_figure(curves: Mapping[str, list[Any]], shot: Shot, evaluation: Any, delta_sat: float) -> dict[str, Any]:
    z = _numbers(curves["z_m"])
    modulation = _numbers(curves["modulation"])
    efolds = _numbers(curves["efolds"])
    z_sat = evaluation.saturation_length_m if evaluation is not None else None
    before = [m if z_sat is None or (zz is not None and zz <= z_sat) else None for zz, m in zip(z, modulation)]
    after = [m if z_sat is not None and zz is not None and zz >= z_sat else None for zz, m in zip(z, modulation)]
    traces: list[dict[str, Any]] = [
        {"type": "scatter", "mode": "lines", "x": z, "y": before, "name": "\u03b4(z) relative radius modulation",
         "line": {"color": OKABE_ITO["blue"], "width": 3}, "hovertemplate": "z %{x:.3g} m<br>\u03b4 %{y:.3g}<extra></extra>"},
        {"type": "scatter", "mode": "lines", "x": z, "y": after, "name": "\u03b4(z) linear, past saturation (not valid)",
         "line": {"color": OKABE_ITO["blue"], "width": 2, "dash": "dot"}, "hovertemplate": "z %{x:.3g} m<br>\u03b4 %{y:.3g}<extra></extra>"},
        {"type": "scatter", "mode": "lines", "x": [z[0], z[-1]], "y": [delta_sat, delta_sat],
         "name": f"saturation level \u03b4_sat = {delta_sat:g}", "line": {"color": OKABE_ITO["grey"], "dash": "dash"},
         "hoverinfo": "skip"},
        {"type": "scatter", "mode": "lines", "x": z, "y": efolds, "name": "N(z) e-folds (right axis)", "yaxis": "y2",
         "line": {"color": OKABE_ITO["bluish_green"], "width": 2, "dash": "dashdot"}, "hovertemplate": "z %{x:.3g} m<br>N %{y:.3g}<extra></extra>"},
    ]
    if z_sat is not None:
        traces.append({"type": "scatter", "mode": "markers+text", "x": [_number(z_sat)], "y": [delta_sat],
                       "name": f"saturation at z = {z_sat:.3g} m", "text": [f"saturation {z_sat:.3g} m"],
                       "textposition": "top left",
                       "marker": {"symbol": "star", "size": 14, "color": OKABE_ITO["vermillion"], "line": {"color": INK, "width": 1}}})
    figure_layout = layout(
        height=400,
        xaxis=axis("z along the plasma [m]"),
        yaxis=axis("\u03b4 (relative radius modulation)", type="log", exponentformat="power"),
        yaxis2=axis("N (e-folds)", overlaying="y", side="right", rangemode="tozero", showgrid=False,
                     tickmode="auto"),
        margin={"l": 70, "r": 70, "t": 30, "b": 50},
    )
    return {"data": traces, "layout": figure_layout}


def efold_profile_figure(curves: Mapping[str, list[Any]], shot: Shot, settings: Mapping[str, Any]) -> dict[str, Any]:
    xi_ref = float(settings["reference_slice_sigma"]) * float(shot.driver_sigma_z_mm)
    ys = _numbers(curves["efolds_exit_xi"])
    traces = [
        {"type": "scatter", "mode": "lines", "x": _numbers(curves["xi_mm"]), "y": ys,
         "name": "N(L, \u03be) e-folds at the exit", "line": {"color": OKABE_ITO["reddish_purple"], "width": 3},
         "hovertemplate": "\u03be %{x:.3g} mm<br>N %{y:.3g}<extra></extra>"},
        {"type": "scatter", "mode": "lines", "x": [xi_ref, xi_ref], "y": [0, max([v for v in ys if v is not None] or [1])],
         "name": f"reference slice \u03be_ref = {xi_ref:.3g} mm", "line": {"color": OKABE_ITO["grey"], "dash": "dash"},
         "hoverinfo": "skip"},
    ]
    figure_layout = layout(
        height=360,
        xaxis=axis("\u03be behind the seed [mm]"),
        yaxis=axis("N at the plasma exit (e-folds)", rangemode="tozero"),
    )
    return {"data": traces, "layout": figure_layout}


def shot_detail(session: Session, campaign: Campaign, shot_id: str) -> ShotDetail | None:
    from app.services.campaigns import effective_settings
    from model import INPUT_FIELDS

    found = store.shot_with_evaluation(session, campaign.id, shot_id)
    if found is None:
        return None
    shot, evaluation = found
    known = {spec.path for spec in INPUT_FIELDS}
    inputs = [
        InputRow(spec.path, getattr(shot, spec.path.replace(".", "_"), None), spec.unit, spec.description,
                 spec.range_text)
        for spec in INPUT_FIELDS
    ]
    outputs = [
        OutputRow(name, getattr(evaluation, name, None) if evaluation else None, field_unit(name))
        for name in EVALUATION_OUTPUT_COLUMNS
    ]
    flags = [FlagRow(f.code, f.severity, f.value, f.limit, f.message) for f in store.shot_flags(session, shot.id)]
    flags.sort(key=lambda f: ({"outside": 0, "marginal": 1, "info": 2}.get(f.severity, 3), f.code))
    settings = effective_settings(campaign)
    figures: dict[str, dict[str, Any]] = {}
    note = ""
    try:
        curves = growth_curves(shot, settings)
        figures["growth"] = growth_figure(curves, shot, evaluation, float(settings["saturation_modulation"]))
        figures["profile"] = efold_profile_figure(curves, shot, settings)
    except Exception as exc:  # noqa: BLE001 - a shot the model cannot draw still gets its page
        note = f"The growth curves could not be computed for this shot ({type(exc).__name__}: {exc})."
    previous_id, next_id = store.neighbour_shot_ids(session, campaign.id, shot)
    return ShotDetail(
        shot=shot,
        taken_local=local_time_text(shot.taken_at, campaign),
        status=evaluation.status if evaluation else None,
        model_version=evaluation.model_version if evaluation else None,
        settings_version=evaluation.settings_version if evaluation else None,
        evaluated_local=local_time_text(evaluation.evaluated_at, campaign) if evaluation else "",
        inputs=inputs,
        outputs=outputs,
        flags=flags,
        revisions=revision_rows(store.shot_revisions(session, shot.id), campaign),
        extra_fields=_unknown_fields(shot.raw_payload or {}, known),
        figures=figures,
        curve_note=note,
        previous_shot_id=previous_id,
        next_shot_id=next_id,
    )


# ------------------------------------------------------------------------ settings


SETTING_HELP = {
    "reference_slice_sigma": "reference slice r_ref: \u03be_ref = r_ref \u03c3_z behind the seed",
    "noise_floor": "floor of the relative noise \u03b7",
    "phase_tolerance_rad": "allowed phase jitter \u0394\u03c8_tol [rad], sets density_tolerance_pct",
    "saturation_modulation": "saturation level \u03b4_sat of the relative radius modulation",
}


@dataclass
class SettingField:
    name: str  # form field name
    label: str
    help: str
    default: float
    current: float
    text: str  # what the input shows (the submitted text after an error)
    overridden: bool


@dataclass
class SettingsForm:
    version: int
    model_fields: list[SettingField]
    limit_rows: list[tuple[str, str, list[SettingField]]]  # (code, help, fields)
    latest_job_id: str | None


def _limit_field_name(code: str, level: str) -> str:
    return f"limit.{code}.{level}"


def settings_form(session: Session, campaign: Campaign, submitted: Mapping[str, str] | None = None) -> SettingsForm:
    from app.services.campaigns import effective_settings
    from model import DEFAULT_SETTINGS
    from model.rules import RULES_BY_CODE

    current = effective_settings(campaign)
    overrides = campaign.model_settings or {}
    submitted = submitted or {}

    def make(name: str, label: str, help_text: str, default: float, value: float, overridden: bool) -> SettingField:
        return SettingField(name, label, help_text, default, value, submitted.get(name, repr(float(value))), overridden)

    model_fields = [
        make(f"setting.{key}", key, SETTING_HELP.get(key, ""), default, current.get(key, default), key in overrides)
        for key, default in DEFAULT_SETTINGS.items()
        if key != "limits"
    ]
    limit_rows = []
    for code, levels in DEFAULT_SETTINGS["limits"].items():
        rule = RULES_BY_CODE.get(code)
        side = {"above": "fires above", "below": "fires below", "info_above": "info above"}.get(
            rule.bad_when if rule else "", "")
        help_text = f"{rule.symbol}: {side} the limit" if rule else ""
        fields = [
            make(_limit_field_name(code, level), level, "", default, current["limits"][code][level],
                 level in (overrides.get("limits", {}).get(code, {}) or {}))
            for level, default in levels.items()
        ]
        limit_rows.append((code, help_text, fields))
    job = store.latest_job(session, campaign.id, "reevaluate")
    return SettingsForm(campaign.settings_version, model_fields, limit_rows, job.id if job else None)


@dataclass
class SettingsOutcome:
    form: SettingsForm
    errors: dict[str, str]  # form field (or "_form") -> reason
    job_id: str | None = None
    changed: bool = False


def _parse_number(text: str) -> float:
    value = float(text.strip())
    if not math.isfinite(value):
        raise ValueError
    return value


def save_settings(app: Any, session: Session, campaign: Campaign, submitted: Mapping[str, str], actor: str) -> SettingsOutcome:
    """Validate the form, send the change as a merge patch, start the re-evaluation job."""
    from app.problems import ProblemError
    from app.services import campaigns as campaign_service
    from model import DEFAULT_SETTINGS, SettingsError, resolve_settings

    errors: dict[str, str] = {}
    new: dict[str, Any] = {"limits": {}}

    def changed_value(name: str, default: float, what: str) -> float | None:
        """The box's number when it differs from the default; an empty box means the default."""
        text = submitted.get(name, "")
        try:
            value = _parse_number(text) if text.strip() else default
        except ValueError:
            errors[name] = f"{what} must be a finite number, e.g. {default:g}"
            return None
        return value if value != default else None

    for key, default in DEFAULT_SETTINGS.items():
        if key != "limits" and (value := changed_value(f"setting.{key}", default, key)) is not None:
            new[key] = value
    for code, levels in DEFAULT_SETTINGS["limits"].items():
        for level, default in levels.items():
            value = changed_value(_limit_field_name(code, level), default, f"the {level} limit of {code}")
            if value is not None:
                new["limits"].setdefault(code, {})[level] = value
    if not new["limits"]:
        del new["limits"]
    if not errors:
        try:
            resolve_settings(new)
        except SettingsError as exc:
            for path, reason in exc.problems:
                target = _form_name("settings." + path)
                if target.count(".") == 1 and target.startswith("limit."):  # a pair out of order: the marginal box
                    target = _limit_field_name(path.split(".")[1], "marginal")
                errors[target if target in submitted else "_form"] = reason
    if errors:
        return SettingsOutcome(settings_form(session, campaign, submitted), errors)
    old = campaign.model_settings or {}
    patch = _merge_patch_between(old, new)
    if not patch:
        return SettingsOutcome(settings_form(session, campaign), {}, None, False)
    try:
        _campaign, job = campaign_service.change_settings(session, campaign.slug, patch, actor)
    except ProblemError as exc:
        for err in exc.errors or [{"field": "_form", "reason": exc.detail}]:
            errors[_form_name(err["field"])] = err["reason"]
        return SettingsOutcome(settings_form(session, campaign, submitted), errors)
    app.state.jobs.start(job.id)
    return SettingsOutcome(settings_form(session, campaign), {}, job.id, True)


def _form_name(api_field: str) -> str:
    """settings.limits.WEAK_SEED.marginal -> limit.WEAK_SEED.marginal; settings.x -> setting.x."""
    parts = api_field.split(".")
    if parts[:2] == ["settings", "limits"]:
        return "limit." + ".".join(parts[2:])
    if parts[:1] == ["settings"] and len(parts) > 1:
        return "setting." + ".".join(parts[1:])
    return "_form"


def _merge_patch_between(old: Mapping[str, Any], new: Mapping[str, Any]) -> dict[str, Any]:
    """The RFC 7386 merge patch that turns ``old`` into ``new`` (null removes a key)."""
    patch: dict[str, Any] = {}
    for key in set(old) | set(new):
        if key not in new:
            patch[key] = None
        elif isinstance(new[key], Mapping) and isinstance(old.get(key), Mapping):
            sub = _merge_patch_between(old[key], new[key])
            if sub:
                patch[key] = sub
        elif old.get(key) != new[key]:
            patch[key] = new[key]
    return patch
