"""Charts of candidates: the heat map over two hyperparameters and the pick counts."""

from __future__ import annotations

import zlib
from collections.abc import Sequence
from html import escape

from markupsafe import Markup

from service.web.svg import INK, MUTED, PAD_RIGHT, PAD_TOP, SERIES, WIDTH, open_svg, text_lines
from service.web.ticks import fit_label, short

# from warm paper to deep teal: one hue, so the order of cells reads at a glance
_LIGHT, _DARK = (0xF3, 0xEF, 0xE6), (0x1F, 0x55, 0x5A)
_WHITE = (0xFF, 0xFF, 0xFF)
# black or white on any fill gives at least 4.58:1, above WCAG AA's 4.5:1 for small text
_INK_RGB = (0x00, 0x00, 0x00)


def cell_fill(share: float) -> tuple[int, int, int]:
    """The colour of a cell at `share` of the way from the lowest value to the highest."""
    r, g, b = (round(a + (z - a) * share) for a, z in zip(_LIGHT, _DARK, strict=True))
    return r, g, b


def _hex(rgb: tuple[int, int, int]) -> str:
    return "#" + "".join(f"{c:02x}" for c in rgb)


def _luminance(rgb: tuple[int, int, int]) -> float:
    # WCAG 2 relative luminance
    def channel(c: int) -> float:
        v = c / 255
        return v / 12.92 if v <= 0.03928 else ((v + 0.055) / 1.055) ** 2.4

    r, g, b = (channel(c) for c in rgb)
    return 0.2126 * r + 0.7152 * g + 0.0722 * b


def contrast(a: tuple[int, int, int], b: tuple[int, int, int]) -> float:
    hi, lo = sorted((_luminance(a), _luminance(b)), reverse=True)
    return (hi + 0.05) / (lo + 0.05)


def readable_ink(fill: tuple[int, int, int]) -> str:
    """Black or white, whichever contrasts more with the cell's fill (WCAG ratio)."""
    return "#ffffff" if contrast(fill, _WHITE) > contrast(fill, _INK_RGB) else _hex(_INK_RGB)


def shown(label: str) -> str:
    """A value label as a chart prints it: numbers cut to four significant figures."""
    try:
        return short(float(label))
    except ValueError:
        return label


def heat_map(
    rows: Sequence[str],
    cols: Sequence[str],
    cells: dict[tuple[str, str], tuple[float, int]],
    *,
    label: str,
    row_title: str,
    col_title: str,
) -> Markup:
    """Mean inner scores per pair of hyperparameter values: values in the cells and a legend."""
    left, top = 120, 46
    cell_w = (WIDTH - left - PAD_RIGHT) / max(1, len(cols))
    cell_h = min(40.0, max(22.0, 320 / max(1, len(rows))))
    grid_bottom = top + cell_h * len(rows)
    height = int(grid_bottom + 64)
    values = [v for v, _ in cells.values()]
    low, high = (min(values), max(values)) if values else (0.0, 1.0)
    parts = open_svg(height, label)
    parts.append(
        f'<text x="{left + (WIDTH - left - PAD_RIGHT) / 2:.0f}" y="14" text-anchor="middle" '
        f'font-size="12" fill="{MUTED}">{escape(col_title)}</text>'
        f'<text x="8" y="{top - 12}" font-size="12" fill="{MUTED}">{escape(row_title)}</text>'
    )
    col_chars = max(3, int(cell_w / 7))
    for j, col in enumerate(cols):
        parts.append(
            text_lines(
                left + cell_w * (j + 0.5),
                top - 8,
                fit_label(shown(col), col_chars, 1),
                col,
                f'text-anchor="middle" font-size="11" fill="{MUTED}"',
            )
        )
    # values printed in the cells when they fit (three significant figures); else on hover
    show_values = cell_w >= 40 and cell_h >= 20
    for i, row in enumerate(rows):
        cy = top + cell_h * i
        parts.append(
            text_lines(
                left - 6,
                cy + cell_h / 2 + 4,
                fit_label(shown(row), 16, 1),
                row,
                f'text-anchor="end" font-size="11" fill="{MUTED}"',
            )
        )
        for j, col in enumerate(cols):
            if (row, col) not in cells:
                continue
            value, n = cells[(row, col)]
            share = 0.5 if high == low else (value - low) / (high - low)
            fill = cell_fill(share)
            x = left + cell_w * j
            parts.append(
                f'<rect data-kind="heat-cell" data-n="{n}" data-value="{value!r}" '
                f'x="{x:.1f}" y="{cy:.1f}" width="{cell_w - 1:.1f}" height="{cell_h - 1:.1f}" '
                f'fill="{_hex(fill)}"><title>{escape(row_title)} {escape(shown(row))}, '
                f"{escape(col_title)} {escape(shown(col))}: {short(value)} ({n} scores)</title>"
                "</rect>"
            )
            if show_values:
                parts.append(
                    f'<text data-kind="heat-value" x="{x + cell_w / 2:.1f}" '
                    f'y="{cy + cell_h / 2 + 4:.1f}" text-anchor="middle" font-size="11" '
                    f'fill="{readable_ink(fill)}" aria-hidden="true">{short(value, 3)}</text>'
                )
    parts.append(_legend(label, left, grid_bottom + 18, low, high))
    parts.append("</svg>")
    return Markup("".join(parts))


