"""Static SVG charts for the self-contained weekly report: no script, no network,
and they print as crisply as the text around them.

Points are drawn one path per group, so a 10,000-shot scatter stays a few hundred
kilobytes: nominal shots as zero-length round-capped segments (dots), marginal shots as
diamonds and outside shots as crosses, the shapes of app.presentation.palette.STATUS_STYLES.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from html import escape

import numpy as np
from markupsafe import Markup

import model
from app.presentation.charts import robust_range
from app.presentation.numbers import format_number
from app.presentation.palette import GROUP_COLOURS, MUTED, STATUS_STYLES

# Colours per group come from the one palette; the legend always names them and the
# scatter marks each status by its shape too, so grey print stays readable.
_MARKER_SIZE = 2.6  # half-width of a diamond or cross in px
_W, _H = 720, 260
_M = {"left": 64, "right": 16, "top": 30, "bottom": 44}


def nice_ticks(lo: float, hi: float, count: int = 5) -> list[float]:
    """Round tick values covering [lo, hi] (1, 2, 5 times a power of ten)."""
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return []
    if hi <= lo:
        pad = abs(lo) * 0.05 or 1.0
        lo, hi = lo - pad, hi + pad
    raw = (hi - lo) / max(count, 1)
    mag = 10 ** math.floor(math.log10(raw))
    step = next(m * mag for m in (1, 2, 5, 10) if m * mag >= raw)
    first = math.ceil(lo / step) * step
    ticks = []
    t = first
    while t <= hi + step * 1e-9:
        ticks.append(0.0 if abs(t) < step * 1e-9 else t)
        t += step
    return ticks


def _fmt(v: float) -> str:
    """Tick labels: the one number formatter, to 6 significant digits."""
    return format_number(float(v), digits=6)


def _frame(title: str, x_label: str, y_label: str) -> list[str]:
    return [
        f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {_W} {_H}" role="img" '
        f'aria-label="{escape(title)}" class="chart">',
        f"<title>{escape(title)}</title>",
        f'<text x="{_M["left"]}" y="18" class="chart-title">{escape(title)}</text>',
        f'<text x="{(_W + _M["left"]) / 2:.0f}" y="{_H - 6}" text-anchor="middle" class="axis-label">'
        f"{escape(x_label)}</text>",
        f'<text transform="translate(14 {(_H) / 2:.0f}) rotate(-90)" text-anchor="middle" '
        f'class="axis-label">{escape(y_label)}</text>',
    ]


class _Scale:
    def __init__(self, lo: float, hi: float, a: float, b: float):
        if hi <= lo:
            pad = abs(lo) * 0.05 or 1.0
            lo, hi = lo - pad, hi + pad
        self.lo, self.hi, self.a, self.b = lo, hi, a, b

    def __call__(self, v: np.ndarray | float) -> np.ndarray | float:
        return self.a + (np.asarray(v, dtype=float) - self.lo) * (self.b - self.a) / (self.hi - self.lo)


def _axes(xs: _Scale, ys: _Scale, x_ticks: Sequence[tuple[float, str]], y_ticks: Sequence[float]) -> list[str]:
    x0, x1 = _M["left"], _W - _M["right"]
    y0, y1 = _H - _M["bottom"], _M["top"]
    out = [f'<rect x="{x0}" y="{y1}" width="{x1 - x0}" height="{y0 - y1}" class="plot-area"/>']
    for v in y_ticks:
        y = float(ys(v))
        out.append(f'<line x1="{x0}" x2="{x1}" y1="{y:.1f}" y2="{y:.1f}" class="grid"/>')
        out.append(f'<text x="{x0 - 6}" y="{y + 4:.1f}" text-anchor="end" class="tick">{_fmt(v)}</text>')
    for v, label in x_ticks:
        x = float(xs(v))
        out.append(f'<line x1="{x:.1f}" x2="{x:.1f}" y1="{y0}" y2="{y0 + 4}" class="axis"/>')
        out.append(f'<text x="{x:.1f}" y="{y0 + 16}" text-anchor="middle" class="tick">{escape(label)}</text>')
    return out


def _symbol(group: str) -> str:
    style = STATUS_STYLES.get(group)
    return style.symbol if style else "circle"


def _marker_path(symbol: str, px: Sequence[float], py: Sequence[float]) -> str:
    """SVG path data drawing one marker of ``symbol`` (a Plotly symbol name) at each point."""
    r = _MARKER_SIZE
    if symbol == "diamond":
        return "".join(f"M{a:.1f} {b - r:.1f}l{r} {r}l{-r} {r}l{-r} {-r}z" for a, b in zip(px, py, strict=True))
    if symbol in ("triangle-up", "triangle-down"):
        h = -r if symbol == "triangle-up" else r
        return "".join(f"M{a:.1f} {b + h:.1f}l{r} {-2 * h}h{-2 * r}z" for a, b in zip(px, py, strict=True))
    if symbol == "x":
        return "".join(
            f"M{a - r:.1f} {b - r:.1f}l{2 * r} {2 * r}m0 {-2 * r}l{-2 * r} {2 * r}" for a, b in zip(px, py, strict=True)
        )
    return "".join(f"M{a:.1f} {b:.1f}h0" for a, b in zip(px, py, strict=True))


def _legend(groups: Sequence[str], counts: Mapping[str, int] | None = None, shapes: bool = False) -> list[str]:
    """Group names right-aligned above the plot: a colour swatch each, or the marker shape
    (``shapes``) where the chart draws the groups as shaped points."""
    out, x = [], _W - _M["right"]
    for g in reversed(list(groups)):
        label = g.replace("_", " ") + (f" ({counts[g]})" if counts is not None else "")
        x -= 14 + 7 * len(label)
        colour = GROUP_COLOURS.get(g, MUTED)
        if shapes:
            symbol = _symbol(g)
            swatch = (
                f'<path d="{_marker_path(symbol, [x + 5], [14])}" stroke="{colour}" class="points marker-{symbol}"/>'
            )
        else:
            swatch = f'<rect x="{x}" y="9" width="10" height="10" fill="{colour}"/>'
        out.append(swatch + f'<text x="{x + 14}" y="18" class="legend">{escape(label)}</text>')
    return out


def empty_chart(title: str, message: str) -> Markup:
    return Markup(
        f'<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 {_W} 60" role="img" '
        f'aria-label="{escape(title)}" class="chart"><title>{escape(title)}</title>'
        f'<text x="{_M["left"]}" y="18" class="chart-title">{escape(title)}</text>'
        f'<text x="{_M["left"]}" y="44" class="empty">{escape(message)}</text></svg>'
    )


def scatter_svg(
    x: np.ndarray,
    y: np.ndarray,
    groups: np.ndarray,
    *,
    title: str,
    x_label: str,
    y_label: str,
    x_range: tuple[float, float] | None = None,
    x_ticks: Sequence[tuple[float, str]] | None = None,
    group_order: Sequence[str] = (*model.STATUSES, "not_evaluated"),
) -> Markup:
    x, y = np.asarray(x, dtype=float), np.asarray(y, dtype=float)
    ok = np.isfinite(x) & np.isfinite(y)
    if not ok.any():
        return empty_chart(title, "No shots with these values in this week.")
    # Robust ranges: a wild value (a wrong unit, a wrong date) is pinned at the edge it
    # passed and drawn as a triangle pointing that way, instead of flattening the chart.
    x_lim = None if x_range else robust_range(x[ok])
    y_lim = robust_range(y[ok])
    xlo, xhi = x_range or x_lim or (float(x[ok].min()), float(x[ok].max()))
    ylo, yhi = y_lim or (float(y[ok].min()), float(y[ok].max()))
    pinned = ok & ((x < xlo) | (x > xhi) | (y < ylo) | (y > yhi))
    yt = nice_ticks(ylo, yhi)
    if yt and y_lim is None:
        ylo, yhi = min(ylo, yt[0]), max(yhi, yt[-1])
    yt = [t for t in yt if ylo <= t <= yhi]
    xs = _Scale(xlo, xhi, _M["left"] + 4, _W - _M["right"] - 4)
    ys = _Scale(ylo, yhi, _H - _M["bottom"] - 4, _M["top"] + 4)
    if x_ticks is None:
        x_ticks = [(t, _fmt(t)) for t in nice_ticks(xs.lo, xs.hi) if xs.lo <= t <= xs.hi]
    out = _frame(title, x_label, y_label) + _axes(xs, ys, x_ticks, yt)
    present = [g for g in group_order if np.any(ok & (groups == g))]
    for g in present:
        m = ok & ~pinned & (groups == g)
        px, py = np.asarray(xs(x[m])), np.asarray(ys(y[m]))
        symbol = _symbol(g)
        d = _marker_path(symbol, px.tolist(), py.tolist())
        out.append(f'<path d="{d}" stroke="{GROUP_COLOURS.get(g, MUTED)}" class="points marker-{symbol}"/>')
    for i in np.flatnonzero(pinned).tolist():
        cx, cy = float(np.clip(x[i], xlo, xhi)), float(np.clip(y[i], ylo, yhi))
        symbol = "triangle-down" if y[i] < ylo else "triangle-up"
        out.append(
            f'<path d="{_marker_path(symbol, [float(xs(cx))], [float(ys(cy))])}" '
            f'stroke="{GROUP_COLOURS.get(str(groups[i]), MUTED)}" class="points pinned marker-{symbol}">'
            f"<title>out of range, pinned at the edge: x {_fmt(float(x[i]))}, y {_fmt(float(y[i]))}</title></path>"
        )
    out += _legend(present, {g: int(np.count_nonzero(ok & (groups == g))) for g in present}, shapes=True)
    if pinned.any():
        n = int(np.count_nonzero(pinned))
        out.append(
            f'<text x="{_M["left"]}" y="{_H - 4}" class="legend">{n} shot{"" if n == 1 else "s"} out of range, '
            "pinned at the edge (triangles)</text>"
        )
    out.append("</svg>")
    return Markup("".join(out))


def stacked_bars_svg(
    categories: Sequence[str],
    series: Mapping[str, Sequence[int]],
    *,
    title: str,
    x_label: str,
    y_label: str,
) -> Markup:
    totals = np.sum([np.asarray(v, dtype=float) for v in series.values()], axis=0)
    if not len(categories) or not totals.any():
        return empty_chart(title, "No shots in this week.")
    yt = nice_ticks(0.0, float(totals.max()))
    ys = _Scale(0.0, max(yt[-1], float(totals.max())), _H - _M["bottom"], _M["top"] + 4)
    n = len(categories)
    slot = (_W - _M["left"] - _M["right"]) / n
    xs = _Scale(-0.5, n - 0.5, _M["left"], _W - _M["right"])
    out = _frame(title, x_label, y_label) + _axes(xs, ys, list(zip(range(n), categories, strict=False)), yt)
    base = np.zeros(n)
    for g, values in series.items():
        v = np.asarray(values, dtype=float)
        for i in np.flatnonzero(v).tolist():
            top, bottom = float(ys(base[i] + v[i])), float(ys(base[i]))
            out.append(
                f'<rect x="{_M["left"] + i * slot + slot * 0.15:.1f}" y="{top:.1f}" '
                f'width="{slot * 0.7:.1f}" height="{bottom - top:.1f}" '
                f'fill="{GROUP_COLOURS.get(g, MUTED)}"><title>{escape(categories[i])}: '
                f"{int(v[i])} {escape(g.replace('_', ' '))}</title></rect>"
            )
        base += v
    out += _legend([g for g in series if np.any(series[g])])
    out.append("</svg>")
    return Markup("".join(out))


def histogram_svg(values: np.ndarray, *, title: str, x_label: str, bins: int = 30, group: str = "shots") -> Markup:
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    if not v.size:
        return empty_chart(title, "No shots with this value in this week.")
    lim = robust_range(v)  # wild values are counted in the edge bins, and said so
    outside = 0 if lim is None else int(np.count_nonzero((v < lim[0]) | (v > lim[1])))
    if lim is not None:
        v = np.clip(v, *lim)
    counts, edges = np.histogram(v, bins=bins if np.ptp(v) > 0 else 1)
    lo, hi = float(edges[0]), float(edges[-1])
    if hi <= lo:
        lo, hi = lo - 0.5, hi + 0.5
        edges = np.array([lo, hi])
    xs = _Scale(lo, hi, _M["left"] + 4, _W - _M["right"] - 4)
    yt = nice_ticks(0.0, float(counts.max()))
    ys = _Scale(0.0, max(yt[-1], float(counts.max())), _H - _M["bottom"], _M["top"] + 4)
    x_ticks = [(t, _fmt(t)) for t in nice_ticks(xs.lo, xs.hi) if xs.lo <= t <= xs.hi]
    out = _frame(title, x_label, "shots") + _axes(xs, ys, x_ticks, yt)
    colour = GROUP_COLOURS.get(group, MUTED)
    for c, a, b in zip(counts.tolist(), edges[:-1].tolist(), edges[1:].tolist(), strict=True):
        if c:
            x0, x1, top = float(xs(a)), float(xs(b)), float(ys(c))
            out.append(
                f'<rect x="{x0:.1f}" y="{top:.1f}" width="{max(x1 - x0 - 1, 0.5):.1f}" '
                f'height="{float(ys(0.0)) - top:.1f}" fill="{colour}"/>'
            )
    if outside:
        out.append(
            f'<text x="{_M["left"]}" y="{_H - 4}" class="legend">{outside} shot{"" if outside == 1 else "s"} '
            "out of range, counted in the edge bins</text>"
        )
    out.append("</svg>")
    return Markup("".join(out))
