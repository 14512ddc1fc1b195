"""The one palette and glyph table: colours, marker shapes and glyphs of statuses and
severities, for Plotly charts, the SVG report charts, the page CSS and the page script.

Status is shown by colour (Okabe & Ito's colour-blind safe palette), by marker shape and
by name, never by colour alone. ``colour`` marks points and bars; ``text`` is the darker
shade used for words on white (WCAG AA contrast, at least 4.5:1); ``tint`` is a light
background. The page CSS reads these as custom properties from ``css_variables()``
(served at /assets/palette.css and inlined in the weekly report); the page script reads
the glyphs from the ``presentation`` data block of every page.
"""

from __future__ import annotations

from dataclasses import dataclass

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
MUTED = "#757575"  # shots not evaluated, info flags, neutral bars (4.6:1 on white)
SERIES = "#1f5fa8"  # one-series bars (histograms)


@dataclass(frozen=True)
class StatusStyle:
    name: str
    colour: str
    text: str  # the same hue, dark enough for words on white
    tint: str  # a light background of the same hue
    symbol: str  # Plotly marker symbol; the SVG report draws the same shape
    glyph: str  # the same shape in text
    meaning: str


STATUS_STYLES: dict[str, StatusStyle] = {
    "nominal": StatusStyle(
        "nominal", OKABE_ITO["blue"], "#0072B2", "#e5f1f8", "circle", "\u25cf", "inside every limit"
    ),
    "marginal": StatusStyle(
        "marginal", OKABE_ITO["orange"], "#8a6500", "#fdf4df", "diamond", "\u25c6", "past a first limit"
    ),
    "outside": StatusStyle(
        "outside", OKABE_ITO["vermillion"], "#a34400", "#fdeee4", "x", "\u2716", "past a second limit"
    ),
}


@dataclass(frozen=True)
class SeverityStyle:
    name: str
    colour: str
    text: str
    tint: str
    pattern: str  # Plotly bar pattern: severity is shown by hatching too


SEVERITY_STYLES: dict[str, SeverityStyle] = {
    "outside": SeverityStyle("outside", OKABE_ITO["vermillion"], "#a34400", "#fdeee4", "x"),
    "marginal": SeverityStyle("marginal", OKABE_ITO["orange"], "#8a6500", "#fdf4df", "/"),
    "info": SeverityStyle("info", MUTED, "#555555", "#f3f3f3", ""),
}

# Colours of the groups the report charts draw (statuses, shots not evaluated, one series).
GROUP_COLOURS: dict[str, str] = {
    **{name: style.colour for name, style in STATUS_STYLES.items()},
    "not_evaluated": MUTED,
    "shots": SERIES,
}
GLYPHS: dict[str, str] = {name: style.glyph for name, style in STATUS_STYLES.items()}


def rgba(colour: str, alpha: float) -> str:
    """A palette colour (``#rrggbb``) with transparency, for Plotly fills and bands."""
    r, g, b = (int(colour[i : i + 2], 16) for i in (1, 3, 5))
    return f"rgba({r},{g},{b},{alpha:g})"


def css_variables() -> str:
    """The palette as CSS custom properties on :root (the page CSS and the report use them)."""
    lines = [f"--ink: {INK};", f"--grid: {GRID};", f"--muted: {MUTED};", f"--series: {SERIES};"]
    lines += [f"--okabe-{name.replace('_', '-')}: {colour};" for name, colour in OKABE_ITO.items()]
    for style in STATUS_STYLES.values():
        lines += [
            f"--{style.name}: {style.colour};",
            f"--{style.name}-text: {style.text};",
            f"--{style.name}-tint: {style.tint};",
        ]
    lines += [
        f"--info: {SEVERITY_STYLES['info'].colour};",
        f"--info-text: {SEVERITY_STYLES['info'].text};",
        f"--info-tint: {SEVERITY_STYLES['info'].tint};",
    ]
    return ":root { " + " ".join(lines) + " }"
