"""Figures of a scan (Plotly, the one palette), for the planner page and ``wakeledger plan``'s HTML file.

- Two axes: the status map. A heatmap of the status of every grid point in the status colours, with
  the status and the fired rules in each point's hover text, and each status region labelled with its
  glyph and name (so the map reads without colour); contour lines of one chosen output; the boundary of
  every rule that fires (marginal or outside) in part of the grid, drawn and labelled with its code;
  the base point marked. The first axis runs across, the second up.
- One axis: the chosen outputs as curves (one panel each, sharing the axis) over bands of the status,
  each band labelled; the rule boundaries as labelled vertical lines; the base value marked.

Plotly places annotations on a log axis by log10 of the value (``_position``); traces and shapes take
the values themselves.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
from scipy import ndimage

import model
from app.plain import float_list
from app.presentation.charts import axis, layout
from app.presentation.fields import field_label, with_unit
from app.presentation.palette import GRID, INK, OKABE_ITO, STATUS_STYLES, rgba
from app.services.planner.answers import fired_flag_sets
from model import plan

DEFAULT_CONTOUR = "efolds_exit"
DEFAULT_CURVES = ("efolds_exit", "phase_slip_rad")
MAX_CURVES = 4
LOG_CONTOUR_DECADES = 2.0  # an output spanning more decades than this is contoured as log10
REGION_LABEL_SHARE = 0.02  # status regions smaller than this share of the grid get no label
BAND_LABEL_SHARE = 0.08  # status bands narrower than this share of a 1-D scan get no label
_MARGINAL = model.SEVERITY_BY_RANK.index("marginal")
_DASHES = ("solid", "dash", "dot", "dashdot", "longdash", "longdashdot")
_CURVE_COLOURS = (INK, OKABE_ITO["reddish_purple"], OKABE_ITO["bluish_green"], OKABE_ITO["sky_blue"])


def _position(value: float, log: bool) -> float:
    return math.log10(value) if log else value


def _middle(a: float, b: float, log: bool) -> float:
    """The point halfway between two neighbouring grid values (geometric on a log axis)."""
    return math.sqrt(a * b) if log else 0.5 * (a + b)


def hover_texts(result: plan.Scan) -> np.ndarray:
    """Per point: its status and the rules that fired with their severities (an object array, flat)."""
    index, sets = fired_flag_sets(result.flags)
    rules = np.array(
        [", ".join(f"{code} ({severity})" for code, severity in fired) or "no rule fired" for fired in sets],
        dtype=object,
    )
    status = np.array([f"{STATUS_STYLES[s].glyph} {s}" for s in model.STATUSES], dtype=object)
    return status[result.status] + " \u00b7 " + rules[index]


def _status_colourscale() -> list[list[Any]]:
    k = len(model.STATUSES)
    scale: list[list[Any]] = []
    for i, name in enumerate(model.STATUSES):
        colour = STATUS_STYLES[name].colour
        scale += [[i / k, colour], [(i + 1) / k, colour]]
    return scale


def _annotation(x: float, y: float, text: str, *, size: int = 11, **extra: Any) -> dict[str, Any]:
    spec: dict[str, Any] = {
        "x": x,
        "y": y,
        "text": text,
        "showarrow": False,
        "font": {"size": size, "color": INK},
        "bgcolor": "rgba(255,255,255,0.82)",
        "borderpad": 2,
    }
    spec.update(extra)
    return spec


def _region_labels(status: np.ndarray, x: np.ndarray, y: np.ndarray, logs: tuple[bool, bool]) -> list[dict[str, Any]]:
    """A glyph-and-name label at the deepest point of each status region of the map (status[row=y, col=x])."""
    labels = []
    for rank, name in enumerate(model.STATUSES):
        regions, _ = ndimage.label(status == rank)
        sizes = np.bincount(regions.ravel())
        sizes[0] = 0  # label 0: the other statuses
        for region in np.nonzero(sizes >= REGION_LABEL_SHARE * status.size)[0].tolist():
            inside = regions == region
            depth = ndimage.distance_transform_edt(np.pad(inside, 1))[1:-1, 1:-1]
            row, col = np.unravel_index(int(np.argmax(depth)), depth.shape)
            style = STATUS_STYLES[name]
            labels.append(
                _annotation(
                    _position(float(x[col]), logs[0]),
                    _position(float(y[row]), logs[1]),
                    f"{style.glyph} {name}",
                    size=12,
                    bordercolor=style.text,
                    font={"size": 12, "color": style.text},
                )
            )
    return labels


def _fires(result: plan.Scan) -> dict[str, np.ndarray]:
    """Per rule code: where it fires marginal or outside (the rules that bound the nominal region)."""
    return {code: ranks >= _MARGINAL for code, ranks in result.flags.items()}


def _boundary_point(fires: np.ndarray, x: np.ndarray, y: np.ndarray, logs: tuple[bool, bool], quantile: float):
    """A point on the boundary of a rule's region in the map (fires[row=y, col=x]), between two grid points."""
    across = np.nonzero(fires[:, 1:] != fires[:, :-1])
    up = np.nonzero(fires[1:, :] != fires[:-1, :])
    points = [(_middle(x[c], x[c + 1], logs[0]), float(y[r])) for r, c in zip(*across, strict=True)]
    points += [(float(x[c]), _middle(y[r], y[r + 1], logs[1])) for r, c in zip(*up, strict=True)]
    points.sort()
    return points[min(len(points) - 1, int(quantile * len(points)))]


