"""Inline SVG charts drawn from plain numbers: no script, a viewBox so they shrink on a phone.

Every mark a test may count carries a `data-kind` attribute; every chart has a <title> and an
aria-label so a screen reader announces what it shows, and the same numbers sit in a table nearby.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from html import escape

from markupsafe import Markup

WIDTH = 640
PAD_LEFT, PAD_RIGHT, PAD_TOP, PAD_BOTTOM = 64, 24, 20, 44
# one series colour per line; chosen to stay apart for the common colour-vision deficiencies
SERIES = ("#2f6f73", "#b4441f", "#6b4c9a", "#8a6d1d", "#3d5a80", "#9c2f5a", "#4f7a28", "#555555")
INK, MUTED, GRID = "#1d2433", "#5b6372", "#d9d4c7"


def _fmt(value: float) -> str:
    return f"{value:.4g}"


def _attr(text: str) -> str:
    return escape(text, quote=True)


def _open(height: int, label: str) -> list[str]:
    return [
        f'<svg class="chart" viewBox="0 0 {WIDTH} {height}" role="img" '
        f'aria-label="{_attr(label)}" preserveAspectRatio="xMidYMid meet">',
        f"<title>{escape(label)}</title>",
    ]


@dataclass(frozen=True)
class Scale:
    """A linear map from data values to pixels."""

    low: float
    high: float
    start: float
    end: float

    def __call__(self, value: float) -> float:
        span = self.high - self.low
        share = 0.5 if span == 0 else (value - self.low) / span
        return self.start + share * (self.end - self.start)


def padded_range(values: Sequence[float]) -> tuple[float, float]:
    """Low and high with a margin, so no mark sits on the frame."""
    finite = [v for v in values if math.isfinite(v)]
    if not finite:
        return 0.0, 1.0
    low, high = min(finite), max(finite)
    margin = (high - low) * 0.08 or abs(high) * 0.05 or 0.05
    return low - margin, high + margin


def _ticks(low: float, high: float, count: int = 5) -> list[float]:
    return [low + (high - low) * i / (count - 1) for i in range(count)]


def _y_axis(parts: list[str], scale: Scale, x0: float, x1: float) -> None:
    for tick in _ticks(scale.low, scale.high):
        y = scale(tick)
        parts.append(
            f'<line x1="{x0}" x2="{x1}" y1="{y:.1f}" y2="{y:.1f}" stroke="{GRID}" '
            'stroke-width="1"/>'
            f'<text x="{x0 - 6}" y="{y + 4:.1f}" text-anchor="end" font-size="12" '
            f'fill="{MUTED}">{_fmt(tick)}</text>'
        )


def estimate_strip(
    values: Sequence[float], mean: float, std: float, *, inner_best: float | None, label: str
) -> Markup:
    """Every outer fold's score as a dot, the mean ± std as a band, the non-nested score apart."""
    height = 120
    everything = [
        *values,
        mean - std,
        mean + std,
        *([inner_best] if inner_best is not None else []),
    ]
    low, high = padded_range(everything)
    x = Scale(low, high, PAD_LEFT, WIDTH - PAD_RIGHT)
    axis_y = 84
    parts = _open(height, label)
    for tick in _ticks(low, high):
        parts.append(
            f'<line x1="{x(tick):.1f}" x2="{x(tick):.1f}" y1="16" y2="{axis_y}" stroke="{GRID}"/>'
            f'<text x="{x(tick):.1f}" y="{axis_y + 18}" text-anchor="middle" font-size="12" '
            f'fill="{MUTED}">{_fmt(tick)}</text>'
        )
    band_x, band_w = x(mean - std), max(1.0, x(mean + std) - x(mean - std))
    parts.append(
        f'<rect data-kind="spread" x="{band_x:.1f}" y="28" width="{band_w:.1f}" height="36" '
        'fill="#2f6f73" fill-opacity="0.14"/>'
        f'<line data-kind="mean" x1="{x(mean):.1f}" x2="{x(mean):.1f}" y1="22" y2="70" '
        f'stroke="{SERIES[0]}" stroke-width="3"><title>outer mean {_fmt(mean)}</title></line>'
    )
    for i, value in enumerate(values):
        # alternate rows so equal scores stay visible as separate dots
        cy = 40 if i % 2 == 0 else 52
        parts.append(
            f'<circle data-kind="outer-score" cx="{x(value):.1f}" cy="{cy}" r="6" '
            f'fill="{INK}" fill-opacity="0.75"><title>outer fold {i}: {_fmt(value)}</title>'
            "</circle>"
        )
    if inner_best is not None:
        cx = x(inner_best)
        parts.append(
            f'<path data-kind="inner-best" d="M{cx:.1f} 18 l8 8 l-8 8 l-8 -8 z" '
            f'fill="{SERIES[1]}"><title>non-nested inner mean of the final pick '
            f"{_fmt(inner_best)}</title></path>"
        )
    parts.append("</svg>")
    return Markup("".join(parts))


