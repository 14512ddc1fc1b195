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
from app.presentation.charts import axis, layout
from app.presentation.numbers import editable_number, format_number
from app.presentation.palette import INK, MUTED, OKABE_ITO, SERIES
from app.services import calibration
from app.services.calibration import Calibration
from app.tables import Campaign
from app.times import campaign_zone, format_utc

#: Points drawn per scatter (evenly spaced in time); the outliers are always drawn.
SCATTER_POINTS = 3000
_OUTLIER = OKABE_ITO["vermillion"]
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


def _n(value: float | None, digits: int = 4) -> str:
    return format_number(value, digits=digits) if value is not None else "–"


def _interval_text(m: dict[str, Any], digits: int = 4) -> str:
    return f"{_n(m['estimate'], digits)} [{_n(m['low'], digits)}, {_n(m['high'], digits)}]"


def _series_figure(result: Calibration, ans: dict[str, Any]) -> dict[str, Any]:
    days = [s["day"] for s in ans["series"]]
    est = [s["estimate"] for s in ans["series"]]
    upper = [(s["high"] - s["estimate"]) if s["high"] is not None else None for s in ans["series"]]
    lower = [(s["estimate"] - s["low"]) if s["low"] is not None else None for s in ans["series"]]
    text = [f"{s['day']}: {_interval_text(s)} ({s['shots']} shots)" for s in ans["series"]]
    data: list[dict[str, Any]] = [
        {
            "type": "scatter",
            "mode": "markers",
            "name": "per day (95 % interval)",
            "x": days,
            "y": rounded_list(est),
            "error_y": {
                "type": "data",
                "symmetric": False,
                "array": rounded_list(upper),
                "arrayminus": rounded_list(lower),
            },
            "marker": {"color": SERIES, "size": 8},
            "hovertext": text,
            "hoverinfo": "text",
        }
    ]
    shapes: list[dict[str, Any]] = []
    scale = ans["density_scale"]
    if scale["estimate"] is not None and days:
        data.append(
            {
                "type": "scatter",
                "mode": "lines",
                "name": f"estimate of the period {_n(scale['estimate'])}",
                "x": [days[0], days[-1]],
                "y": [rounded(scale["estimate"])] * 2,
                "line": {"color": _FIT, "dash": "dash"},
                "hoverinfo": "skip",
            }
        )
    if days:
        data.append(
            {
                "type": "scatter",
                "mode": "lines",
                "name": f"applied now {_n(ans['applied_density_scale'])}",
                "x": [days[0], days[-1]],
                "y": [rounded(ans["applied_density_scale"])] * 2,
                "line": {"color": MUTED, "dash": "dot"},
                "hoverinfo": "skip",
            }
        )
    for change in ans["changes"]:
        index = result.shot_ids.index(change["shot_id"])
        day = _day(result, index)
        shapes.append(
            {
                "type": "line",
                "xref": "x",
                "yref": "paper",
                "x0": day,
                "x1": day,
                "y0": 0,
                "y1": 1,
                "line": {"color": _OUTLIER, "width": 2, "dash": "dashdot"},
            }
        )
    return {
        "data": data,
        "layout": layout(
            xaxis=axis("day (campaign time zone)", type="category"),
            yaxis=axis("density scale (f_meas / f_ref)²"),
            shapes=shapes,
            height=340,
        ),
    }


def _day(result: Calibration, index: int) -> str:
    moment = calibration.instant(result.taken_at[index])
    return moment.astimezone(campaign_zone(result.campaign.timezone)).date().isoformat()


def _scaling_panel(i: int, check: calibration.ScalingCheck, entry: dict[str, Any], shot_points: bool) -> ScalingPanel:
    fit = check.fit
    ok = np.flatnonzero(np.isfinite(check.x) & np.isfinite(check.y) & (check.x > 0) & (check.y > 0))
    pick = ok[calibration.cal.evenly_spaced(int(ok.size), SCATTER_POINTS)]
    outliers = fit.outliers
    names = check.names
    data: list[dict[str, Any]] = [
        {
            "type": "scatter",
            "mode": "markers",
            "name": "shots" if shot_points else "days",
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
        (check.points, f"{fit.shots} (fit on {fit.fitted_shots})"),
        ("not explained", str(int(outliers.size))),
    ]
    figure = {
        "data": data,
        "layout": layout(
            xaxis=axis(f"{check.proxy} [{check.proxy_unit}]", type="log"),
            yaxis=axis(check.diagnostic, type="log"),
            height=360,
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


def calibration_page(session: Session, slug: str, start: datetime | None, end: datetime | None) -> CalibrationPage:
    """Everything the page shows, for shots taken in [start, end)."""
    result = calibration.measure(session, slug, start, end)
    ans = calibration.answer(result)
    scale = ans["density_scale"]
    mismatch = ans["frequency_mismatch_pct"]
    facts = [
        ("density scale", f"{_interval_text(scale)} ({scale['shots']} shots with a measured frequency)"),
        ("applied now", _n(ans["applied_density_scale"])),
        ("frequency mismatch now", f"{_interval_text(mismatch, 3)} % ({mismatch['shots']} shots)"),
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