def status_map(
    result: plan.Scan, spacings: Sequence[str], base_values: Sequence[float], contour: str | None = DEFAULT_CONTOUR
) -> dict[str, Any]:
    """The status map of a two-axis scan; ``contour`` names an output of the scan to draw as contour lines."""
    ax, ay = result.axes
    x, y = ax.values, ay.values
    logs = (spacings[0] == "log", spacings[1] == "log")

    def grid(flat: np.ndarray) -> np.ndarray:
        """rows: the second axis (up), columns: the first (across)."""
        return flat.reshape(result.shape).T

    status = grid(result.status)
    label_x, label_y = field_label(ax.field), field_label(ay.field)
    heatmap: dict[str, Any] = {
        "type": "heatmap",
        "x": x,
        "y": y,
        "z": status,
        "zmin": -0.5,
        "zmax": len(model.STATUSES) - 0.5,
        "colorscale": _status_colourscale(),
        "text": grid(hover_texts(result)).tolist(),
        "name": "status",
        "showlegend": False,
        "colorbar": {
            "title": {"text": "status"},
            "tickvals": list(range(len(model.STATUSES))),
            "ticktext": [f"{STATUS_STYLES[s].glyph} {s}" for s in model.STATUSES],
            "len": 0.6,
        },
        "hovertemplate": f"{label_x} %{{x:.4g}}<br>{label_y} %{{y:.4g}}<br>%{{text}}",
        "meta": {"plan": "status"},
    }
    traces: list[dict[str, Any]] = [heatmap]
    if contour is not None and contour in result.outputs:
        values = result.outputs[contour]
        unit = model.OUTPUTS_BY_NAME[contour].unit
        heatmap["customdata"] = grid(values)
        heatmap["hovertemplate"] += f"<br>{contour} %{{customdata:.4g}} {unit}".rstrip()
        traces.append(_contour_trace(x, y, grid(values), contour))
    heatmap["hovertemplate"] += "<extra></extra>"

    annotations = _region_labels(status, x, y, logs)
    fires = {code: grid(f) for code, f in _fires(result).items()}
    bounded = [code for code, f in fires.items() if f.any() and not f.all()]
    for k, code in enumerate(bounded):
        traces.append(
            {
                "type": "contour",
                "x": x,
                "y": y,
                "z": fires[code].astype(np.int8),
                "contours": {"start": 0.5, "end": 0.5, "size": 1, "coloring": "none"},
                "line": {"color": INK, "width": 2, "dash": _DASHES[k % len(_DASHES)]},
                "showscale": False,
                "hoverinfo": "skip",
                "name": f"{code} boundary",
                "showlegend": True,
                "meta": {"plan": "rule", "code": code},
            }
        )
        bx, by = _boundary_point(fires[code], x, y, logs, (k + 1) / (len(bounded) + 1))
        annotations.append(
            _annotation(_position(bx, logs[0]), _position(by, logs[1]), code, size=10, bordercolor=INK, borderwidth=1)
        )
    traces.append(_base_marker([base_values[0]], [base_values[1]]))
    figure_layout = layout(
        height=580,
        xaxis=_scan_axis(label_x, logs[0]),
        yaxis=_scan_axis(label_y, logs[1]),
        legend={"orientation": "h", "y": -0.16, "yanchor": "top", "x": 0, "xanchor": "left"},
        margin={"l": 80, "r": 30, "t": 20, "b": 70},
        annotations=annotations,
    )
    return {"data": traces, "layout": figure_layout}


