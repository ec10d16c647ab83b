"""Line charts as inline SVG text (no script, no external resource): lines of points over
baskets read, vertical markers for events, a grid with labelled axes.

>>> svg = line_chart([Line("a + b", "#0072b2", [[(0, 0.01), (2000, 0.06)]])], [], y_label="support")
>>> svg.startswith("<svg") and 'd="M' in svg
True
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from html import escape

WIDTH, HEIGHT = 960, 230
LEFT, RIGHT, TOP, BOTTOM = 64, 16, 12, 34
PALETTE = (
    "#0072b2",
    "#d55e00",
    "#009e73",
    "#cc79a7",
    "#e69f00",
    "#56b4e9",
    "#000000",
    "#8c564b",
    "#7f7f7f",
    "#bcbd22",
)
MARKER_COLOURS = {"emerged": "#1a7f37", "faded": "#c62828"}


@dataclass(frozen=True)
class Line:
    """One series: its label, colour and segments of (x, y) points (a gap between segments)."""

    label: str
    colour: str
    segments: list[list[tuple[float, float]]]


@dataclass(frozen=True)
class Marker:
    """An event at ``x``: ``kind`` picks the colour, ``label`` is its tooltip."""

    x: float
    kind: str
    label: str


def line_chart(
    lines: Sequence[Line],
    markers: Sequence[Marker],
    *,
    y_label: str,
    y_format: Callable[[float], str] = lambda v: f"{v:g}",
    y_floor: float | None = 0.0,
) -> str:
    """An SVG chart of ``lines`` with ``markers``; the y axis starts at ``y_floor`` (None: at
    the data's lowest value)."""
    xs = [x for line in lines for seg in line.segments for x, _ in seg] + [m.x for m in markers]
    ys = [y for line in lines for seg in line.segments for _, y in seg]
    x_low, x_high = (min(xs), max(xs)) if xs else (0.0, 1.0)
    y_low, y_high = (min(ys), max(ys)) if ys else (y_floor or 0.0, 1.0)
    if y_floor is not None:
        y_low = min(y_low, y_floor)
    y_ticks = _nice_ticks(y_low, y_high)
    y_low, y_high = y_ticks[0], y_ticks[-1]
    x_high = x_high if x_high > x_low else x_low + 1
    plot_w, plot_h = WIDTH - LEFT - RIGHT, HEIGHT - TOP - BOTTOM

    def sx(x: float) -> float:
        return LEFT + (x - x_low) / (x_high - x_low) * plot_w

    def sy(y: float) -> float:
        return TOP + (1 - (y - y_low) / (y_high - y_low)) * plot_h

    parts = [
        f'<svg class="chart" viewBox="0 0 {WIDTH} {HEIGHT}" role="img" aria-label="{escape(y_label)}">',
        '<g class="grid">',
    ]
    for value in y_ticks:
        y = sy(value)
        parts.append(f'<line x1="{LEFT}" x2="{WIDTH - RIGHT}" y1="{y:.1f}" y2="{y:.1f}"/>')
        parts.append(
            f'<text x="{LEFT - 6}" y="{y + 4:.1f}" text-anchor="end">{escape(y_format(value))}</text>'
        )
    for value in _nice_ticks(x_low, x_high):
        if x_low <= value <= x_high:
            x = sx(value)
            parts.append(f'<line x1="{x:.1f}" x2="{x:.1f}" y1="{TOP}" y2="{TOP + plot_h}"/>')
            parts.append(
                f'<text x="{x:.1f}" y="{HEIGHT - BOTTOM + 16}" text-anchor="middle">{_count(value)}</text>'
            )
    parts.append("</g>")
    middle = 'text-anchor="middle"'
    parts.append(
        f'<text class="axis" x="{LEFT + plot_w / 2:.0f}" y="{HEIGHT - 4}" {middle}>baskets read</text>'
    )
    parts.append(
        f'<text class="axis" x="14" y="{TOP + plot_h / 2:.0f}" text-anchor="middle" '
        f'transform="rotate(-90 14 {TOP + plot_h / 2:.0f})">{escape(y_label)}</text>'
    )
    for marker in markers:
        x = sx(marker.x)
        colour = MARKER_COLOURS.get(marker.kind, "#555555")
        parts.append(
            f'<g class="marker {escape(marker.kind)}"><title>{escape(marker.label)}</title>'
            f'<line x1="{x:.1f}" x2="{x:.1f}" y1="{TOP}" y2="{TOP + plot_h}" stroke="{colour}"/>'
            f'<path d="{_triangle(x, marker.kind)}" fill="{colour}"/></g>'
        )
    for line in lines:
        d = " ".join(_path(seg, sx, sy) for seg in line.segments if seg)
        if d:
            title = f"<title>{escape(line.label)}</title>"
            parts.append(f'<path class="series" d="{d}" stroke="{line.colour}">{title}</path>')
    parts.append("</svg>")
    return "".join(parts)


def _path(points: list[tuple[float, float]], sx: Callable, sy: Callable) -> str:
    """``M x y L x y ...``; a lone point is a zero-length stroke (a dot with round caps)."""
    coords = [f"{sx(x):.1f} {sy(y):.1f}" for x, y in points]
    if len(coords) == 1:
        return f"M{coords[0]} l0 0"
    return "M" + " L".join(coords)


def _triangle(x: float, kind: str) -> str:
    """A small triangle at the top of a marker: pointing up for emerged, down otherwise."""
    if kind == "emerged":
        return f"M{x - 5:.1f} {TOP + 9} L{x + 5:.1f} {TOP + 9} L{x:.1f} {TOP} Z"
    return f"M{x - 5:.1f} {TOP} L{x + 5:.1f} {TOP} L{x:.1f} {TOP + 9} Z"


def _nice_ticks(low: float, high: float, count: int = 5) -> list[float]:
    """Round values (1, 2 or 5 times a power of ten apart) covering [low, high]."""
    if high <= low:
        high = low + (abs(low) or 1.0)
    raw = (high - low) / count
    power = 10 ** math.floor(math.log10(raw))
    step = next(m * power for m in (1, 2, 5, 10) if m * power >= raw)
    first = math.floor(low / step) * step
    ticks = [first]
    while ticks[-1] < high - 1e-12 * step:
        ticks.append(ticks[-1] + step)
    return [round(t, 12) for t in ticks]


def _count(value: float) -> str:
    """``1.5M``, ``250k``, ``800``."""
    for size, suffix in ((1e6, "M"), (1e3, "k")):
        if abs(value) >= size:
            return f"{value / size:g}{suffix}"
    return f"{value:g}"
