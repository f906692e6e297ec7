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

from service.web.ticks import Axis, Bounds, clip, fit_label, linear_axis, short, value_axis

WIDTH = 640
PAD_LEFT, PAD_RIGHT, PAD_TOP, PAD_BOTTOM = 64, 24, 20, 44
# one series colour per line; chosen to stay apart for the common colour-vision deficiencies
SERIES = ("#2f6f73", "#b4441f", "#6b4c9a", "#8a6d1d", "#3d5a80", "#9c2f5a", "#4f7a28", "#555555")
INK, MUTED, GRID = "#1d2433", "#5b6372", "#d9d4c7"


def _fmt(value: float) -> str:
    return short(value)


def _attr(text: str) -> str:
    return escape(text, quote=True)


def open_svg(height: int, label: str) -> list[str]:
    """The opening tag and <title> of a chart of this height."""
    return [
        f'<svg class="chart" viewBox="0 0 {WIDTH} {height}" role="img" '
        f'aria-label="{_attr(label)}" preserveAspectRatio="xMidYMid meet">',
        f"<title>{escape(label)}</title>",
    ]


@dataclass(frozen=True)
class Scale:
    """An axis mapped onto pixels from `start` (the axis's low end) to `end` (its high end)."""

    axis: Axis
    start: float
    end: float

    def __call__(self, value: float) -> float:
        return self.start + self.axis.share(value) * (self.end - self.start)


def text_lines(x: float, y: float, lines: Sequence[str], full: str, attrs: str) -> str:
    """A <text> of one or two lines; the full label in a <title> when it had to be shortened."""
    spans = "".join(
        f'<tspan x="{x:.1f}" dy="{0 if i == 0 else 13}">{escape(line)}</tspan>'
        for i, line in enumerate(lines)
    )
    tip = f"<title>{escape(full)}</title>" if lines and lines[-1].endswith("…") else ""
    return f'<text x="{x:.1f}" y="{y:.1f}" {attrs}>{tip}{spans}</text>'


def _y_axis(parts: list[str], scale: Scale, x0: float, x1: float) -> None:
    for tick, text in zip(scale.axis.ticks, scale.axis.labels(), strict=True):
        y = scale(tick)
        parts.append(
            f'<line x1="{x0}" x2="{x1}" y1="{y:.1f}" y2="{y:.1f}" stroke="{GRID}" '
            'stroke-width="1"/>'
            f'<text data-kind="y-tick" data-value="{tick!r}" x="{x0 - 6}" y="{y + 4:.1f}" '
            f'text-anchor="end" font-size="12" fill="{MUTED}">{text}</text>'
        )


def estimate_strip(
    values: Sequence[float],
    mean: float,
    std: float,
    *,
    inner_best: float | None,
    label: str,
    bounds: Bounds = (None, None),
    interval: tuple[float, float, str] | None = None,
) -> Markup:
    """Every outer fold's score as a dot, the mean ± std as a band, the non-nested score apart.

    `interval` (lower, upper, its name in words) is drawn as a bracket under the dots, in a colour
    of its own, so it is not read as the descriptive std band.
    """
    height = 120
    low_band, high_band = clip(mean - std, bounds), clip(mean + std, bounds)
    everything = [*values, low_band, high_band, *([inner_best] if inner_best is not None else [])]
    everything += list(interval[:2]) if interval is not None else []
    x = Scale(linear_axis(everything, bounds), PAD_LEFT, WIDTH - PAD_RIGHT)
    axis_y = 84
    parts = open_svg(height, label)
    for tick, text in zip(x.axis.ticks, x.axis.labels(), strict=True):
        parts.append(
            f'<line x1="{x(tick):.1f}" x2="{x(tick):.1f}" y1="16" y2="{axis_y}" stroke="{GRID}"/>'
            f'<text data-kind="x-tick" data-value="{tick!r}" x="{x(tick):.1f}" y="{axis_y + 18}" '
            f'text-anchor="middle" font-size="12" fill="{MUTED}">{text}</text>'
        )
    band_x, band_w = x(low_band), max(1.0, x(high_band) - x(low_band))
    parts.append(
        f'<rect data-kind="spread" x="{band_x:.1f}" y="28" width="{band_w:.1f}" height="36" '
        'fill="#2f6f73" fill-opacity="0.14"/>'
        f'<line data-kind="mean" x1="{x(mean):.1f}" x2="{x(mean):.1f}" y1="22" y2="70" '
        f'stroke="{SERIES[0]}" stroke-width="3"><title>outer mean {_fmt(mean)}</title></line>'
    )
    if interval is not None:
        parts.append(_interval_bracket(x, *interval))
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


