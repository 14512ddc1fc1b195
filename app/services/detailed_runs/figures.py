"""The charts and key numbers of a detailed run, built once for the shot page and the HTML file.

Three Plotly figure dicts: the σ_r(ζ, z) map, δ(z) at the reference slice beside the
closed form, and E_z(ζ) at the exit. Every chart marks where the envelope model stops
being valid (saturation) and carries the solver's own validity note.
"""

from __future__ import annotations

import math
import re
import warnings
from collections.abc import Callable, Mapping
from typing import Any

import numpy as np

from app.plain import rounded_list
from app.presentation.charts import axis, layout
from app.presentation.numbers import MISSING, format_number
from app.presentation.palette import INK, OKABE_ITO
from app.tables import DetailedRun

# Chart payload limits (the page embeds the charts; the stored result keeps every value).
MAP_MAX_ZETA = 400
MAP_MAX_Z = 100
CURVE_MAX_POINTS = 800
FIELD_MAX_POINTS = 4000

SOLVER_COLOUR = OKABE_ITO["blue"]
CLOSED_FORM_COLOUR = OKABE_ITO["bluish_green"]
LIMIT_COLOUR = OKABE_ITO["vermillion"]
REFERENCE_COLOUR = OKABE_ITO["grey"]


def _text(value: Any, unit: str = "") -> str:
    """Counts as they are (no thousands separator), other numbers by the one formatter."""
    if isinstance(value, int) and not isinstance(value, bool):
        return f"{value} {unit}".strip()
    return format_number(value, unit)


_METRES = re.compile(r"(?<![\w.])(-?\d+(?:\.\d*)?(?:[eE][-+]?\d+)?) m\b")


def _seed_in_mm(text: str) -> str:
    """The solver's seed sentence with its positions along the bunch in mm, as every page
    writes bunch positions (the solver writes SI metres): ``0.035 m`` reads ``35 mm``."""
    return _METRES.sub(lambda m: format_number(float(m.group(1)) * 1e3, "mm"), text)


def run_facts(doc: Mapping[str, Any], run: DetailedRun | None = None) -> list[list[str]]:
    """Label/value pairs of a run's key numbers (the same list on the page and in the HTML file)."""
    n = doc.get("numerics") or {}
    facts = []
    if run is not None:
        facts += [["run", f"#{run.id}, shot revision {run.shot_revision}, model {run.model_version}"]]
    facts += [
        [
            "grid",
            f"{_text(n.get('slices'))} slices ({_text(n.get('slices_per_wavelength'))} per plasma wavelength) "
            f"\u00d7 {_text(n.get('steps'))} steps of {_text(n.get('dz_m'), 'm')}"
            f"{' (default step)' if n.get('dz_default') else ''}",
        ],
        ["seed", _seed_in_mm(str(n.get("seed") or MISSING))],
        ["valid until", _text(doc.get("valid_until_m"), "m")],
        [
            "saturation (solver)",
            _text(doc.get("saturation_z_m"), "m")
            + (f" \u2014 {doc['saturation_reason']}" if doc.get("saturation_reason") else ""),
        ],
        ["saturation (closed form)", _text(doc.get("closed_form_saturation_z_m"), "m")],
        ["end of the run", stop_text(doc) or "the plasma exit"],
        [
            "fitted e-folds",
            f"{_text(doc.get('fitted_efolds'))} against {_text(doc.get('closed_form_efolds_at_fit'))} "
            f"closed form (difference {_text(doc.get('efolds_difference'))})",
        ],
        ["wall time", _text(n.get("wall_time_s"), "s")],
    ]
    return facts


# ------------------------------------------------------------------------------ charts


def _array(values: Any) -> np.ndarray:
    """JSON lists (None for NaN) as a float array."""
    return np.array(values if values is not None else [], dtype=float)


def _plain(values: np.ndarray, digits: int = 6) -> list[Any]:
    """Rounded numbers for the chart payload; NaN and infinity become null."""
    return rounded_list(values, digits)


def _stride(n: int, limit: int) -> np.ndarray:
    """At most `limit` indices spread evenly over range(n), first and last included."""
    if n <= limit:
        return np.arange(n)
    return np.unique(np.linspace(0, n - 1, limit).round().astype(int))


