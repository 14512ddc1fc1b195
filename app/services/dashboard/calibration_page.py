"""The campaign's calibration page (``/campaigns/{slug}/calibration``): the density scale per
day with its interval and changes, one log-log scatter per scaling check with its fit and the
shots it does not explain (clickable), and the drivers of each outcome. Figures are plain
Plotly dicts drawn by app/static/js/calibration.js; every number shown as text is formatted
here (the one number formatter)."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date, datetime, time, timedelta
from typing import Any
from urllib.parse import quote

import numpy as np
from sqlalchemy.orm import Session

from app.plain import rounded, rounded_list
from app.presentation.charts import axis, layout, text_for_chart, title_lines
from app.presentation.numbers import editable_number, format_number
from app.presentation.palette import INK, MUTED, OKABE_ITO, SERIES
from app.services import calibration
from app.services.calibration import Calibration
from app.tables import Campaign
from app.times import campaign_zone, chart_time, format_utc

#: Points drawn per scatter and runs per series (evenly spaced in time; the statistics use every shot):
#: tens of thousands of SVG markers would make the page slow. Shots not explained are always drawn.
SCATTER_POINTS = 2000
#: Axis titles are broken into lines of about this many characters (a title wider than its chart is cut).
TITLE_LINE = 36
_OUTLIER = OKABE_ITO["vermillion"]
_RUN = OKABE_ITO["orange"]
_FIT = OKABE_ITO["blue"]


@dataclass(frozen=True)
class ScalingPanel:
    title: str
    chart_id: str
    figure: dict[str, Any]
    facts: list[tuple[str, str]]
    outliers: list[str]  # shot ids (or days) the model does not explain
    points: str
    proxy_note: str


@dataclass(frozen=True)
class CalibrationPage:
    answer: dict[str, Any]
    facts: list[tuple[str, str]]
    changes: list[dict[str, str]]
    series_figure: dict[str, Any]
    scaling: list[ScalingPanel]
    drivers_figure: dict[str, Any]
    apply_value: str | None  # the estimate as the settings take it
    apply_text: str
    config: dict[str, Any]
    start_text: str
    end_text: str
    run_tag_paths: tuple[str, ...] = calibration.RUN_TAG_PATHS


def _n(value: float | None, digits: int = 4) -> str:
    return format_number(value, digits=digits) if value is not None else "–"


def _interval_text(m: dict[str, Any], digits: int = 4) -> str:
    return f"{_n(m['estimate'], digits)} [{_n(m['low'], digits)}, {_n(m['high'], digits)}]"


def _error_bars(points: list[dict[str, Any]]) -> dict[str, Any]:
    return {
        "type": "data",
        "symmetric": False,
        "array": rounded_list([(p["high"] - p["estimate"]) if p["high"] is not None else None for p in points]),
        "arrayminus": rounded_list([(p["estimate"] - p["low"]) if p["low"] is not None else None for p in points]),
    }


def _moment_utc(text: str) -> datetime:
    return datetime.fromisoformat(text.replace("Z", "+00:00"))


def _series_figure(result: Calibration, ans: dict[str, Any]) -> dict[str, Any]:
    """The scale per day (at the day's noon) and, where the shots carry run tags, per run (at the middle
    of the run, drawn first so that the days lie on top), on one time axis of the campaign's zone; the
    period's estimate, the applied scale and the changes found. Runs beyond SCATTER_POINTS are thinned
    evenly in time (the answer keeps them all)."""
    zone = campaign_zone(result.campaign.timezone)
    days = ans["series"]
    data: list[dict[str, Any]] = [
        {
            "type": "scatter",
            "mode": "markers",
            "name": "per day (95 % interval)",
            "legendrank": 1,  # listed first, drawn over the runs (which come first in data)
            "x": [f"{d['day']} 12:00:00" for d in days],
            "y": rounded_list([d["estimate"] for d in days]),
            "error_y": _error_bars(days),
            "marker": {"color": SERIES, "size": 9, "line": {"color": "#ffffff", "width": 1}},
            "hovertext": [f"{d['day']}: {_interval_text(d)} ({d['shots']} shots)" for d in days],
            "hoverinfo": "text",
        }
    ]
    every_run = ans["run_series"]
    pick = calibration.cal.evenly_spaced(len(every_run), SCATTER_POINTS).tolist()
    runs = [every_run[i] for i in pick]
    if runs:
        name = f"per run, by {', '.join(ans['run_series_by'])} (95 % interval)"
        if len(runs) < len(every_run):
            name += f"; {format_number(len(runs))} of {format_number(len(every_run))} runs drawn, evenly in time"
        points = [result.run_series[i] for i in pick]
        middle = [calibration.instant((result.taken_at[p.first] + result.taken_at[p.last]) / 2) for p in points]
        data.insert(
            0,
            {
                "type": "scatter",
                "mode": "markers",
                "name": name,
                "legendrank": 2,
                "x": [chart_time(m, zone) for m in middle],
                "y": rounded_list([r["estimate"] for r in runs]),
                "error_y": {**_error_bars(runs), "color": _RUN, "thickness": 1},
                "marker": {"color": _RUN, "size": 6, "symbol": "diamond"},
                "hovertext": [
                    f"run {text_for_chart(r['run'])}: {_interval_text(r)} ({r['shots']} shots), "
                    f"{chart_time(_moment_utc(r['first_taken_at']), zone)} to "
                    f"{chart_time(_moment_utc(r['last_taken_at']), zone)}"
                    for r in runs
                ],
                "hoverinfo": "text",
            },
        )
    ends = [chart_time(calibration.instant(result.taken_at[i]), zone) for i in (0, -1)] if result.shots else []
    scale = ans["density_scale"]
    if scale["estimate"] is not None and ends:
        data.append(
            {
                "type": "scatter",
                "mode": "lines",
                "name": f"estimate of the period {_n(scale['estimate'])}",
                "x": ends,
                "y": [rounded(scale["estimate"])] * 2,
                "line": {"color": _FIT, "dash": "dash"},
                "hoverinfo": "skip",
            }
        )
    if ends:
        data.append(
            {
                "type": "scatter",
                "mode": "lines",
                "name": f"applied now {_n(ans['applied_density_scale'])}",
                "x": ends,
                "y": [rounded(ans["applied_density_scale"])] * 2,
                "line": {"color": MUTED, "dash": "dot"},
                "hoverinfo": "skip",
            }
        )
    shapes: list[dict[str, Any]] = []
    for change in ans["changes"]:
        at = chart_time(_moment_utc(change["taken_at"]), zone)
        shapes.append(
            {
                "type": "line",
                "xref": "x",
                "yref": "paper",
                "x0": at,
                "x1": at,
                "y0": 0,
                "y1": 1,
                "line": {"color": _OUTLIER, "width": 2, "dash": "dashdot"},
            }
        )
    return {
        "data": data,
        "layout": layout(
            xaxis=axis(f"taken at ({result.campaign.timezone})", type="date"),
            yaxis=axis(title_lines("density scale (f_meas / f_ref)²", TITLE_LINE)),
            shapes=shapes,
            height=360,
        ),
    }


def _scaling_panel(i: int, check: calibration.ScalingCheck, entry: dict[str, Any], shot_points: bool) -> ScalingPanel:
    fit = check.fit
    ok = np.flatnonzero(np.isfinite(check.x) & np.isfinite(check.y) & (check.x > 0) & (check.y > 0))
    pick = ok[calibration.cal.evenly_spaced(int(ok.size), SCATTER_POINTS)]
    outliers = fit.outliers
    names = check.names
    name = "shots" if shot_points else "days"
    if pick.size < ok.size:
        name += f": {format_number(int(pick.size))} of {format_number(int(ok.size))} drawn, evenly in time"
    data: list[dict[str, Any]] = [
        {
            "type": "scatter",
            "mode": "markers",
            "name": name,
            "x": rounded_list(check.x[pick]),
            "y": rounded_list(check.y[pick]),
            "customdata": [names[j] for j in pick.tolist()] if shot_points else None,
            "text": [names[j] for j in pick.tolist()],
            "hovertemplate": "%{text}<br>x %{x}<br>y %{y}<extra></extra>",
            "marker": {"color": SERIES, "size": 5, "opacity": 0.6},
        }
    ]
    if fit.exponent is not None and fit.prefactor is not None and ok.size:
        xs = np.geomspace(float(np.min(check.x[ok])), float(np.max(check.x[ok])), 50)
        data.append(
            {
                "type": "scatter",
                "mode": "lines",
                "name": f"fit y = {_n(fit.prefactor, 3)} x^{_n(fit.exponent, 3)}",
                "x": rounded_list(xs),
                "y": rounded_list(fit.prefactor * xs**fit.exponent),
                "line": {"color": _FIT},
                "hoverinfo": "skip",
            }
        )
    if outliers.size:
        data.append(
            {
                "type": "scatter",
                "mode": "markers",
                "name": "not explained (|residual| > 3 × 1.4826 MAD)",
                "x": rounded_list(check.x[outliers]),
                "y": rounded_list(check.y[outliers]),
                "customdata": [names[j] for j in outliers.tolist()] if shot_points else None,
                "text": [names[j] for j in outliers.tolist()],
                "hovertemplate": "%{text}<br>x %{x}<br>y %{y}<extra></extra>",
                "marker": {"color": _OUTLIER, "size": 9, "symbol": "x"},
            }
        )
    for trace in data:
        if trace.get("customdata") is None:
            trace.pop("customdata", None)
    facts = [
        (
            "exponent b",
            f"{_n(fit.exponent, 3)} [{_n(fit.exponent_low, 3)}, {_n(fit.exponent_high, 3)}] "
            f"(expected {_n(check.expected_exponent, 2)})",
        ),
        ("prefactor a", _n(fit.prefactor, 3)),
        ("Spearman ρ", _n(fit.spearman, 3)),
        (check.points, f"{format_number(fit.shots)} (fit on {format_number(fit.fitted_shots)})"),
        ("not explained", format_number(int(outliers.size))),
    ]
    figure = {
        "data": data,
        "layout": layout(
            xaxis=axis(title_lines(f"{check.proxy} [{check.proxy_unit}]", TITLE_LINE), type="log"),
            yaxis=axis(title_lines(check.diagnostic, TITLE_LINE), type="log"),
            height=380,
        ),
    }
    return ScalingPanel(
        title=f"{check.diagnostic} against {check.proxy}",
        chart_id=f"chart-scaling-{i}",
        figure=figure,
        facts=facts,
        outliers=list(entry["outliers"]),
        points=check.points,
        proxy_note=check.label,
    )


def _drivers_figure(ans: dict[str, Any]) -> dict[str, Any]:
    data: list[dict[str, Any]] = []
    colours = list(OKABE_ITO.values())
    for i, entry in enumerate(ans["drivers"]):
        ranking = entry["ranking"]
        if not ranking:
            continue
        rho = [r["rho"] for r in ranking]
        data.append(
            {
                "type": "bar",
                "orientation": "h",
                "name": f"{entry['diagnostic']} ({entry['shots']} shots)",
                "y": [f"{entry['diagnostic']} · {r['field']}" for r in ranking],
                "x": rounded_list(rho),
                "error_x": {
                    "type": "data",
                    "symmetric": False,
                    "array": rounded_list([(r["high"] - r["rho"]) if r["high"] is not None else None for r in ranking]),
                    "arrayminus": rounded_list(
                        [(r["rho"] - r["low"]) if r["low"] is not None else None for r in ranking]
                    ),
                    "color": INK,
                },
                "marker": {"color": colours[i % len(colours)]},
                "hovertemplate": "%{y}: ρ %{x}<extra></extra>",
            }
        )
    rows = sum(len(e["ranking"]) for e in ans["drivers"])
    return {
        "data": data,
        "layout": layout(
            xaxis=axis("Spearman ρ (95 % bootstrap interval)", range=[-1, 1]),
            yaxis=axis("", autorange="reversed", automargin=True),
            height=max(300, 22 * rows + 80),
            margin={"l": 340, "r": 20, "t": 30, "b": 50},
            barmode="group",
        ),
    }


def _series_fact(ans: dict[str, Any]) -> str:
    text = f"per day ({format_number(len(ans['series']))} days)"
    if not ans["run_series"]:
        return text + "; no shot carries a run tag (" + ", ".join(calibration.RUN_TAG_PATHS) + ")"
    text += f" and per run by {', '.join(ans['run_series_by'])} ({format_number(len(ans['run_series']))} runs"
    if ans["run_untagged_shots"]:
        text += f"; {format_number(ans['run_untagged_shots'])} shots without a run tag are in the days only"
    return text + ")"


def calibration_page(session: Session, slug: str, start: datetime | None, end: datetime | None) -> CalibrationPage:
    """Everything the page shows, for shots taken in [start, end)."""
    result = calibration.measure(session, slug, start, end)
    ans = calibration.answer(result)
    scale = ans["density_scale"]
    mismatch = ans["frequency_mismatch_pct"]
    facts = [
        ("density scale", f"{_interval_text(scale)} ({format_number(scale['shots'])} shots with a measured frequency)"),
        ("applied now", _n(ans["applied_density_scale"])),
        ("frequency mismatch now", f"{_interval_text(mismatch, 3)} % ({format_number(mismatch['shots'])} shots)"),
        ("series", _series_fact(ans)),
        ("changes found", str(len(ans["changes"]))),
    ]
    changes = [
        {
            "shot_id": c["shot_id"],
            "taken_at": c["taken_at"],
            "before": f"{_interval_text(c['before'])} ({c['shots_before']} shots)",
            "after": f"{_interval_text(c['after'])} ({c['shots_after']} shots)",
            "after_value": editable_number(c["after"]["estimate"]),
            "size": f"{_n(c['standard_errors'], 3)} standard errors",
        }
        for c in ans["changes"]
    ]
    scaling = [
        _scaling_panel(i, check, entry, check.points == "shots")
        for i, (check, entry) in enumerate(zip(result.scaling, ans["scaling"], strict=True))
    ]
    return CalibrationPage(
        answer=ans,
        facts=facts,
        changes=changes,
        series_figure=_series_figure(result, ans),
        scaling=scaling,
        drivers_figure=_drivers_figure(ans),
        apply_value=editable_number(scale["estimate"]) if scale["estimate"] is not None else None,
        apply_text=_n(scale["estimate"], 5),
        config={
            "settings_url": f"/api/v1/campaigns/{quote(slug, safe='')}/settings",
            "shot_base": f"/campaigns/{quote(slug, safe='')}/shots/",
        },
        start_text=format_utc(start) if start else "",
        end_text=format_utc(end) if end else "",
    )


def _moment(text: str, campaign: Campaign, end: bool) -> datetime:
    """A day of the campaign's zone (its midnight; the day after for ``end``: the day is included)
    or an ISO 8601 instant with an offset."""
    text = text.strip()
    zone = campaign_zone(campaign.timezone)
    if len(text) == 10:
        day = date.fromisoformat(text) + timedelta(days=1 if end else 0)
        return datetime.combine(day, time(0), tzinfo=zone)
    moment = datetime.fromisoformat(text.replace("Z", "+00:00"))
    if moment.tzinfo is None:
        raise ValueError("needs a UTC offset")
    return moment


def period(campaign: Campaign, start_text: str, end_text: str) -> tuple[datetime | None, datetime | None, str | None]:
    """The page's period from its boxes; a box that does not read is ignored, and said so."""
    bounds: list[datetime | None] = []
    problems: list[str] = []
    for name, text, end in (("from", start_text, False), ("to", end_text, True)):
        if not text.strip():
            bounds.append(None)
            continue
        try:
            bounds.append(_moment(text, campaign, end))
        except ValueError:
            bounds.append(None)
            problems.append(f"'{name}' is not a day (2026-11-20) or an ISO 8601 instant with an offset: ignored")
    start, stop = bounds
    if start is not None and stop is not None and stop <= start:
        problems.append("'to' must be later than 'from': the whole campaign is shown")
        start = stop = None
    return start, stop, "; ".join(problems) or None