def _interval_bracket(x: Scale, lower: float, upper: float, words: str) -> str:
    """A bracket from lower to upper under the fold dots (y 66 to 78), its ends ticked upward."""
    x0, x1 = x(lower), x(upper)
    return (
        f'<path data-kind="interval" data-lower="{lower!r}" data-upper="{upper!r}" '
        f'd="M{x0:.1f} 68 V76 H{x1:.1f} V68" fill="none" stroke="{SERIES[2]}" '
        f'stroke-width="3"><title>{escape(words)}: {_fmt(lower)} to {_fmt(upper)}</title></path>'
    )


@dataclass(frozen=True)
class Point:
    """One mark of a line: its x label, its value, how many scores it averages, and a note."""

    x: str
    y: float
    n: int
    note: str = ""
    ref: str = ""  # the job a history point stands for


def _x_marks(
    parts: list[str],
    x_labels: Sequence[str],
    x_numbers: dict[str, float] | None,
    *,
    x_log: bool,
    base_y: float,
) -> dict[str, float]:
    """Where each x label sits, with the axis's tick labels drawn; round ticks on numeric axes."""
    left, right = PAD_LEFT + 12, WIDTH - PAD_RIGHT - 12
    if x_numbers is not None and x_labels:
        scale = Scale(value_axis(list(x_numbers.values()), declared_log=x_log), left, right)
        for tick, text in zip(scale.axis.ticks, scale.axis.labels(), strict=True):
            parts.append(
                f'<line x1="{scale(tick):.1f}" x2="{scale(tick):.1f}" y1="{base_y - 4}" '
                f'y2="{base_y + 2}" stroke="{MUTED}"/>'
                f'<text data-kind="x-tick" data-value="{tick!r}" x="{scale(tick):.1f}" '
                f'y="{base_y + 18}" text-anchor="middle" font-size="12" fill="{MUTED}">'
                f"{text}</text>"
            )
        if scale.axis.log:
            parts.append(
                f'<text data-kind="log-axis" x="{right}" y="{base_y + 36}" text-anchor="end" '
                f'font-size="11" fill="{MUTED}">log scale</text>'
            )
        return {name: scale(x_numbers[name]) for name in x_labels}
    step = (WIDTH - PAD_LEFT - PAD_RIGHT) / max(1, len(x_labels))
    where = {name: PAD_LEFT + step * (i + 0.5) for i, name in enumerate(x_labels)}
    # about 7 px a character at 12 px: thin the labels so neighbours never touch
    every = max(1, math.ceil(len(x_labels) * 64 / (WIDTH - PAD_LEFT - PAD_RIGHT)))
    width = max(4, int(step * every / 7) - 1)
    for i, name in enumerate(x_labels):
        if i % every == 0:
            lines = name.split("\n") if "\n" in name else fit_label(name, width, 2)
            parts.append(
                text_lines(
                    where[name],
                    base_y + 18,
                    lines,
                    name.replace("\n", " "),
                    f'text-anchor="middle" font-size="12" fill="{MUTED}"',
                )
            )
    return where