def _scan_axis(title: str, log: bool, **extra: Any) -> dict[str, Any]:
    """An axis of a scan; a log axis ticks at 1, 2 and 5 of each decade (labels that fit when it spans one)."""
    if log:
        return axis(title, type="log", dtick="D2", exponentformat="power", **extra)
    return axis(title, type="linear", **extra)


def _contour_trace(x: np.ndarray, y: np.ndarray, z: np.ndarray, output: str) -> dict[str, Any]:
    finite = z[np.isfinite(z)]
    log = (
        finite.size > 0
        and bool(np.all(finite > 0))
        and math.log10(float(finite.max()) / float(finite.min())) > LOG_CONTOUR_DECADES
    )
    unit = model.OUTPUTS_BY_NAME[output].unit
    name = f"log10 of {with_unit(output, unit)}" if log else with_unit(output, unit)
    with np.errstate(divide="ignore", invalid="ignore"):
        shown = np.log10(z) if log else z
    return {
        "type": "contour",
        "x": x,
        "y": y,
        "z": shown.astype(np.float32),
        "contours": {"coloring": "lines", "showlabels": True, "labelfont": {"size": 10, "color": INK}},
        # light lines read on every status colour and leave the rule boundaries (ink) standing out
        "colorscale": [[0, GRID], [1, GRID]],
        "line": {"width": 1.2},
        "ncontours": 12,
        "showscale": False,
        "hoverinfo": "skip",
        "name": f"contours: {name}",
        "showlegend": True,
        "connectgaps": False,
        "meta": {"plan": "contour", "output": output},
    }


def _base_marker(x: list[float], y: list[float]) -> dict[str, Any]:
    return {
        "type": "scatter",
        "mode": "markers+text",
        "x": x,
        "y": y,
        "text": ["base"],
        "textposition": "top center",
        "textfont": {"color": INK, "size": 12},
        "marker": {"symbol": "star", "size": 16, "color": "#ffffff", "line": {"color": INK, "width": 2}},
        "name": "base shot",
        "hovertemplate": "base shot<extra></extra>",
        "meta": {"plan": "base"},
    }


def _runs(values: np.ndarray) -> list[tuple[int, int]]:
    """(first, last) index of each run of equal values."""
    changes = np.nonzero(values[1:] != values[:-1])[0]
    starts = np.concatenate([[0], changes + 1])
    stops = np.concatenate([changes, [values.size - 1]])
    return list(zip(starts.tolist(), stops.tolist(), strict=True))