def _legend(label: str, left: float, y: float, low: float, high: float) -> str:
    """A colour bar from the lowest to the highest cell value, labelled at both ends and mid."""
    gradient = f"heat-{zlib.crc32(label.encode()):08x}"
    width = 240
    marks = [(0.0, low), (0.5, (low + high) / 2), (1.0, high)] if high != low else [(0.5, low)]
    ticks = "".join(
        f'<text data-kind="heat-legend-value" x="{left + width * s:.1f}" y="{y + 30:.1f}" '
        f'text-anchor="middle" font-size="11" fill="{MUTED}">{short(v, 3)}</text>'
        for s, v in marks
    )
    return (
        f'<defs><linearGradient id="{gradient}"><stop offset="0" stop-color="{_hex(_LIGHT)}"/>'
        f'<stop offset="1" stop-color="{_hex(_DARK)}"/></linearGradient></defs>'
        f'<rect data-kind="heat-legend" x="{left}" y="{y:.1f}" width="{width}" height="12" '
        f'fill="url(#{gradient})" stroke="{MUTED}" stroke-width="0.5"/>'
        f'<text x="{left - 6}" y="{y + 10:.1f}" text-anchor="end" font-size="11" '
        f'fill="{MUTED}">lower</text>'
        f'<text x="{left + width + 6}" y="{y + 10:.1f}" font-size="11" fill="{MUTED}">higher'
        f"</text>{ticks}"
    )


def count_bars(items: Sequence[tuple[str, int]], *, label: str) -> Markup:
    """A bar per candidate an outer fold picked, most picked first; one line for the rest."""
    picked = sorted((item for item in items if item[1] > 0), key=lambda item: -item[1])
    never = len(items) - len(picked)
    row = 36
    height = PAD_TOP + row * max(1, len(picked)) + (30 if never else 8)
    most = max([count for _, count in picked] or [1])
    left = 270
    span = WIDTH - PAD_RIGHT - 30 - left
    parts = open_svg(height, label)
    for i, (name, count) in enumerate(picked):
        y = PAD_TOP + i * row
        width = span * count / most
        lines = fit_label(name, 38, 2)
        first_y = y + (10 if len(lines) == 2 else 16)
        parts.append(
            text_lines(
                left - 8, first_y, lines, name, f'text-anchor="end" font-size="12" fill="{INK}"'
            )
            + f'<rect data-kind="pick-count" data-count="{count}" x="{left}" y="{y + 4}" '
            f'width="{width:.1f}" height="18" fill="{SERIES[0]}">'
            f"<title>{escape(name)}: picked {count} times</title></rect>"
            f'<text x="{left + width + 6:.1f}" y="{y + 18}" font-size="12" fill="{MUTED}">'
            f"{count}</text>"
        )
    if never:
        others = "other candidate" if never == 1 else "others"
        parts.append(
            f'<text data-kind="never-picked" data-count="{never}" x="{left - 8}" '
            f'y="{PAD_TOP + row * len(picked) + 14}" text-anchor="end" font-size="12" '
            f'fill="{MUTED}">{never} {others} never picked</text>'
        )
    parts.append("</svg>")
    return Markup("".join(parts))