def line_chart(
    series: Sequence[tuple[str, Sequence[Point]]],
    x_labels: Sequence[str],
    *,
    label: str,
    kind: str,
    y_title: str,
    bounds: Bounds = (None, None),
    x_numbers: dict[str, float] | None = None,
    x_log: bool = False,
) -> Markup:
    """Lines over an x axis of numbers (linear or log) or of ordered labels, one colour a series."""
    legend_rows = math.ceil(len(series) / 3) if len(series) > 1 else 0
    plot_height = 316
    height = plot_height + 22 * legend_rows
    values = [p.y for _, points in series for p in points]
    y = Scale(linear_axis(values, bounds), plot_height - PAD_BOTTOM - 16, PAD_TOP)
    parts = open_svg(height, label)
    _y_axis(parts, y, PAD_LEFT, WIDTH - PAD_RIGHT)
    where = _x_marks(parts, x_labels, x_numbers, x_log=x_log, base_y=plot_height - PAD_BOTTOM - 16)
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
            marked = f' data-note="{_attr(p.note)}"' if p.note else ""
            marked += f' data-job="{_attr(p.ref)}"' if p.ref else ""
            ring = (
                f'<circle cx="{cx:.1f}" cy="{cy:.1f}" r="8" fill="none" stroke="{INK}" '
                'stroke-width="2"/>'
                if p.note
                else ""
            )
            note = f" — {escape(p.note)}" if p.note else ""
            parts.append(
                f'{ring}<circle data-kind="{_attr(kind)}" data-n="{p.n}" data-value="{p.y!r}"'
                f'{marked} cx="{cx:.1f}" cy="{cy:.1f}" r="4" fill="{colour}">'
                f"<title>{escape(name)}, {escape(p.x.replace(chr(10), ' '))}: {_fmt(p.y)} "
                f"({p.n} scores){note}</title></circle>"
            )
        parts.append("</g>")
        if legend_rows:
            # a key under the plot: colour alone must not be the only way to tell lines apart,
            # so each entry also names its series in text
            lx = PAD_LEFT + (index % 3) * 190
            ly = plot_height + 22 * (index // 3)
            lines = fit_label(name, 26, 1)
            parts.append(
                f'<rect x="{lx}" y="{ly - 10}" width="14" height="4" fill="{colour}"/>'
                + text_lines(lx + 20, ly - 4, lines, name, f'font-size="12" fill="{INK}"')
            )
    parts.append("</svg>")
    return Markup("".join(parts))


def difference_dots(
    points: Sequence[Point],
    *,
    label: str,
    interval: tuple[float, float, str] | None = None,
) -> Markup:
    """Per-fold differences as dots around a zero line (positive favours the first job).

    `interval` (lower, upper, its name in words) on the mean difference is a band across the plot.
    """
    height = 160
    values = [p.y for p in points] + (list(interval[:2]) if interval is not None else [])
    y = Scale(linear_axis([*values, 0.0]), height - PAD_BOTTOM, PAD_TOP)
    step = (WIDTH - PAD_LEFT - PAD_RIGHT) / max(1, len(points))
    parts = open_svg(height, label)
    _y_axis(parts, y, PAD_LEFT, WIDTH - PAD_RIGHT)
    if interval is not None:
        lower, upper, words = interval
        top, bottom = y(upper), y(lower)
        parts.append(
            f'<rect data-kind="interval" data-lower="{lower!r}" data-upper="{upper!r}" '
            f'x="{PAD_LEFT}" y="{top:.1f}" width="{WIDTH - PAD_LEFT - PAD_RIGHT}" '
            f'height="{max(1.0, bottom - top):.1f}" fill="{SERIES[2]}" fill-opacity="0.16">'
            f"<title>{escape(words)} on the mean difference: {_fmt(lower)} to {_fmt(upper)}"
            "</title></rect>"
        )
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
    """A mean line with a ± spread band over ordinal x slots (a learning curve's error by size).

    An error is never below zero, so the band's lower edge stops there rather than drawing
    impossible values.
    """
    height = 280
    lows = [max(0.0, m - s) for m, s in zip(means, spreads, strict=True)]
    highs = [m + s for m, s in zip(means, spreads, strict=True)]
    y = Scale(linear_axis(lows + highs, (0.0, None)), height - PAD_BOTTOM, PAD_TOP)
    step = (WIDTH - PAD_LEFT - PAD_RIGHT) / max(1, len(x_labels))
    xs = [PAD_LEFT + step * (i + 0.5) for i in range(len(x_labels))]
    parts = open_svg(height, label)
    _y_axis(parts, y, PAD_LEFT, WIDTH - PAD_RIGHT)
    upper = [f"{x:.1f},{y(h):.1f}" for x, h in zip(xs, highs, strict=True)]
    lower = [f"{x:.1f},{y(lo):.1f}" for x, lo in zip(xs, lows, strict=True)]
    middle = " ".join(f"{x:.1f},{y(m):.1f}" for x, m in zip(xs, means, strict=True))
    parts.append(
        f'<polygon data-kind="spread" data-low="{min(lows)!r}" '
        f'points="{" ".join(upper + lower[::-1])}" fill="{SERIES[0]}" fill-opacity="0.15"/>'
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
