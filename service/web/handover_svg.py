"""Scatter charts for the job page's prediction sections (predicted against actual, residuals,
reliability), inline SVG with a viewBox, a <title> and a `data-kind` on every mark."""

from __future__ import annotations

from collections.abc import Sequence
from html import escape

from markupsafe import Markup

WIDTH, HEIGHT = 640, 360
LEFT, RIGHT, TOP, BOTTOM = 64, 24, 20, 48
DOT, LINE, INK, GRID = "#2f6f73", "#b4441f", "#1d2433", "#d9d4c7"
MAX_DOTS = 2000  # past this a chart thins its dots evenly; the tables keep every number


def _span(values: Sequence[float]) -> tuple[float, float]:
    low, high = min(values), max(values)
    if low == high:
        low, high = low - 1, high + 1
    pad = (high - low) * 0.05
    return low - pad, high + pad


def scatter(
    points: Sequence[tuple[float, float]],
    *,
    label: str,
    x_title: str,
    y_title: str,
    kind: str,
    diagonal: bool = False,
    zero_line: bool = False,
    bounds: tuple[float, float] | None = None,
) -> Markup:
    """Dots at (x, y); optionally the y = x diagonal or the y = 0 line."""
    step = max(1, len(points) // MAX_DOTS)
    shown = list(points)[::step]
    xs = [p[0] for p in shown] or [0.0]
    ys = [p[1] for p in shown] or [0.0]
    if bounds is not None:
        (x0, x1), (y0, y1) = bounds, bounds
    elif diagonal:
        x0, x1 = _span([*xs, *ys])
        y0, y1 = x0, x1
    else:
        (x0, x1), (y0, y1) = _span(xs), _span(ys)

    def sx(x: float) -> float:
        return LEFT + (x - x0) / (x1 - x0) * (WIDTH - LEFT - RIGHT)

    def sy(y: float) -> float:
        return HEIGHT - BOTTOM - (y - y0) / (y1 - y0) * (HEIGHT - TOP - BOTTOM)

    parts = [
        f'<svg class="chart" viewBox="0 0 {WIDTH} {HEIGHT}" role="img" '
        f'aria-label="{escape(label, quote=True)}" preserveAspectRatio="xMidYMid meet">',
        f"<title>{escape(label)}</title>",
        f'<line x1="{LEFT}" y1="{HEIGHT - BOTTOM}" x2="{WIDTH - RIGHT}" y2="{HEIGHT - BOTTOM}" '
        f'stroke="{GRID}"/>',
        f'<line x1="{LEFT}" y1="{TOP}" x2="{LEFT}" y2="{HEIGHT - BOTTOM}" stroke="{GRID}"/>',
    ]
    for value, anchor in ((x0, "start"), (x1, "end")):
        parts.append(
            f'<text x="{sx(value):.1f}" y="{HEIGHT - BOTTOM + 16}" text-anchor="{anchor}" '
            f'font-size="11" fill="{INK}">{value:.3g}</text>'
        )
    for value in (y0, y1):
        parts.append(
            f'<text x="{LEFT - 6}" y="{sy(value):.1f}" text-anchor="end" font-size="11" '
            f'fill="{INK}">{value:.3g}</text>'
        )
    parts.append(
        f'<text x="{(LEFT + WIDTH - RIGHT) / 2:.1f}" y="{HEIGHT - 8}" text-anchor="middle" '
        f'font-size="12" fill="{INK}">{escape(x_title)}</text>'
    )
    parts.append(
        f'<text x="14" y="{(TOP + HEIGHT - BOTTOM) / 2:.1f}" text-anchor="middle" font-size="12" '
        f'fill="{INK}" transform="rotate(-90 14 {(TOP + HEIGHT - BOTTOM) / 2:.1f})">'
        f"{escape(y_title)}</text>"
    )
    if diagonal:
        parts.append(
            f'<line data-kind="diagonal" x1="{sx(x0):.1f}" y1="{sy(x0):.1f}" x2="{sx(x1):.1f}" '
            f'y2="{sy(x1):.1f}" stroke="{LINE}" stroke-dasharray="4 3"/>'
        )
    if zero_line and y0 < 0 < y1:
        parts.append(
            f'<line data-kind="zero" x1="{LEFT}" y1="{sy(0):.1f}" x2="{WIDTH - RIGHT}" '
            f'y2="{sy(0):.1f}" stroke="{LINE}" stroke-dasharray="4 3"/>'
        )
    for x, y in shown:
        parts.append(
            f'<circle data-kind="{kind}" cx="{sx(x):.1f}" cy="{sy(y):.1f}" r="2.5" '
            f'fill="{DOT}" fill-opacity="0.6"/>'
        )
    parts.append("</svg>")
    return Markup("".join(parts))