def count_bars(items: Sequence[tuple[str, int]], *, label: str) -> Markup:
    """One horizontal bar per candidate: how many outer folds picked it (zero bars included)."""
    row = 26
    height = PAD_TOP + row * max(1, len(items)) + 28
    most = max([count for _, count in items] or [1]) or 1
    left = 250
    x = Scale(0, most, left, WIDTH - PAD_RIGHT)
    parts = _open(height, label)
    for i, (name, count) in enumerate(items):
        y = PAD_TOP + i * row
        width = max(0.0, x(count) - left)
        parts.append(
            f'<text x="{left - 8}" y="{y + 16}" text-anchor="end" font-size="12" fill="{INK}">'
            f"{escape(_clip(name, 38))}</text>"
            f'<rect data-kind="pick-count" data-count="{count}" x="{left}" y="{y + 4}" '
            f'width="{width:.1f}" height="16" fill="{SERIES[0] if count else GRID}">'
            f"<title>{escape(name)}: picked {count} times</title></rect>"
            f'<text x="{left + width + 6:.1f}" y="{y + 16}" font-size="12" fill="{MUTED}">'
            f"{count}</text>"
        )
    parts.append("</svg>")
    return Markup("".join(parts))


def _clip(text: str, size: int) -> str:
    return text if len(text) <= size else text[: size - 1] + "…"


@dataclass(frozen=True)
class Point:
    """One mark of a line: its x label, its value and how many scores it averages."""

    x: str
    y: float
    n: int


