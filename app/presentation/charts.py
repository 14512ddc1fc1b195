"""Plotly defaults shared by every interactive chart (dashboard and detailed runs):
margins, font, hover mode, legend and the light axis grid. Colours come from ``palette``."""

from __future__ import annotations

import html
from typing import Any

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
    return html.escape(value, quote=False)
