"""Plotly defaults shared by every interactive chart (dashboard and detailed runs):
margins, font, hover mode, legend and the light axis grid. Colours come from ``palette``."""

from __future__ import annotations

import html
from typing import Any

import numpy as np

from app.presentation.palette import GRID, INK


def layout(**extra: Any) -> dict[str, Any]:
    """A Plotly layout with wakeledger's margins, font, hover mode and legend; ``extra`` overrides."""
    figure_layout: dict[str, Any] = {
        "margin": {"l": 70, "r": 20, "t": 30, "b": 50},
        "paper_bgcolor": "rgba(0,0,0,0)",
        "plot_bgcolor": "#ffffff",
        "font": {"family": "system-ui, -apple-system, 'Segoe UI', sans-serif", "size": 12, "color": INK},
        "hovermode": "closest",
        "legend": {"orientation": "h", "y": 1.02, "yanchor": "bottom", "x": 0, "xanchor": "left"},
    }
    figure_layout.update(extra)
    return figure_layout


def axis(title: str, **extra: Any) -> dict[str, Any]:
    """A Plotly axis with a title and the light grid; ``extra`` overrides."""
    spec = {"title": {"text": title}, "gridcolor": GRID, "zeroline": False, "automargin": True}
    spec.update(extra)
    return spec


def text_for_chart(value: str) -> str:
    """Plotly renders a few HTML-like tags in hover text: escape user text first."""
    if "&" not in value and "<" not in value and ">" not in value:  # most shot ids: nothing to escape
        return value
    return html.escape(value, quote=False)


def title_lines(title: str, width: int) -> str:
    """An axis title broken at spaces into lines of about ``width`` characters (Plotly's ``<br>``; each
    line escaped), a trailing ``[unit]`` on a line of its own once the title needs more than one: Plotly
    never wraps a title, and one wider (or, upright, taller) than its chart is cut off."""
    words = title.split(" ")
    unit = words.pop() if len(words) > 1 and words[-1].startswith("[") and len(title) > width else None
    lines: list[str] = []
    for word in words:
        if lines and len(lines[-1]) + 1 + len(word) <= width:
            lines[-1] += " " + word
        else:
            lines.append(word)
    if unit is not None:
        lines.append(unit)
    return "<br>".join(text_for_chart(line) for line in lines)


ROBUST_TAIL = 0.005  # share of the values at each end that may not stretch an axis
ROBUST_MARGIN = 0.5  # the range kept: the inner quantiles widened by this share of their width


def robust_range(values: Any) -> tuple[float, float] | None:
    """An axis range that one wild value cannot flatten: the 0.5 % and 99.5 % points (at
    least the second smallest and second largest of 20 or more values), widened by half
    their width on each side. None when every value lies inside it (let the axis fit all).
    Common practice (trimmed ranges for display), no source."""
    v = np.asarray(values, dtype=float)
    v = np.sort(v[np.isfinite(v)])
    n = len(v)
    if n < 20:
        return None
    k = max(1, int(ROBUST_TAIL * n))
    lo, hi = float(v[k]), float(v[n - 1 - k])
    width = hi - lo
    if width <= 0:
        width = abs(hi) * 0.01 or 1.0
    lo, hi = lo - ROBUST_MARGIN * width, hi + ROBUST_MARGIN * width
    if v[0] >= lo and v[-1] <= hi:
        return None
    return (lo if v[0] < lo else float(v[0])), (hi if v[-1] > hi else float(v[-1]))


def padded(limits: tuple[float, float], share: float = 0.03) -> list[float]:
    """An explicit axis range a little wider than ``limits``, so points pinned at an edge show whole."""
    lo, hi = limits
    pad = (hi - lo) * share or abs(hi) * share or 1.0
    return [lo - pad, hi + pad]