def line_chart(
    series: Sequence[tuple[str, Sequence[Point]]],
    x_labels: Sequence[str],
    *,
    label: str,
    kind: str,
    y_title: str,
) -> Markup:
    """Lines over an ordinal x axis (grid values or dates in order), one colour per series."""
    legend_rows = math.ceil(len(series) / 3) if len(series) > 1 else 0
    plot_height = 300
    height = plot_height + 22 * legend_rows
    values = [p.y for _, points in series for p in points]
    low, high = padded_range(values)
    y = Scale(low, high, plot_height - PAD_BOTTOM, PAD_TOP)
    slots = max(1, len(x_labels))
    step = (WIDTH - PAD_LEFT - PAD_RIGHT) / slots
    where = {name: PAD_LEFT + step * (i + 0.5) for i, name in enumerate(x_labels)}
    parts = _open(height, label)
    _y_axis(parts, y, PAD_LEFT, WIDTH - PAD_RIGHT)
    every = max(1, math.ceil(len(x_labels) / 10))  # keep tick labels legible on long grids
    for i, name in enumerate(x_labels):
        if i % every == 0:
            parts.append(
                f'<text x="{where[name]:.1f}" y="{plot_height - PAD_BOTTOM + 18}" '
                f'text-anchor="middle" font-size="12" fill="{MUTED}">'
                f"{escape(_clip(name, 12))}</text>"
            )
    middle = (plot_height - PAD_BOTTOM + PAD_TOP) / 2
    parts.append(
        f'<text x="14" y="{middle:.0f}" font-size="12" fill="{MUTED}" '
        f'transform="rotate(-90 14 {middle:.0f})" text-anchor="middle">{escape(y_title)}</text>'
    )
    for index, (name, points) in enumerate(series):
        colour = SERIES[index % len(SERIES)]
        coords = [(where[p.x], y(p.y), p) for p in points if p.x in where]
        path = " ".join(f"{cx:.1f},{cy:.1f}" for cx, cy, _ in coords)
        parts.append(
            f'<g data-series="{_attr(name)}"><polyline points="{path}" fill="none" '
            f'stroke="{colour}" stroke-width="2"/>'
        )
        for cx, cy, p in coords:
            parts.append(
                f'<circle data-kind="{_attr(kind)}" data-n="{p.n}" data-value="{p.y!r}" '
                f'cx="{cx:.1f}" cy="{cy:.1f}" '
                f'r="4" fill="{colour}"><title>{escape(name)}, {escape(p.x)}: {_fmt(p.y)} '
                f"({p.n} scores)</title></circle>"
            )
        parts.append("</g>")
        if legend_rows:
            # a key under the plot: colour alone must not be the only way to tell lines apart,
            # so each entry also names its series in text
            lx = PAD_LEFT + (index % 3) * 190
            ly = plot_height + 22 * (index // 3)
            parts.append(
                f'<rect x="{lx}" y="{ly - 10}" width="14" height="4" fill="{colour}"/>'
                f'<text x="{lx + 20}" y="{ly - 4}" font-size="12" fill="{INK}">'
                f"{escape(_clip(name, 26))}</text>"
            )
    parts.append("</svg>")
    return Markup("".join(parts))


def _blend(share: float) -> str:
    # from warm paper to deep teal: one hue, so the order of cells reads without a legend
    start, end = (0xF3, 0xEF, 0xE6), (0x1F, 0x55, 0x5A)
    rgb = (round(a + (b - a) * share) for a, b in zip(start, end, strict=True))
    return "#" + "".join(f"{c:02x}" for c in rgb)


def heat_map(
    rows: Sequence[str],
    cols: Sequence[str],
    cells: dict[tuple[str, str], tuple[float, int]],
    *,
    label: str,
    row_title: str,
    col_title: str,
) -> Markup:
    """A grid of mean inner scores: one cell per pair of hyperparameter values that was scored."""
    left, top = 110, 34
    cell_w = (WIDTH - left - PAD_RIGHT) / max(1, len(cols))
    cell_h = min(40.0, max(18.0, 320 / max(1, len(rows))))
    height = int(top + cell_h * len(rows) + 36)
    values = [v for v, _ in cells.values()]
    low, high = (min(values), max(values)) if values else (0.0, 1.0)
    parts = _open(height, label)
    parts.append(
        f'<text x="{left + (WIDTH - left - PAD_RIGHT) / 2:.0f}" y="14" text-anchor="middle" '
        f'font-size="12" fill="{MUTED}">{escape(col_title)}</text>'
        f'<text x="8" y="{top - 10}" font-size="12" fill="{MUTED}">{escape(row_title)}</text>'
    )
    every = max(1, math.ceil(len(cols) / 12))
    for j, col in enumerate(cols):
        if j % every == 0:
            parts.append(
                f'<text x="{left + cell_w * (j + 0.5):.1f}" y="{top - 6}" text-anchor="middle" '
                f'font-size="11" fill="{MUTED}">{escape(_clip(col, 8))}</text>'
            )
    for i, row in enumerate(rows):
        cy = top + cell_h * i
        parts.append(
            f'<text x="{left - 6}" y="{cy + cell_h / 2 + 4:.1f}" text-anchor="end" '
            f'font-size="11" fill="{MUTED}">{escape(_clip(row, 14))}</text>'
        )
        for j, col in enumerate(cols):
            if (row, col) not in cells:
                continue
            value, n = cells[(row, col)]
            share = 0.5 if high == low else (value - low) / (high - low)
            parts.append(
                f'<rect data-kind="heat-cell" data-n="{n}" data-value="{value!r}" '
                f'x="{left + cell_w * j:.1f}" '
                f'y="{cy:.1f}" width="{cell_w - 1:.1f}" height="{cell_h - 1:.1f}" '
                f'fill="{_blend(share)}"><title>{escape(row)}, {escape(col)}: {_fmt(value)}'
                f"</title></rect>"
            )
    parts.append(
        f'<text x="{left}" y="{height - 10}" font-size="11" fill="{MUTED}">'
        f"lightest {_fmt(low)}, darkest {_fmt(high)}</text></svg>"
    )
    return Markup("".join(parts))


def difference_dots(points: Sequence[Point], *, label: str) -> Markup:
    """Per-fold differences as dots around a zero line (positive favours the first job)."""
    height = 160
    values = [p.y for p in points]
    low, high = padded_range([*values, 0.0])
    y = Scale(low, high, height - PAD_BOTTOM, PAD_TOP)
    step = (WIDTH - PAD_LEFT - PAD_RIGHT) / max(1, len(points))
    parts = _open(height, label)
    _y_axis(parts, y, PAD_LEFT, WIDTH - PAD_RIGHT)
    parts.append(
        f'<line x1="{PAD_LEFT}" x2="{WIDTH - PAD_RIGHT}" y1="{y(0.0):.1f}" y2="{y(0.0):.1f}" '
        f'stroke="{INK}" stroke-width="2"/>'
    )
    for i, p in enumerate(points):
        cx = PAD_LEFT + step * (i + 0.5)
        colour = SERIES[0] if p.y >= 0 else SERIES[1]
        parts.append(
            f'<circle data-kind="fold-difference" data-value="{p.y!r}" cx="{cx:.1f}" '
            f'cy="{y(p.y):.1f}" r="5" fill="{colour}"><title>fold {escape(p.x)}: '
            f"{p.y:+.4f}</title></circle>"
        )
    parts.append("</svg>")
    return Markup("".join(parts))


def band_chart(
    x_labels: Sequence[str],
    means: Sequence[float],
    spreads: Sequence[float],
    *,
    label: str,
    y_title: str,
) -> Markup:
    """A mean line with a ± spread band over ordinal x slots (a learning curve's error by size)."""
    height = 280
    low, high = padded_range(
        [m - s for m, s in zip(means, spreads, strict=True)]
        + [m + s for m, s in zip(means, spreads, strict=True)]
    )
    y = Scale(low, high, height - PAD_BOTTOM, PAD_TOP)
    step = (WIDTH - PAD_LEFT - PAD_RIGHT) / max(1, len(x_labels))
    xs = [PAD_LEFT + step * (i + 0.5) for i in range(len(x_labels))]
    parts = _open(height, label)
    _y_axis(parts, y, PAD_LEFT, WIDTH - PAD_RIGHT)
    upper = [f"{x:.1f},{y(m + s):.1f}" for x, m, s in zip(xs, means, spreads, strict=True)]
    lower = [f"{x:.1f},{y(m - s):.1f}" for x, m, s in zip(xs, means, spreads, strict=True)]
    middle = " ".join(f"{x:.1f},{y(m):.1f}" for x, m in zip(xs, means, strict=True))
    parts.append(
        f'<polygon data-kind="spread" points="{" ".join(upper + lower[::-1])}" '
        f'fill="{SERIES[0]}" fill-opacity="0.15"/>'
        f'<polyline points="{middle}" '
        f'fill="none" stroke="{SERIES[0]}" stroke-width="2"/>'
    )
    for x, name, m, s in zip(xs, x_labels, means, spreads, strict=True):
        parts.append(
            f'<circle data-kind="curve-point" data-value="{m!r}" cx="{x:.1f}" cy="{y(m):.1f}" '
            f'r="5" fill="{SERIES[0]}"><title>{escape(name)}: {_fmt(m)} ± {_fmt(s)}</title>'
            f'</circle><text x="{x:.1f}" y="{height - PAD_BOTTOM + 18}" text-anchor="middle" '
            f'font-size="12" fill="{MUTED}">{escape(name)}</text>'
        )
    parts.append(
        f'<text x="14" y="{(height - PAD_BOTTOM + PAD_TOP) / 2:.0f}" font-size="12" '
        f'fill="{MUTED}" text-anchor="middle" '
        f'transform="rotate(-90 14 {(height - PAD_BOTTOM + PAD_TOP) / 2:.0f})">'
        f"{escape(y_title)}</text></svg>"
    )
    return Markup("".join(parts))
