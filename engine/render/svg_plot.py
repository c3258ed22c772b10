"""Small hand-drawn SVG trend plots, so the report needs no plotting library and no network.

A grade is shown by shape and line pattern as well as colour, so a plot reads the same
in grey print and to a colour-blind reader. The colours step down in lightness with the
grade (a slate blue, then ochre, burnt orange and a dark plum), blue against orange
being the pair most colour-vision types still tell apart.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import date
from functools import lru_cache
from html import escape


@dataclass(frozen=True)
class GradeLook:
    """How one grade level is drawn: marker shape, whether it is filled, colour, line dashes."""

    shape: str
    filled: bool
    colour: str
    dashes: str
    shape_name: str


_LOOKS = (
    GradeLook("circle", False, "#4f7390", "", "open circle"),
    GradeLook("triangle", False, "#a8811a", "7 3", "open triangle"),
    GradeLook("diamond", True, "#c45a24", "3 2", "filled diamond"),
    GradeLook("square", True, "#6b1d4a", "9 2 2 2", "filled square"),
    GradeLook("star", True, "#2d2d2d", "1 2", "filled star"),
)
UNRATED_LOOK = GradeLook("cross", False, "#6f6f6f", "1 3", "cross")


def grade_look(level: int | None) -> GradeLook:
    """The look of a ladder level; levels past the fifth share the last look."""
    if level is None:
        return UNRATED_LOOK
    return _LOOKS[min(level, len(_LOOKS) - 1)]


def _paint_class(level: int | None) -> str:
    return "g-u" if level is None else f"g-{min(level, len(_LOOKS) - 1)}"


def marker_css() -> str:
    """The paint of each grade's marker, once in the page's style sheet instead of on every point."""
    rules = []
    for level in list(range(len(_LOOKS))) + [None]:
        look = grade_look(level)
        fill = look.colour if look.filled else "#ffffff"
        if look.shape == "cross":
            fill = "none"
        rules.append(f".{_paint_class(level)} {{ fill: {fill}; stroke: {look.colour}; stroke-width: "
                     f"{1.6 if look.shape == 'cross' else 1.3}; }}")
    return "\n".join(rules) + "\n"


def marker(level: int | None, cx: float, cy: float, size: float = 4.0) -> str:
    """One grade marker as an SVG element centred on (cx, cy); its paint comes from marker_css()."""
    look = grade_look(level)
    paint = f'class="{_paint_class(level)}"'
    s = size
    if look.shape == "circle":
        return f'<circle cx="{cx:.1f}" cy="{cy:.1f}" r="{s:.1f}" {paint}/>'
    if look.shape == "triangle":
        points = [(cx, cy - s * 1.15), (cx + s * 1.05, cy + s * 0.75), (cx - s * 1.05, cy + s * 0.75)]
    elif look.shape == "diamond":
        points = [(cx, cy - s * 1.3), (cx + s, cy), (cx, cy + s * 1.3), (cx - s, cy)]
    elif look.shape == "square":
        points = [(cx - s * 0.9, cy - s * 0.9), (cx + s * 0.9, cy - s * 0.9), (cx + s * 0.9, cy + s * 0.9),
                  (cx - s * 0.9, cy + s * 0.9)]
    elif look.shape == "star":
        points = [(cx + (s * 1.3 if k % 2 == 0 else s * 0.55) * math.sin(k * math.pi / 5),
                   cy - (s * 1.3 if k % 2 == 0 else s * 0.55) * math.cos(k * math.pi / 5)) for k in range(10)]
    else:
        d = s * 0.9
        return (f'<path d="M{cx - d:.1f},{cy - d:.1f}L{cx + d:.1f},{cy + d:.1f}M{cx - d:.1f},{cy + d:.1f}'
                f'L{cx + d:.1f},{cy - d:.1f}" {paint}/>')
    text = " ".join(f"{x:.1f},{y:.1f}" for x, y in points)
    return f'<polygon points="{text}" {paint}/>'


@lru_cache(maxsize=64)
def marker_icon(level: int | None, size: int = 14) -> str:
    """A marker alone in a tiny inline SVG, for tables and legends."""
    half = size / 2
    return (f'<svg class="mk" width="{size}" height="{size}" viewBox="0 0 {size} {size}" aria-hidden="true">'
            f'{marker(level, half, half, size * 0.3)}</svg>')


def nice_ticks(low: float, high: float, most: int = 6) -> list[float]:
    """Round tick values covering [low, high]: steps of 1, 2 or 5 times a power of ten."""
    if not (math.isfinite(low) and math.isfinite(high)):
        raise ValueError(f"tick range must be finite, got {low}..{high}")
    if high < low:
        low, high = high, low
    if high == low:
        pad = abs(low) * 0.1 or 1.0
        low, high = low - pad, high + pad
    raw = (high - low) / max(most - 1, 1)
    power = 10.0 ** math.floor(math.log10(raw))
    step = next(m * power for m in (1, 2, 5, 10) if m * power >= raw)
    first = math.floor(low / step + 1e-9) * step
    count = int(math.ceil(high / step - 1e-9) - math.floor(low / step + 1e-9)) + 1
    digits = max(0, -int(math.floor(math.log10(step))))
    return [round(first + k * step, digits + 1) for k in range(count)]


def date_ticks(first: int, last: int, most: int = 6) -> list[tuple[int, str]]:
    """Month starts (every 1, 2, 3, 6 or 12 months) spanning two date ordinals, labelled YYYY-MM."""
    if last - first < 60:
        return [(int(t), date.fromordinal(int(t)).isoformat()[5:]) for t in nice_ticks(first, last, most)]
    start, end = date.fromordinal(first), date.fromordinal(last)
    months = (end.year - start.year) * 12 + end.month - start.month + 1
    every = next(m for m in (1, 2, 3, 6, 12, 24, 60) if months / m <= most)
    ticks = []
    index = start.year * 12 + start.month - 1
    index -= index % every
    while True:
        day = date(index // 12, index % 12 + 1, 1)
        if day.toordinal() > last:
            break
        if day.toordinal() >= first:
            ticks.append((day.toordinal(), day.isoformat()[:7]))
        index += every
    return ticks


@dataclass(frozen=True)
class Point:
    x: float
    y: float
    level: int | None
    label: str  # shown as the point's tooltip: sample id, date, value
    bound: str = ""  # "<" or ">" (also "<=", ">="): a reading the lab wrote as a bound, drawn at it with an arrow


@dataclass(frozen=True)
class LimitLine:
    y: float
    level: int
    label: str


@dataclass(frozen=True)
class Mark:
    """A vertical event line, such as an oil change."""

    x: float
    label: str


@dataclass(frozen=True)
class Projection:
    """A forecast drawn on a plot: from the last sample (x0, y0) to where the fit meets a limit (x1, y1).

    `x_low`/`x_high` bound the crossing (a prediction band); None where that bound lies beyond
    the forecast's horizon. Nothing here is computed: the engine's forecast gives every number.
    """

    x0: float
    y0: float
    x1: float
    y1: float
    level: int
    label: str
    x_low: float | None = None
    x_high: float | None = None


@dataclass(frozen=True)
class Plot:
    """A trend plot against the sample date (x is a date ordinal): runs of points (one run per
    oil charge), limit lines, event marks and forecasts."""

    title: str
    unit: str
    runs: tuple
    limits: tuple = ()
    marks: tuple = ()
    note: str = ""
    projections: tuple = ()  # Projection: forecasts of when a limit will be reached
    bounds: tuple = ()  # Points of readings written as bounds (`>5000`): drawn apart, never joined by a line


WIDTH, HEIGHT = 300, 190
_LEFT, _RIGHT, _TOP, _BOTTOM = 40, 52, 22, 30


def _format(value: float) -> str:
    return f"{value:.4g}"


def render_plot(plot: Plot) -> str:
    """The plot as one <svg> element; empty runs give a framed 'no values' panel."""
    points = [p for run in plot.runs for p in run] + list(plot.bounds)
    label = escape(f"{plot.title} ({plot.unit})" if plot.unit else plot.title)
    head = (f'<svg class="plot" viewBox="0 0 {WIDTH} {HEIGHT}" role="img" aria-label="{label}" '
            f'xmlns="http://www.w3.org/2000/svg" font-size="9">'
            f'<title>{label}</title>'
            f'<text x="{_LEFT}" y="12" font-size="10" font-weight="600" fill="#222">{label}</text>')
    if not points and not plot.projections:
        return (head + f'<rect x="{_LEFT}" y="{_TOP}" width="{WIDTH - _LEFT - _RIGHT}" '
                f'height="{HEIGHT - _TOP - _BOTTOM}" fill="#f6f5f1" stroke="#c9c6bd"/>'
                f'<text x="{WIDTH / 2:.0f}" y="{HEIGHT / 2:.0f}" text-anchor="middle" fill="#555">'
                f'no values recorded</text></svg>')
    xs = [p.x for p in points] + [m.x for m in plot.marks]
    xs += [x for f in plot.projections for x in (f.x0, f.x1, f.x_low, f.x_high) if x is not None]
    ys = [p.y for p in points] + [lim.y for lim in plot.limits] + [y for f in plot.projections for y in (f.y0, f.y1)]
    y_ticks = nice_ticks(min(ys), max(ys), 5)
    y_low, y_high = y_ticks[0], y_ticks[-1]
    x_low, x_high = min(xs), max(xs)
    if x_high == x_low:
        x_low, x_high = x_low - 1, x_high + 1
    pad = (x_high - x_low) * 0.04
    x_low, x_high = x_low - pad, x_high + pad
    inner_w, inner_h = WIDTH - _LEFT - _RIGHT, HEIGHT - _TOP - _BOTTOM

    def sx(x: float) -> float:
        return _LEFT + (x - x_low) / (x_high - x_low) * inner_w

    def sy(y: float) -> float:
        return _TOP + (y_high - y) / (y_high - y_low) * inner_h

    parts = [head, f'<rect x="{_LEFT}" y="{_TOP}" width="{inner_w}" height="{inner_h}" fill="#fbfaf7" '
                   f'stroke="#b9b5aa" stroke-width="0.8"/>']
    for tick in y_ticks:
        y = sy(tick)
        parts.append(f'<line x1="{_LEFT}" x2="{_LEFT + inner_w}" y1="{y:.1f}" y2="{y:.1f}" stroke="#e6e3db" '
                     f'stroke-width="0.6"/><text x="{_LEFT - 4}" y="{y + 3:.1f}" text-anchor="end" '
                     f'fill="#444">{_format(tick)}</text>')
    x_ticks = [(t, text) for t, text in date_ticks(int(math.ceil(x_low)), int(math.floor(x_high)))
               if x_low <= t <= x_high]  # a short span's 1-2-5 steps may start before the frame
    for tick, text in x_ticks:
        x = sx(tick)
        parts.append(f'<line x1="{x:.1f}" x2="{x:.1f}" y1="{_TOP + inner_h}" y2="{_TOP + inner_h + 3}" '
                     f'stroke="#777"/><text x="{x:.1f}" y="{_TOP + inner_h + 12}" text-anchor="middle" '
                     f'fill="#444" font-size="8">{escape(text)}</text>')
    axis = "sample date"
    parts.append(f'<text x="{_LEFT + inner_w / 2:.0f}" y="{HEIGHT - 3}" text-anchor="middle" fill="#555" '
                 f'font-size="8">{axis}</text>')
    for limit in plot.limits:
        look = grade_look(limit.level)
        y = sy(limit.y)
        parts.append(f'<g class="limit" data-level="{limit.level}"><line x1="{_LEFT}" x2="{_LEFT + inner_w}" '
                     f'y1="{y:.1f}" y2="{y:.1f}" stroke="{look.colour}" stroke-width="1.1" '
                     f'stroke-dasharray="{look.dashes}"/><text x="{_LEFT + inner_w + 3}" y="{y + 3:.1f}" '
                     f'fill="{look.colour}" font-size="8">{escape(limit.label)}</text></g>')
    for mark in plot.marks:
        x = sx(mark.x)
        parts.append(f'<g class="event"><line x1="{x:.1f}" x2="{x:.1f}" y1="{_TOP}" y2="{_TOP + inner_h}" '
                     f'stroke="#3a3a3a" stroke-width="0.9" stroke-dasharray="2 3"/>'
                     f'<text x="{x + 2:.1f}" y="{_TOP + 8}" fill="#3a3a3a" font-size="7.5">'
                     f'{escape(mark.label)}</text></g>')
    for f in plot.projections:
        look = grade_look(f.level)
        y1 = sy(f.y1)
        band = ""
        if f.x_low is not None or f.x_high is not None:
            low = sx(f.x_low if f.x_low is not None else f.x0)
            high = sx(f.x_high) if f.x_high is not None else _LEFT + inner_w
            band = (f'<rect class="band" x="{low:.1f}" y="{y1 - 3:.1f}" width="{max(high - low, 1):.1f}" height="6" '
                    f'fill="{look.colour}" fill-opacity="0.22" stroke="none"/>')
        parts.append(f'<g class="projection"><title>{escape(f.label)}</title>{band}'
                     f'<line x1="{sx(f.x0):.1f}" y1="{sy(f.y0):.1f}" x2="{sx(f.x1):.1f}" y2="{y1:.1f}" '
                     f'stroke="{look.colour}" stroke-width="1.2" stroke-dasharray="4 2"/>'
                     f'<circle cx="{sx(f.x1):.1f}" cy="{y1:.1f}" r="2.2" fill="{look.colour}"/></g>')
    for run in plot.runs:
        if len(run) > 1:
            path = " ".join(f"{sx(p.x):.1f},{sy(p.y):.1f}" for p in run)
            parts.append(f'<polyline points="{path}" fill="none" stroke="#6d6a62" stroke-width="1"/>')
    for p in points:
        arrow = ""
        if p.bound:  # the way the reading lies from its bound: up for above, down for below
            x, y, way = sx(p.x), sy(p.y), -1 if p.bound.startswith(">") else 1
            arrow = (f'<path class="bound" d="M{x:.1f},{y + way * 4:.1f} v{way * 9} m-3,{-way * 3} l3,{way * 3} '
                     f'l3,{-way * 3}" fill="none" stroke="#444" stroke-width="1"/>')
        parts.append(f'<g class="pt"><title>{escape(p.label)}</title>{arrow}{marker(p.level, sx(p.x), sy(p.y), 3.2)}'
                     f'</g>')
    parts.append("</svg>")
    return "".join(parts)
