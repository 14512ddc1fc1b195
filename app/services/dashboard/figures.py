"""The overview's Plotly figures: timeline, regime map, phase stability, density
calibration and flag counts, with the figures shown beside them.

Charts are plain figure dicts (``{"data": [...], "layout": {...}}``) that the static
JavaScript hands to Plotly. Every point trace carries ``meta`` = {status, x, y} naming
the fields it plots, so live updates can extend the right traces without knowing the
chart. Large series are decimated in SQL (app.store.dashboard).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

import numpy as np
from sqlalchemy.orm import Session

import model
from app.plain import rounded, rounded_list
from app.presentation.charts import axis, layout, padded, robust_range, text_for_chart
from app.presentation.fields import field_label, short_label
from app.presentation.numbers import format_number
from app.presentation.palette import INK, OKABE_ITO, SEVERITY_STYLES, STATUS_STYLES, rgba
from app.services.dashboard.feed_reads import DirectReader, Reader, SeriesRequest
from app.services.ingest.evaluation import model_columns
from app.services.phase_spread import (
    JITTER_SOURCES,
    PhaseJitter,
    circular_mean_rad,
    derivative_sample,
    phase_jitter,
    phase_jitter_by_part,
    typical_phase_derivatives,
)
from app.store import dashboard as store
from app.store import shots as shot_store
from app.tables import Campaign
from app.times import campaign_zone, chart_time

# Limits that keep a 100,000-shot campaign's pages small and quick.
# Plotly's WebGL traces (scattergl) compile code at run time, which the pages' CSP
# forbids (no 'unsafe-eval'), so every chart is SVG and long series are thinned.
# Shots read per chart:
TIMELINE_NOMINAL_POINTS = 1500
FLAGGED_POINTS_CAP = 1000  # per flagged status and chart; past it, 1 in k over the whole range
TIMELINE_FLAGGED_POINTS = 400  # per flagged status on the timeline (five panels of markers)
SCATTER_NOMINAL_POINTS = 3000
# What the browser draws: every marker is an SVG path that the page builds, styles, paints and
# hit-tests (at 100,000 shots 17,000 of them kept Chromium busy for 6-10 s), so
# - past NOMINAL_MARKERS_MAX nominal shots a map draws them as a density (one heatmap image);
# - past FLAGGED_MARKERS_MAX shots of a flagged status (per panel on the timeline) a chart draws
#   one marker per cell of a grid about a marker's size (coarser until at most that many), the
#   latest shot of the cell, whose hover says how many more shots share it; so every region
#   holding a flagged shot shows one (_one_per_cell).
NOMINAL_MARKERS_MAX = 400
FLAGGED_MARKERS_MAX = 250
TIMELINE_FLAGGED_MARKERS_MAX = 80
# Cells across and up, about 10 px square where the charts are drawn: the regime map and the
# timeline's panels span the page, the calibration map and the phase chart half of it.
WIDE_MARKER_CELLS = (110, 45)
TIMELINE_MARKER_CELLS = (110, 16)
HALF_WIDTH_MARKER_CELLS = (55, 40)
DENSITY_CELLS = (100, 50)
PHASE_MAX_BINS = 80
PHASE_MIN_SHOTS_PER_BIN = 5
PHASE_MAX_ROWS = 20000  # shots the phase figures are computed from; past it, 1 in k

TIMELINE_FIELDS = (
    "plasma_density_cm3",
    "driver_population",
    "seed_position_mm",
    "driver_sigma_z_mm",
    "driver_sigma_r_mm",
)
PHASE_FIELD = "measured_modulation_phase_rad"
CALIBRATION_FIELDS = ("plasma_frequency_ghz", "measured_modulation_freq_ghz")
DEFAULT_REGIME_AXES = ("plasma_density_cm3", "efolds_exit")


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
    stands_for: Sequence[int] | None = None,
) -> dict[str, Any]:
    """One status's shots as markers; ``stands_for``: how many shots each marker stands for (one
    marker per cell, _one_per_cell), said in the legend and in each marker's hover."""
    style = STATUS_STYLES[status]
    shown = f"{len(x):,} of {total:,}" if len(x) != total else f"{total:,}"
    name = f"{status} ({shown}{note})"
    if stands_for is not None:  # note: ", 1 in k" when the shots read were thinned
        name = f"{status} ({total:,} shots; one marker per cell{note.replace(', 1 in', ' of 1 in')})"
    trace = {
        "type": "scatter",
        "mode": "markers",
        "name": name,
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
    if stands_for is not None:
        trace["text"] = [
            f"<br>and {format_number(n - 1)} more {status} shot{'s' if n > 2 else ''} in this cell" if n > 1 else ""
            for n in stands_for
        ]
        trace["hovertemplate"] = "%{customdata}%{text}<br>x %{x}<br>y %{y:.5g}<extra>" + status + "</extra>"
    return trace


def _fraction(values: np.ndarray, limits: tuple[float, float]) -> np.ndarray:
    lo, hi = limits
    return np.clip((values - lo) / (hi - lo), 0.0, 1.0) if hi > lo else np.zeros(len(values))


def _one_per_cell(
    x: np.ndarray,
    y: np.ndarray,
    x_range: tuple[float, float],
    y_range: tuple[float, float],
    cells: tuple[int, int],
    cap: int,
) -> tuple[np.ndarray, np.ndarray | None]:
    """Which of these points (in time order) to draw as markers: all of them up to ``cap``;
    past it the latest point of each occupied cell of a grid of ``cells`` over the ranges,
    the grid made coarser until at most ``cap`` remain, and how many points each stands for
    (None when all are drawn). Every point lies in the cell of a marker drawn."""
    n = len(x)
    if n <= cap:
        return np.arange(n), None
    fx, fy = _fraction(x, x_range), _fraction(y, y_range)
    nx, ny = cells
    while True:
        cell = np.minimum((fx * nx).astype(int), nx - 1) * ny + np.minimum((fy * ny).astype(int), ny - 1)
        _, first_from_end, counts = np.unique(cell[::-1], return_index=True, return_counts=True)
        if len(counts) <= cap or nx * ny == 1:
            break
        nx, ny = max(1, nx // 2), max(1, ny // 2)
    keep = n - 1 - first_from_end
    order = np.argsort(keep)
    return keep[order], counts[order]


def _drawn_range(limits: tuple[float, float] | None, values: Sequence[float]) -> tuple[float, float]:
    """The stretch an axis shows: the padded robust range, else every value (a little wider when all equal)."""
    if limits is not None:
        lo, hi = padded(limits)
        return lo, hi
    lo, hi = (min(values), max(values)) if len(values) else (0.0, 1.0)
    if hi <= lo:
        pad = abs(hi) * 0.01 or 1.0
        lo, hi = lo - pad, hi + pad
    return float(lo), float(hi)


def _density_trace(
    x: np.ndarray,
    y: np.ndarray,
    x_range: tuple[float, float],
    y_range: tuple[float, float],
    *,
    total: int,
    step: int,
) -> dict[str, Any]:
    """Nominal shots as one heatmap image: shots per cell (estimated from 1 in ``step`` when
    thinned), coloured by their log so that sparse cells still show; empty cells are left clear."""
    counts, x_edges, y_edges = np.histogram2d(x, y, bins=DENSITY_CELLS, range=[x_range, y_range])
    shots = counts.T * step  # rows go up the y axis
    about = "about " if step > 1 else ""
    text = [[f"{about}{format_number(int(v))} nominal shots in this cell" if v else None for v in row] for row in shots]
    with np.errstate(divide="ignore"):
        z = np.where(shots > 0, np.log10(np.maximum(shots, 1.0)), np.nan)
    style = STATUS_STYLES["nominal"]
    note = f", from 1 in {step}" if step > 1 else ""
    return {
        "type": "heatmap",
        "name": f"nominal ({total:,} shots as a density, darker = more{note})",
        "legendgroup": "nominal",
        "showlegend": True,
        "x": rounded_list((x_edges[:-1] + x_edges[1:]) / 2),
        "y": rounded_list((y_edges[:-1] + y_edges[1:]) / 2),
        "z": rounded_list(z, 4),
        "zmin": 0,
        "text": text,
        "colorscale": [[0, rgba(style.colour, 0.15)], [1, rgba(style.colour, 0.85)]],
        "showscale": False,
        "hoverongaps": False,
        "hovertemplate": "%{text}<extra>nominal</extra>",
        "meta": {"density": "nominal"},
    }


def _live_nominal_trace(x_field: str, y_field: str) -> dict[str, Any]:
    """Where live updates add new nominal shots (as markers) while the density stays as drawn."""
    trace = _point_trace("nominal", [], [], [], x_field=x_field, y_field=y_field, total=0, showlegend=False)
    trace["name"] = "nominal shots since the chart was drawn"
    return trace


@dataclass
class _StatusSeries:
    status: str
    series: store.Series


def timeline_series() -> SeriesRequest:
    """The timeline's read: every panel's field, nominal shots and flagged shots thinned apart."""
    return SeriesRequest(
        ("shot_id", "taken_at", *TIMELINE_FIELDS), (), TIMELINE_NOMINAL_POINTS, TIMELINE_FLAGGED_POINTS
    )


def phase_series() -> SeriesRequest:
    """The phase chart's points: the shots with a measured phase."""
    return SeriesRequest(
        ("shot_id", "taken_at", PHASE_FIELD), (PHASE_FIELD,), TIMELINE_NOMINAL_POINTS, FLAGGED_POINTS_CAP
    )


def map_series(x: str, y: str) -> SeriesRequest:
    """A map's points (no time axis): the shots with both values."""
    return SeriesRequest(("shot_id", *dict.fromkeys((x, y))), (x, y), SCATTER_NOMINAL_POINTS, FLAGGED_POINTS_CAP)


def _series_by_status(
    session: Session,
    campaign: Campaign,
    request: SeriesRequest,
    *,
    upto_pk: int | None = None,
    totals: dict[str, int] | None = None,
    reader: Reader | None = None,
) -> list[_StatusSeries]:
    """Each status's shots as ``request`` reads them: nominal shots thinned to its nominal points,
    flagged shots all kept up to its flagged points, in time order. ``totals``: the shots per
    status that have the request's values, when already counted."""
    reader = _reader(session, campaign, upto_pk, reader)
    if totals is None:
        totals = reader.value_counts({"": request.required})[""]
    out = []
    for status in model.STATUSES:
        step = request.step(status, totals)
        rows = reader.series_rows(status, request.columns, step=step, required=request.required)
        series = store.series_of_rows(
            rows, request.columns, total=totals.get(status, 0), step=step, max_points=request.points(status)
        )
        out.append(_StatusSeries(status, series))
    return out


def _reader(session: Session, campaign: Campaign, upto_pk: int | None, reader: Reader | None) -> Reader:
    """The overview's cached reads when given, else the database now (up to ``upto_pk``)."""
    return reader if reader is not None else DirectReader(session, campaign, upto_pk)


def _series_note(item: _StatusSeries) -> str:
    return f", 1 in {item.series.step}" if item.series.step > 1 else ""


class _Pins:
    """Points outside a chart's robust axis ranges, pinned at the edge they passed and drawn
    as one trace of triangles pointing that way, with hover text giving the true value."""

    def __init__(self, x_lim: tuple[float, float] | None, y_lim: tuple[float, float] | None) -> None:
        self.x_lim, self.y_lim = x_lim, y_lim
        self.x: list[Any] = []
        self.y: list[Any] = []
        self.ids: list[str] = []
        self.colours: list[str] = []
        self.symbols: list[str] = []
        self.text: list[str] = []

    def keep(self, xs: Sequence[Any], ys: Sequence[Any]) -> list[bool]:
        """Which of these points (numbers; None for missing) lie inside both ranges."""
        if len(xs) != len(ys):
            raise ValueError("as many x as y values")
        return (self._inside(xs, self.x_lim) & self._inside(ys, self.y_lim)).tolist()

    @staticmethod
    def _inside(values: Sequence[Any], lim: tuple[float, float] | None) -> np.ndarray:
        v = np.array(values, dtype=float)  # None becomes NaN: missing counts as inside
        if lim is None:
            return np.ones(len(v), dtype=bool)
        return np.isnan(v) | ((lim[0] <= v) & (v <= lim[1]))

    @staticmethod
    def _clamp(v: float, lim: tuple[float, float] | None) -> tuple[float, int]:
        if lim is None or lim[0] <= v <= lim[1]:
            return v, 0
        return (lim[0], -1) if v < lim[0] else (lim[1], 1)

    def add(self, status: str, x: float, y: float, shot_id: str, x_text: str, y_text: str) -> tuple[float, float]:
        (px, dx), (py, dy) = self._clamp(x, self.x_lim), self._clamp(y, self.y_lim)
        self.ids.append(shot_id)
        self.colours.append(STATUS_STYLES[status].colour)
        self.symbols.append(
            "triangle-up" if dy > 0 else "triangle-down" if dy < 0 else "triangle-right" if dx > 0 else "triangle-left"
        )
        passed = [t for t, d in ((x_text, dx), (y_text, dy)) if d]
        self.text.append(f"{shot_id} ({status}): out of range, pinned at the edge; " + ", ".join(passed))
        return px, py

    def trace(self, x: list[Any], y: list[Any], axes: tuple[str, str] = ("x", "y"), showlegend: bool = True) -> dict:
        return {
            "type": "scatter",
            "mode": "markers",
            "name": f"out of range ({len(x):,}), pinned at the edge",
            "legendgroup": "out-of-range",
            "showlegend": showlegend,
            "x": x,
            "y": y,
            "customdata": self.ids,
            "hovertext": self.text,
            "xaxis": axes[0],
            "yaxis": axes[1],
            "marker": {"color": self.colours, "symbol": self.symbols, "size": 11, "line": {"width": 1, "color": INK}},
            "hovertemplate": "%{hovertext}<extra>out of range</extra>",
            "meta": {"status": "out-of-range", "pinned": True},
        }


def _range_text(name: str, value: Any, lim: tuple[float, float]) -> str:
    return f"{short_label(name)} {format_number(value)} (axis {format_number(lim[0])} to {format_number(lim[1])})"


def _line_trace(trace: dict[str, Any]) -> dict[str, Any]:
    """Nominal shots drawn as one thin line (one SVG path) instead of a marker each."""
    style = STATUS_STYLES["nominal"]
    trace = {**trace, "mode": "lines", "line": {"color": rgba(style.colour, 0.55), "width": 1}}
    trace.pop("marker", None)
    return trace


def _epoch(moment: datetime) -> float:
    return moment.timestamp()


def timeline_figure(
    session: Session,
    campaign: Campaign,
    upto_pk: int | None = None,
    totals: dict[str, int] | None = None,
    reader: Reader | None = None,
) -> dict[str, Any]:
    """Key conditions against time, one panel each: nominal shots as a thin line, flagged shots
    marked by shape and colour, robust ranges (one wild value or date cannot flatten a panel)."""
    zone = campaign_zone(campaign.timezone)
    by_status = _series_by_status(session, campaign, timeline_series(), upto_pk=upto_pk, totals=totals, reader=reader)
    panels = len(TIMELINE_FIELDS)
    gap = 0.04
    height = (1 - gap * (panels - 1)) / panels
    traces: list[dict[str, Any]] = []
    figure_layout = layout(height=190 * panels + 90, showlegend=True)
    # The same shots in every panel: their times and labels are written once.
    epochs = {item.status: [_epoch(t) for t in item.series.columns["taken_at"]] for item in by_status}
    times = {item.status: [chart_time(t, zone) for t in item.series.columns["taken_at"]] for item in by_status}
    labels = {item.status: [text_for_chart(v) for v in item.series.columns["shot_id"]] for item in by_status}
    t_lim = robust_range([t for values in epochs.values() for t in values])
    x_range = None if t_lim is None else [chart_time(datetime.fromtimestamp(t, UTC), zone) for t in padded(t_lim)]
    for i, name in enumerate(TIMELINE_FIELDS):
        axis_id = "" if i == 0 else str(i + 1)
        axes = (f"x{axis_id}", f"y{axis_id}")
        top = 1 - i * (height + gap)
        y_lim = robust_range([v for item in by_status for v in item.series.columns[name] if v is not None])
        y_extra = {} if y_lim is None else {"range": padded(y_lim)}
        figure_layout[f"yaxis{axis_id}"] = axis(
            short_label(name), domain=[top - height, top], exponentformat="power", **y_extra
        )
        figure_layout[f"xaxis{axis_id}"] = axis(
            f"taken at ({zone.key})" if i == panels - 1 else "",
            type="date",
            anchor=f"y{axis_id}",
            matches="x" if i else None,
            showticklabels=i == panels - 1,
            **({"range": x_range} if x_range and i == 0 else {}),
        )
        pins = _Pins(t_lim, y_lim)
        pinned_x: list[Any] = []
        pinned_y: list[Any] = []
        t_range = _drawn_range(t_lim, [t for values in epochs.values() for t in values])
        y_range = _drawn_range(y_lim, [v for item in by_status for v in item.series.columns[name] if v is not None])
        for item in by_status:
            cols = item.series.columns
            ys = rounded_list(cols[name])
            inside = pins.keep(epochs[item.status], ys)
            for j, ok in enumerate(inside):
                if not ok and ys[j] is not None:
                    t, v = epochs[item.status][j], ys[j]
                    pt, pv = pins.add(
                        item.status,
                        t,
                        v,
                        labels[item.status][j],
                        f"taken {chart_time(cols['taken_at'][j], zone)}",
                        _range_text(name, v, y_lim) if y_lim else "",
                    )
                    pinned_x.append(chart_time(datetime.fromtimestamp(pt, UTC), zone))
                    pinned_y.append(rounded(pv))
            if item.status == "nominal":  # one thin line (one SVG path), gaps where a value is missing
                drawn = [j for j, ok in enumerate(inside) if ok]
                stands_for = None
            else:  # markers of the shots that have a value, one per cell past the cap
                drawn = [j for j, ok in enumerate(inside) if ok and ys[j] is not None]
                picked, stands_for = _one_per_cell(
                    np.array([epochs[item.status][j] for j in drawn], dtype=float),
                    np.array([ys[j] for j in drawn], dtype=float),
                    t_range,
                    y_range,
                    TIMELINE_MARKER_CELLS,
                    TIMELINE_FLAGGED_MARKERS_MAX,
                )
                drawn = [drawn[k] for k in picked.tolist()]
            trace = _point_trace(
                item.status,
                [times[item.status][j] for j in drawn],
                [ys[j] for j in drawn],
                [labels[item.status][j] for j in drawn],
                x_field="taken_at",
                y_field=name,
                total=item.series.total,
                axes=axes,
                showlegend=i == 0,
                note=_series_note(item),
                stands_for=None if stands_for is None else stands_for.tolist(),
            )
            traces.append(_line_trace(trace) if item.status == "nominal" else trace)
        if pinned_x:
            traces.append(pins.trace(pinned_x, pinned_y, axes, showlegend=True))
    for key in list(figure_layout):
        if key.startswith("xaxis") and figure_layout[key].get("matches") is None:
            figure_layout[key].pop("matches", None)
    return {"data": traces, "layout": figure_layout}


@dataclass
class _StatusMap:
    """Two columns against each other by status: the traces, and the robust ranges (None: fits all)."""

    traces: list[dict[str, Any]]
    x_lim: tuple[float, float] | None
    y_lim: tuple[float, float] | None
    x_range: tuple[float, float]  # what the axes show
    y_range: tuple[float, float]


def _status_map(
    session: Session,
    campaign: Campaign,
    x: str,
    y: str,
    *,
    upto_pk: int | None = None,
    totals: dict[str, int] | None = None,
    cells: tuple[int, int] = WIDE_MARKER_CELLS,
    reader: Reader | None = None,
) -> _StatusMap:
    """Shots by status on robust ranges (a wild value is pinned at the edge and marked); many
    nominal shots as a density, many flagged shots one marker per cell (module constants)."""
    by_status = _series_by_status(session, campaign, map_series(x, y), upto_pk=upto_pk, totals=totals, reader=reader)
    xs = {item.status: rounded_list(item.series.columns[x]) for item in by_status}
    ys = {item.status: rounded_list(item.series.columns[y]) for item in by_status}
    x_lim = robust_range([v for values in xs.values() for v in values if v is not None])
    y_lim = robust_range([v for values in ys.values() for v in values if v is not None])
    pins = _Pins(x_lim, y_lim)
    pinned_x: list[Any] = []
    pinned_y: list[Any] = []
    drawn: dict[str, list[int]] = {}
    for item in by_status:
        ids = [text_for_chart(s) for s in item.series.columns["shot_id"]]
        item.series.columns["shot_id"] = ids
        inside = pins.keep(xs[item.status], ys[item.status])
        drawn[item.status] = [j for j, ok in enumerate(inside) if ok]
        for j, ok in enumerate(inside):
            if not ok:
                vx, vy = xs[item.status][j], ys[item.status][j]
                px, py = pins.add(
                    item.status,
                    vx,
                    vy,
                    ids[j],
                    _range_text(x, vx, x_lim) if x_lim else "",
                    _range_text(y, vy, y_lim) if y_lim else "",
                )
                pinned_x.append(rounded(px))
                pinned_y.append(rounded(py))
    x_range = _drawn_range(x_lim, [xs[s][j] for s, js in drawn.items() for j in js])
    y_range = _drawn_range(y_lim, [ys[s][j] for s, js in drawn.items() for j in js])
    traces = []
    for item in by_status:
        status, kept = item.status, drawn[item.status]
        at_x = np.array([xs[status][j] for j in kept], dtype=float)
        at_y = np.array([ys[status][j] for j in kept], dtype=float)
        if status == "nominal" and len(kept) > NOMINAL_MARKERS_MAX:
            traces.append(_density_trace(at_x, at_y, x_range, y_range, total=item.series.total, step=item.series.step))
            traces.append(_live_nominal_trace(x, y))
            continue
        stands_for = None
        if status != "nominal":
            picked, stands_for = _one_per_cell(at_x, at_y, x_range, y_range, cells, FLAGGED_MARKERS_MAX)
            kept = [kept[k] for k in picked.tolist()]
        traces.append(
            _point_trace(
                status,
                [xs[status][j] for j in kept],
                [ys[status][j] for j in kept],
                [item.series.columns["shot_id"][j] for j in kept],
                x_field=x,
                y_field=y,
                total=item.series.total,
                note=_series_note(item),
                stands_for=None if stands_for is None else stands_for.tolist(),
            )
        )
    if pinned_x:
        traces.append(pins.trace(pinned_x, pinned_y))
    return _StatusMap(traces, x_lim, y_lim, x_range, y_range)


def _robust_meta(scatter: _StatusMap) -> dict[str, Any]:
    return {
        "robust": {
            "x": list(scatter.x_lim) if scatter.x_lim else None,
            "y": list(scatter.y_lim) if scatter.y_lim else None,
        }
    }


def _axis_range(limits: tuple[float, float] | None) -> dict[str, Any]:
    return {"range": padded(limits)} if limits else {}


def regime_figure(
    session: Session,
    campaign: Campaign,
    x: str,
    y: str,
    upto_pk: int | None = None,
    totals: dict[str, int] | None = None,
    reader: Reader | None = None,
) -> dict[str, Any]:
    """Any two conditions or outputs against each other, coloured and shaped by status, on
    robust ranges: a wild value is pinned at the edge and marked, not allowed to flatten the map."""
    scatter = _status_map(session, campaign, x, y, upto_pk=upto_pk, totals=totals, reader=reader)
    figure_layout = layout(
        height=520,
        xaxis=axis(field_label(x), exponentformat="power", **_axis_range(scatter.x_lim)),
        yaxis=axis(field_label(y), exponentformat="power", **_axis_range(scatter.y_lim)),
        meta=_robust_meta(scatter),
    )
    return {"data": scatter.traces, "layout": figure_layout}


@dataclass(frozen=True)
class PhaseSummary:
    shots_with_phase: int
    jitter: PhaseJitter  # over the (thinned) shots with a measured phase
    thinned_step: int = 1  # the spreads come from about every k-th shot of a large campaign


@dataclass(frozen=True)
class PhaseData:
    """What the phase chart and its figures are computed from, read once."""

    totals: dict[str, int]  # shots with a measured phase, by status
    rows: store.PhaseRows
    derivatives: dict[str, float | None]


def phase_data(
    session: Session,
    campaign: Campaign,
    upto_pk: int | None = None,
    totals: dict[str, int] | None = None,
    reader: Reader | None = None,
) -> PhaseData:
    """The shots with a measured phase: counted by status (the chart's legend; their sum is the
    figures' count; ``totals`` when already counted), read in time order (thinned past
    PHASE_MAX_ROWS) and the typical phase derivatives over an even sample of them."""
    reader = _reader(session, campaign, upto_pk, reader)
    if totals is None:
        totals = reader.value_counts({"": (PHASE_FIELD,)})[""]
    total = sum(totals.values())
    step = store.thinning_step(total, PHASE_MAX_ROWS)
    rows = store.phase_rows_of(reader.phase_rows(JITTER_SOURCES, step=step), JITTER_SOURCES, total=total, step=step)
    return PhaseData(totals, rows, phase_derivatives(session, campaign, rows))


def phase_derivatives(session: Session, campaign: Campaign, rows: store.PhaseRows) -> dict[str, float | None]:
    """Typical d psi/d ln x of the jitter sources over an even sample of the rows' shots."""
    sample = shot_store.inputs_of(session, [rows.pk[i] for i in derivative_sample(len(rows.pk))]) if rows.pk else None
    if not sample or not sample[model.column_name(JITTER_SOURCES[0])]:
        return dict.fromkeys(JITTER_SOURCES)
    return typical_phase_derivatives(model_columns(sample), campaign.model_settings or {})


def _columns(rows: store.PhaseRows) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """The phases and the sources as arrays (None becomes NaN)."""
    return np.array(rows.phase, dtype=float), {
        path: np.array(values, dtype=float) for path, values in rows.sources.items()
    }


def phase_summary(
    session: Session, campaign: Campaign, upto_pk: int | None = None, data: PhaseData | None = None
) -> PhaseSummary:
    """The shared definition (app.services.phase_spread) over the shots with a measured phase."""
    data = data if data is not None else phase_data(session, campaign, upto_pk)
    phases, sources = _columns(data.rows)
    jitter = phase_jitter(phases, sources, data.derivatives)
    return PhaseSummary(shots_with_phase=data.rows.total, jitter=jitter, thinned_step=data.rows.step)


@dataclass(frozen=True)
class PhaseGroup:
    first_taken_at: datetime
    last_taken_at: datetime
    phase_mean_rad: float | None  # circular mean
    jitter: PhaseJitter


def phase_groups(session: Session, data: PhaseData) -> list[PhaseGroup]:
    """Consecutive shots (taken_at order) in at most PHASE_MAX_BINS groups of at least
    PHASE_MIN_SHOTS_PER_BIN shots where there are enough."""
    rows = data.rows
    n = len(rows.pk)
    if n < 2:
        return []
    count = max(1, min(PHASE_MAX_BINS, n // PHASE_MIN_SHOTS_PER_BIN))
    edges = np.linspace(0, n, count + 1).round().astype(int).tolist()
    parts = [(lo, hi) for lo, hi in zip(edges[:-1], edges[1:], strict=False) if hi > lo]
    # Only the groups' first and last shots need their times (a few hundred, not every row).
    times = store.taken_at_of(session, [rows.pk[i] for lo, hi in parts for i in (lo, hi - 1)])
    phases, sources = _columns(rows)
    jitters = phase_jitter_by_part(phases, sources, data.derivatives, parts)
    return [
        PhaseGroup(times[rows.pk[lo]], times[rows.pk[hi - 1]], circular_mean_rad(phases[lo:hi]), jitter)
        for (lo, hi), jitter in zip(parts, jitters, strict=True)
    ]


def phase_figure(
    session: Session,
    campaign: Campaign,
    upto_pk: int | None = None,
    data: PhaseData | None = None,
    reader: Reader | None = None,
) -> dict[str, Any]:
    """Measured modulation phase against shot time, beside the jitter the logged jitters predict.

    Top: each shot's phase with, per group of consecutive shots, the group's circular mean ±
    the expected jitter (root-sum-square over density, population, σ_z and σ_r of the typical
    d psi/d ln x × the group's shot-to-shot jitter of ln x).
    Bottom: per group, the measured shot-to-shot phase jitter beside that expected jitter
    (both about running windows of neighbouring shots, app.services.phase_spread).
    """
    zone = campaign_zone(campaign.timezone)
    data = data if data is not None else phase_data(session, campaign, upto_pk, reader=reader)
    by_status = _series_by_status(session, campaign, phase_series(), upto_pk=upto_pk, totals=data.totals, reader=reader)
    groups = phase_groups(session, data)
    traces: list[dict[str, Any]] = []
    centres, upper, lower, measured_rms, expected = [], [], [], [], []
    for g in groups:
        mid = g.first_taken_at + (g.last_taken_at - g.first_taken_at) / 2
        jitter = g.jitter.expected_phase_jitter_rad
        mean = g.phase_mean_rad
        centres.append(chart_time(mid, zone))
        upper.append(rounded(mean + jitter) if jitter is not None and mean is not None else None)
        lower.append(rounded(mean - jitter) if jitter is not None and mean is not None else None)
        measured_rms.append(rounded(g.jitter.measured_phase_std_rad))
        expected.append(rounded(jitter))
    band = {"color": rgba(OKABE_ITO["bluish_green"], 0.55), "width": 1, "shape": "hv"}
    traces.append(
        {
            "type": "scatter",
            "mode": "lines",
            "x": centres,
            "y": lower,
            "line": band,
            "name": "expected jitter band",
            "legendgroup": "band",
            "showlegend": False,
            "hoverinfo": "skip",
            "xaxis": "x",
            "yaxis": "y",
        }
    )
    traces.append(
        {
            "type": "scatter",
            "mode": "lines",
            "x": centres,
            "y": upper,
            "line": band,
            "fill": "tonexty",
            "fillcolor": rgba(OKABE_ITO["bluish_green"], 0.15),
            "name": "group mean \u00b1 jitter expected from the logged jitters",
            "legendgroup": "band",
            "hoverinfo": "skip",
            "xaxis": "x",
            "yaxis": "y",
        }
    )
    epochs = {item.status: np.array([_epoch(t) for t in item.series.columns["taken_at"]]) for item in by_status}
    phases = {item.status: rounded_list(item.series.columns[PHASE_FIELD]) for item in by_status}
    t_range = _drawn_range(None, [t for values in epochs.values() for t in values.tolist()])
    y_range = _drawn_range(None, [v for values in phases.values() for v in values if v is not None])
    for item in by_status:
        cols = item.series.columns
        t, y = epochs[item.status], np.array(phases[item.status], dtype=float)
        picked, stands_for = (
            (np.arange(len(t)), None)
            if item.status == "nominal"
            else _one_per_cell(t, y, t_range, y_range, HALF_WIDTH_MARKER_CELLS, FLAGGED_MARKERS_MAX)
        )
        kept = picked.tolist()
        trace = _point_trace(
            item.status,
            [chart_time(cols["taken_at"][j], zone) for j in kept],
            [phases[item.status][j] for j in kept],
            [text_for_chart(cols["shot_id"][j]) for j in kept],
            x_field="taken_at",
            y_field=PHASE_FIELD,
            total=item.series.total,
            note=_series_note(item),
            stands_for=None if stands_for is None else stands_for.tolist(),
        )
        # Many nominal shots: one thin line (one SVG path), as on the timeline.
        traces.append(_line_trace(trace) if item.status == "nominal" and len(t) > NOMINAL_MARKERS_MAX else trace)
    traces.append(
        {
            "type": "scatter",
            "mode": "lines+markers",
            "x": centres,
            "y": measured_rms,
            "name": "measured shot-to-shot phase jitter (per group)",
            "xaxis": "x2",
            "yaxis": "y2",
            "line": {"color": INK, "width": 2},
            "marker": {"symbol": "square", "size": 6},
        }
    )
    traces.append(
        {
            "type": "scatter",
            "mode": "lines",
            "x": centres,
            "y": expected,
            "name": "expected shot-to-shot jitter (per group)",
            "xaxis": "x2",
            "yaxis": "y2",
            "line": {"color": OKABE_ITO["bluish_green"], "width": 2, "dash": "dash"},
        }
    )
    figure_layout = layout(
        height=560,
        xaxis=axis("", type="date", anchor="y", showticklabels=False),
        yaxis=axis("measured phase [rad]", domain=[0.42, 1.0]),
        xaxis2=axis(f"taken at ({zone.key})", type="date", anchor="y2", matches="x"),
        yaxis2=axis("shot-to-shot jitter [rad]", domain=[0.0, 0.32], rangemode="tozero"),
    )
    return {"data": traces, "layout": figure_layout}


# Shots the median offset is taken from; past it, 1 in k. The median of n shots scatters by about
# 1.25 sigma / sqrt(n) (sqrt(pi / 2) for Gaussian offsets; common practice, no source): 0.018 sigma
# at 5,000, while reading every 5th shot of 100,000 instead cost the overview 80-150 ms of CPU.
CALIBRATION_MAX_ROWS = 5000


@dataclass(frozen=True)
class CalibrationSummary:
    shots_with_frequency: int
    median_density_offset: float | None  # implied/set density − 1 (a fraction)
    thinned_step: int = 1  # the median comes from about every k-th shot of a large campaign


def calibration_totals(reader: Reader) -> dict[str, int]:
    """Shots with a predicted and a measured frequency, by status (the chart's legend; their sum
    is the figures' count: the implied density needs the measured frequency)."""
    return reader.value_counts({"": CALIBRATION_FIELDS})[""]


def calibration_summary(
    session: Session,
    campaign: Campaign,
    upto_pk: int | None = None,
    totals: dict[str, int] | None = None,
    reader: Reader | None = None,
) -> CalibrationSummary:
    reader = _reader(session, campaign, upto_pk, reader)
    totals = totals if totals is not None else calibration_totals(reader)
    n = sum(totals.values())
    step = store.thinning_step(n, CALIBRATION_MAX_ROWS)
    offsets = reader.density_offsets(step=step)
    median = float(np.median(offsets)) if offsets else None
    return CalibrationSummary(n, median, step)


def calibration_figure(
    session: Session,
    campaign: Campaign,
    upto_pk: int | None = None,
    totals: dict[str, int] | None = None,
    reader: Reader | None = None,
) -> dict[str, Any]:
    """Measured modulation frequency against the plasma frequency the set density predicts, by
    status on robust ranges (as the regime map), with the line where they are equal."""
    predicted, measured = CALIBRATION_FIELDS
    scatter = _status_map(
        session,
        campaign,
        predicted,
        measured,
        upto_pk=upto_pk,
        totals=totals,
        cells=HALF_WIDTH_MARKER_CELLS,
        reader=reader,
    )
    traces = scatter.traces
    if any(t.get("x") for t in traces):  # across the predicted frequencies shown (the axis stays on the shots)
        lo, hi = scatter.x_range
        traces.insert(
            0,
            {
                "type": "scatter",
                "mode": "lines",
                "x": [rounded(lo), rounded(hi)],
                "y": [rounded(lo), rounded(hi)],
                "name": "measured = predicted",
                "hoverinfo": "skip",
                "line": {"color": OKABE_ITO["sky_blue"], "dash": "dot", "width": 2},
            },
        )
    figure_layout = layout(
        height=460,
        xaxis=axis("predicted plasma frequency [GHz]", **_axis_range(scatter.x_lim)),
        yaxis=axis("measured modulation frequency [GHz]", **_axis_range(scatter.y_lim)),
        meta=_robust_meta(scatter),
    )
    return {"data": traces, "layout": figure_layout}


@dataclass(frozen=True)
class FlagCodeCount:
    code: str
    by_severity: dict[str, int]

    @property
    def total(self) -> int:
        return sum(self.by_severity.values())


def flag_code_counts(
    session: Session, campaign: Campaign, rows: Sequence[store.FlagCount] | None = None
) -> list[FlagCodeCount]:
    """Shots by flag code and severity, the most frequent code first (``rows``: store.flag_counts, when read)."""
    counts: dict[str, dict[str, int]] = {}
    for row in rows if rows is not None else store.flag_counts(session, campaign.id):
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
        traces.append(
            {
                "type": "bar",
                "orientation": "h",
                "name": severity,
                "y": codes,
                "x": values,
                "marker": {
                    "color": style.colour,
                    "line": {"color": INK, "width": 0.5},
                    "pattern": {"shape": style.pattern, "fgcolor": "#ffffff", "fillmode": "overlay", "solidity": 0.25},
                },
                "hovertemplate": "%{y}: %{x} shots<extra>" + severity + "</extra>",
            }
        )
    figure_layout = layout(
        height=max(180, 34 * len(codes) + 90),
        barmode="stack",
        xaxis=axis("shots"),
        yaxis=axis("", automargin=True),
        margin={"l": 150, "r": 20, "t": 30, "b": 45},
    )
    return {"data": traces, "layout": figure_layout}
