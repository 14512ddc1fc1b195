"""What every chart of wakeledger shares: the palette, the marker shape of each status,
and the Plotly layout and axis defaults.

Status is shown by colour (Okabe-Ito, colour-blind safe), by marker shape and by name,
never by colour alone. The dashboard and detailed-run charts (Plotly) and the weekly
report's SVG charts all take their colours and shapes from here.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

# Okabe & Ito's colour-blind safe palette (common practice, no source).
OKABE_ITO: dict[str, str] = {
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
    "grey": "#999999",
}
INK = "#1d2733"
GRID = "#e3e7ec"


@dataclass(frozen=True)
class StatusStyle:
    name: str
    colour: str
    symbol: str  # Plotly marker symbol; the SVG report draws the same shape
    glyph: str  # the same shape in text
    meaning: str


STATUS_STYLES: dict[str, StatusStyle] = {
    "nominal": StatusStyle("nominal", OKABE_ITO["blue"], "circle", "\u25cf", "inside every limit"),
    "marginal": StatusStyle("marginal", OKABE_ITO["orange"], "diamond", "\u25c6", "past a first limit"),
    "outside": StatusStyle("outside", OKABE_ITO["vermillion"], "x", "\u2716", "past a second limit"),
}
SEVERITY_STYLES: dict[str, dict[str, str]] = {
    "outside": {"colour": OKABE_ITO["vermillion"], "pattern": "x"},
    "marginal": {"colour": OKABE_ITO["orange"], "pattern": "/"},
    "info": {"colour": OKABE_ITO["grey"], "pattern": ""},
}


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