def _binned(values: np.ndarray, size: int, reduce: Callable[..., np.ndarray]) -> np.ndarray:
    """Rows grouped `size` at a time (the last group padded with NaN) and reduced ignoring NaN."""
    if size <= 1:
        return values
    rows = values.shape[0]
    pad = (-rows) % size
    padded = np.concatenate([values, np.full((pad, *values.shape[1:]), np.nan)]) if pad else values
    grouped = padded.reshape(rows // size + (1 if pad else 0), size, *values.shape[1:])
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN groups reduce to NaN
        return reduce(grouped, axis=1)


def _valid_until(doc: Mapping[str, Any]) -> tuple[float | None, float]:
    length = float(doc["ez_z_m"])
    valid = doc.get("valid_until_m")
    return (None if valid is None or valid >= length else float(valid)), length


def stop_text(doc: Mapping[str, Any]) -> str | None:
    """Where a run ended early, past saturation (option stop_after_saturation), or None."""
    stopped = doc.get("stopped_at_m")
    if stopped is None:
        return None
    return (
        f"run stopped at z = {float(stopped):.3g} m, {float(doc['stop_after_saturation_m']):g} m past saturation "
        f"(plasma exit at {float(doc['plasma_length_m']):.3g} m)"
    )


def _stop_marks(doc: Mapping[str, Any]) -> tuple[list[dict[str, Any]], list[dict[str, Any]]]:
    """A solid line and a note where a run stopped past saturation (charts over z)."""
    text = stop_text(doc)
    if text is None:
        return [], []
    stopped = float(doc["stopped_at_m"])
    line = {
        "type": "line",
        "xref": "x",
        "yref": "paper",
        "x0": stopped,
        "x1": stopped,
        "y0": 0,
        "y1": 1,
        "line": {"color": INK, "width": 2},
        "layer": "above",
    }
    note = {
        "xref": "x",
        "yref": "paper",
        "x": stopped,
        "y": 0.0,
        "yanchor": "bottom",
        "xanchor": "right",
        "showarrow": False,
        "font": {"color": INK, "size": 11},
        "text": text,
    }
    return [line], [note]


def _validity_marks(doc: Mapping[str, Any]) -> tuple[list[dict[str, Any]], list[dict[str, Any]]]:
    """Shade z beyond saturation and draw a vertical line where validity ends, and mark where a
    run stopped past saturation (charts over z)."""
    stop_shapes, stop_notes = _stop_marks(doc)
    shapes, annotations = _saturation_marks(doc)
    return shapes + stop_shapes, annotations + stop_notes


def _saturation_marks(doc: Mapping[str, Any]) -> tuple[list[dict[str, Any]], list[dict[str, Any]]]:
    valid, length = _valid_until(doc)
    if valid is None:
        return [], []
    shapes = [
        {
            "type": "rect",
            "xref": "x",
            "yref": "paper",
            "x0": valid,
            "x1": length,
            "y0": 0,
            "y1": 1,
            "fillcolor": "#7f7f7f",
            "opacity": 0.22,
            "line": {"width": 0},
            "layer": "above",
        },
        {
            "type": "line",
            "xref": "x",
            "yref": "paper",
            "x0": valid,
            "x1": valid,
            "y0": 0,
            "y1": 1,
            "line": {"color": LIMIT_COLOUR, "width": 2, "dash": "dash"},
            "layer": "above",
        },
    ]
    annotations = [
        {
            "xref": "x",
            "yref": "paper",
            "x": valid,
            "y": 1.0,
            "yanchor": "bottom",
            "xanchor": "left",
            "showarrow": False,
            "font": {"color": LIMIT_COLOUR, "size": 11},
            "text": f"valid until saturation, z = {valid:.3g} m (shaded: qualitative)",
        },
    ]
    return shapes, annotations


def _swap_axes(item: dict[str, Any]) -> dict[str, Any]:
    """A shape or annotation drawn over z across, redrawn for z up (x and y exchanged)."""
    swap = {"x": "y", "y": "x", "xref": "yref", "yref": "xref", "x0": "y0", "y0": "x0", "x1": "y1", "y1": "x1"}
    out = {swap.get(k, k): v for k, v in item.items()}
    for ref in ("xref", "yref"):  # a reference to the data axis moves to the other axis
        if out.get(ref) in ("x", "y"):
            out[ref] = {"x": "y", "y": "x"}[out[ref]]
    if "xanchor" in item or "yanchor" in item:  # an annotation: at the right edge, above its line
        out.update(x=1.0, xanchor="right", yanchor="bottom")
    return out


def sigma_map_figure(doc: Mapping[str, Any]) -> dict[str, Any]:
    """σ_r(ζ, z) as a heatmap of log10(σ_r / 1 mm): ζ across with the head right, as in the
    exit-field chart below it (the two ζ axes read the same way), z up."""
    sigma_mm = _array(doc["sigma_r_m"]) * 1e3  # slices x stored z
    zeta_mm = _array(doc["zeta_m"]) * 1e3
    z_m = _array(doc["z_m"])
    columns = _stride(z_m.size, MAP_MAX_Z)
    bin_size = max(1, math.ceil(zeta_mm.size / MAP_MAX_ZETA))
    # The largest radius of each group of slices: a group spans a fraction of a plasma wavelength
    # or more, and its maximum keeps the defocused slices visible instead of aliasing them away.
    sigma = _binned(sigma_mm[:, columns], bin_size, np.nanmax)
    zeta = _binned(zeta_mm, bin_size, np.nanmean)
    with np.errstate(all="ignore"):
        log_sigma = np.log10(np.where(sigma > 0, sigma, np.nan))
    finite = log_sigma[np.isfinite(log_sigma)]
    lo, hi = (float(finite.min()), float(finite.max())) if finite.size else (-2.0, 1.0)
    tick_values = [
        math.log10(v)
        for v in (0.001, 0.002, 0.005, 0.01, 0.02, 0.05, 0.1, 0.2, 0.5, 1, 2, 5, 10, 20, 50, 100)
        if lo <= math.log10(v) <= hi
    ]
    tick_digits = 3
    if len(tick_values) < 3:  # a narrow range: evenly spaced ticks instead of round numbers
        tick_values, tick_digits = np.linspace(lo, hi, 5).tolist(), 4
    grouped = f"; maximum over groups of {bin_size} slices" if bin_size > 1 else ""
    marks, notes = _validity_marks(doc)
    shapes, annotations = [_swap_axes(m) for m in marks], [_swap_axes(a) for a in notes]
    zeta_ref = float(doc["reference_zeta_m"]) * 1e3
    shapes.append(
        {
            "type": "line",
            "xref": "x",
            "yref": "paper",
            "x0": zeta_ref,
            "x1": zeta_ref,
            "y0": 0,
            "y1": 1,
            "line": {"color": "#ffffff", "width": 1, "dash": "dot"},
            "layer": "above",
        }
    )
    trace = {
        "type": "heatmap",
        "x": _plain(zeta),
        "y": _plain(z_m[columns]),
        "z": _plain(log_sigma.T, 4),
        "colorscale": "Viridis",
        "zmin": lo,
        "zmax": hi,
        "colorbar": {
            "title": {"text": "σ_r [mm]", "side": "right"},
            "tickvals": tick_values,
            "ticktext": [f"{10**v:.{tick_digits}g}" for v in tick_values],
        },
        "hovertemplate": "ζ %{x:.4g} mm<br>z %{y:.3g} m<br>log₁₀(σ_r / mm) %{z:.3f}<extra></extra>",
        "name": "σ_r(ζ, z)",
    }
    figure_layout = layout(
        height=420,
        xaxis=axis("ζ along the bunch [mm] (head right; dotted: reference slice)"),
        yaxis=axis("z along the plasma [m]"),
        shapes=shapes,
        annotations=[
            *annotations,
            {
                "xref": "paper",
                "yref": "paper",
                "x": 0,
                "y": -0.2,
                "xanchor": "left",
                "yanchor": "top",
                "showarrow": False,
                "font": {"size": 11},
                "text": f"head right, as in the exit-field chart; dotted line: reference slice{grouped}",
            },
        ],
        margin={"l": 70, "r": 20, "t": 40, "b": 80},
    )
    return {"data": [trace], "layout": figure_layout}


def modulation_figure(doc: Mapping[str, Any]) -> dict[str, Any]:
    """δ(z) at the reference slice from the solver beside the closed form (MODEL.md section 4), log y."""
    z = _array(doc["z_steps_m"])
    keep = _stride(z.size, CURVE_MAX_POINTS)
    z = z[keep]

    def positive(key: str) -> list[Any]:
        values = _array(doc[key])[keep]
        return _plain(np.where(values > 0, values, np.nan))

    sat = float(doc["saturation_modulation"])
    shapes, annotations = _validity_marks(doc)
    xs = _plain(z)
    # The solver starts from an unmodulated beam (δ ~ 0 at z = 0): start the axis where growth is visible.
    shown = [
        v
        for v in (positive("reference_modulation_steps")[1:] + positive("closed_form_modulation_steps"))
        if v is not None
    ]
    y_range = [math.log10(min(shown) / 3.0), math.log10(sat * 3.0)] if shown and min(shown) < sat else None
    traces = [
        {
            "type": "scatter",
            "mode": "lines",
            "x": xs,
            "y": positive("reference_modulation_steps"),
            "name": "δ(z) envelope solver",
            "line": {"color": SOLVER_COLOUR, "width": 3},
            "hovertemplate": "z %{x:.3g} m<br>δ %{y:.3g}<extra>solver</extra>",
        },
        {
            "type": "scatter",
            "mode": "lines",
            "x": xs,
            "y": positive("closed_form_modulation_steps"),
            "name": "δ(z) closed form",
            "line": {"color": CLOSED_FORM_COLOUR, "width": 2, "dash": "dash"},
            "hovertemplate": "z %{x:.3g} m<br>δ %{y:.3g}<extra>closed form</extra>",
        },
        {
            "type": "scatter",
            "mode": "lines",
            "x": [xs[0], xs[-1]] if xs else [],
            "y": [sat, sat],
            "name": f"saturation level δ_sat = {sat:g}",
            "line": {"color": REFERENCE_COLOUR, "dash": "dot"},
            "hoverinfo": "skip",
        },
    ]
    figure_layout = layout(
        height=380,
        xaxis=axis("z along the plasma [m]"),
        yaxis=axis(
            f"δ at the reference slice ζ = {float(doc['reference_zeta_m']) * 1e3:.4g} mm",
            type="log",
            exponentformat="power",
            **({"range": y_range} if y_range else {}),
        ),
        shapes=shapes,
        annotations=annotations,
        margin={"l": 70, "r": 20, "t": 40, "b": 50},
    )
    return {"data": traces, "layout": figure_layout}


def exit_field_figure(doc: Mapping[str, Any]) -> dict[str, Any]:
    """On-axis E_z(ζ) at the end of the run (the plasma exit, or where it stopped) [MV/m]; past saturation it
    is marked qualitative."""
    zeta = _array(doc["zeta_m"]) * 1e3
    field = _array(doc["ez_v_m"]) / 1e6
    valid, length = _valid_until(doc)
    traces: list[dict[str, Any]] = []
    if zeta.size > FIELD_MAX_POINTS:
        size = math.ceil(zeta.size / (FIELD_MAX_POINTS // 2))
        centre = _plain(_binned(zeta, size, np.nanmean))
        # The field oscillates once per plasma wavelength: draw its band, not an aliased line.
        traces += [
            {
                "type": "scatter",
                "mode": "lines",
                "x": centre,
                "y": _plain(_binned(field, size, np.nanmin)),
                "line": {"color": SOLVER_COLOUR, "width": 0.5},
                "name": "E_z minimum",
                "showlegend": False,
                "hovertemplate": "ζ %{x:.4g} mm<br>min E_z %{y:.3g} MV/m<extra></extra>",
            },
            {
                "type": "scatter",
                "mode": "lines",
                "x": centre,
                "y": _plain(_binned(field, size, np.nanmax)),
                "fill": "tonexty",
                "line": {"color": SOLVER_COLOUR, "width": 0.5},
                "name": f"E_z(ζ) band (minimum to maximum over groups of {size} slices)",
                "hovertemplate": "ζ %{x:.4g} mm<br>max E_z %{y:.3g} MV/m<extra></extra>",
            },
        ]
    else:
        traces.append(
            {
                "type": "scatter",
                "mode": "lines",
                "x": _plain(zeta),
                "y": _plain(field),
                "name": "E_z(ζ) on axis",
                "line": {"color": SOLVER_COLOUR, "width": 1.5},
                "hovertemplate": "ζ %{x:.4g} mm<br>E_z %{y:.3g} MV/m<extra></extra>",
            }
        )
    zeta_ref = float(doc["reference_zeta_m"]) * 1e3
    shapes = [
        {
            "type": "line",
            "xref": "x",
            "yref": "paper",
            "x0": zeta_ref,
            "x1": zeta_ref,
            "y0": 0,
            "y1": 1,
            "line": {"color": REFERENCE_COLOUR, "dash": "dash"},
        }
    ]
    where = "at the plasma exit" if doc.get("stopped_at_m") is None else "where the run stopped, past saturation"
    if valid is None:
        note, colour = f"{where}, z = {length:.3g} m: inside the model's validity", INK
    else:
        note = f"{where}, z = {length:.3g} m, past saturation (valid until z = {valid:.3g} m): qualitative only"
        colour = LIMIT_COLOUR
    figure_layout = layout(
        height=360,
        xaxis=axis("ζ along the bunch [mm] (head right; dashed: reference slice)"),
        yaxis=axis("on-axis E_z [MV/m]"),
        shapes=shapes,
        annotations=[
            {
                "xref": "paper",
                "yref": "paper",
                "x": 0,
                "y": 1.0,
                "xanchor": "left",
                "yanchor": "bottom",
                "showarrow": False,
                "text": note,
                "font": {"color": colour, "size": 11},
            }
        ],
        margin={"l": 70, "r": 20, "t": 40, "b": 50},
    )
    return {"data": traces, "layout": figure_layout}


CHART_TITLES = {
    "map": "Slice radius σ_r(ζ, z)",
    "growth": "Modulation δ(z) at the reference slice",
    "field": "On-axis field E_z(ζ) at the end of the run",
}


def run_figures(doc: Mapping[str, Any]) -> dict[str, dict[str, Any]]:
    """The three charts of a run, keyed like CHART_TITLES."""
    return {"map": sigma_map_figure(doc), "growth": modulation_figure(doc), "field": exit_field_figure(doc)}