def curves(
    result: plan.Scan, spacing: str, base_value: float, outputs: Sequence[str] = DEFAULT_CURVES
) -> dict[str, Any]:
    """The curves of a one-axis scan: each output in its own panel over the status bands."""
    (ax,) = result.axes
    x = ax.values
    log = spacing == "log"
    names = [o for o in outputs if o in result.outputs][:MAX_CURVES] or list(result.outputs)[:1]
    hover = hover_texts(result)
    gap = 0.06
    height = (1.0 - gap * (len(names) - 1)) / max(len(names), 1)
    label_x = field_label(ax.field)
    traces: list[dict[str, Any]] = []
    axes_layout: dict[str, Any] = {}
    for i, name in enumerate(names):
        unit = model.OUTPUTS_BY_NAME[name].unit
        key = "" if i == 0 else str(i + 1)
        top = 1.0 - i * (height + gap)
        traces.append(
            {
                "type": "scatter",
                "mode": "lines+markers" if x.size <= 60 else "lines",
                "x": x,
                "y": float_list(result.outputs[name]),
                "customdata": hover,
                "name": with_unit(name, unit),
                "yaxis": f"y{key}",
                "line": {"color": _CURVE_COLOURS[i % len(_CURVE_COLOURS)], "width": 2},
                "marker": {"size": 5},
                "hovertemplate": f"{label_x} %{{x:.4g}}<br>{name} %{{y:.4g}} {unit}".rstrip()
                + "<br>%{customdata}<extra></extra>",
                "meta": {"plan": "curve", "output": name},
            }
        )
        axes_layout[f"yaxis{key}"] = axis(with_unit(name, unit), domain=[max(0.0, top - height), top], anchor="x")
    shapes: list[dict[str, Any]] = []
    annotations: list[dict[str, Any]] = []
    bounds = [x[0]] + [_middle(x[i], x[i + 1], log) for i in range(x.size - 1)] + [x[-1]]
    for first, last in _runs(result.status):
        name = model.STATUSES[result.status[first]]
        style = STATUS_STYLES[name]
        x0, x1 = bounds[first], bounds[last + 1]
        shapes.append(
            {
                "type": "rect",
                "xref": "x",
                "yref": "paper",
                "x0": x0,
                "x1": x1,
                "y0": 0,
                "y1": 1,
                "fillcolor": rgba(style.colour, 0.16),
                "line": {"width": 0},
                "layer": "below",
            }
        )
        if last - first + 1 >= BAND_LABEL_SHARE * x.size:
            annotations.append(
                _annotation(
                    _position(_middle(x0, x1, log), log),
                    1.0,
                    f"{style.glyph} {name}",
                    yref="paper",
                    yanchor="bottom",
                    font={"size": 12, "color": style.text},
                )
            )
    changes: dict[int, list[str]] = {}
    for code, fires in _fires(result).items():
        for i in np.nonzero(fires[1:] != fires[:-1])[0].tolist():
            changes.setdefault(i, []).append(code)
    for i, codes in sorted(changes.items()):
        at = _middle(x[i], x[i + 1], log)
        shapes.append(_vertical_line(at, {"color": INK, "width": 1, "dash": "dot"}))
        annotations.append(
            _annotation(
                _position(at, log), 0.01, ", ".join(codes), size=10, yref="paper", yanchor="bottom", textangle=-90
            )
        )
    shapes.append(_vertical_line(base_value, {"color": INK, "width": 2, "dash": "dash"}))
    annotations.append(_annotation(_position(base_value, log), 1.0, "base", yref="paper", yanchor="top"))
    figure_layout = layout(
        height=max(380, 220 * len(names)),
        xaxis=_scan_axis(label_x, log, anchor=f"y{len(names) if len(names) > 1 else ''}"),
        margin={"l": 80, "r": 30, "t": 40, "b": 100},
        legend={"orientation": "h", "y": -0.2, "yanchor": "top", "x": 0, "xanchor": "left"},
        shapes=shapes,
        annotations=annotations,
        hovermode="x",  # a click anywhere above a value picks that point
        **axes_layout,
    )
    return {"data": traces, "layout": figure_layout}


def _vertical_line(x: float, line: Mapping[str, Any]) -> dict[str, Any]:
    return {"type": "line", "xref": "x", "yref": "paper", "x0": x, "x1": x, "y0": 0, "y1": 1, "line": dict(line)}


def scan_figure(
    result: plan.Scan,
    spacings: Sequence[str],
    base_values: Sequence[float],
    contour: str | None = DEFAULT_CONTOUR,
    curve_outputs: Sequence[str] = DEFAULT_CURVES,
) -> dict[str, Any]:
    """A scan's figure (``spacings`` and ``base_values`` per axis): the status map of two axes, the curves of one."""
    if len(result.axes) == 2:
        return status_map(result, spacings, base_values, contour)
    return curves(result, spacings[0], base_values[0], curve_outputs)
