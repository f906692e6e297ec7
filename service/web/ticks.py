"""Chart helpers: round ticks, metric bounds, log or linear scales, short numbers, labels that fit.

Pure functions on plain numbers, so the rules a reader relies on (a tick never past 1 on an
accuracy axis, a log axis for values that span decades) are unit-tested apart from any page.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

# Scores that live in [0, 1] by definition (scikit-learn's scorer names, prefix match).
_UNIT_METRICS = (
    "accuracy",
    "balanced_accuracy",
    "roc_auc",
    "average_precision",
    "f1",
    "precision",
    "recall",
    "jaccard",
    "top_k_accuracy",
)
# Steps of the form m x 10^k with m from this list read as round numbers (common practice).
_MANTISSAS = (1.0, 2.0, 2.5, 5.0, 10.0)
# Positive values whose largest is at least this many times their smallest get a log axis.
LOG_RATIO = 100.0

Bounds = tuple[float | None, float | None]


def metric_bounds(metric: str) -> Bounds:
    """The values a scorer can take: [0, 1] for accuracy-like, (-inf, 1] for r2, <= 0 for neg_*."""
    if metric.startswith("neg_"):
        return (None, 0.0)
    if metric == "r2" or metric.startswith("explained_variance"):
        return (None, 1.0)
    if metric.startswith(_UNIT_METRICS) or metric == "matthews_corrcoef":
        return (-1.0 if metric == "matthews_corrcoef" else 0.0, 1.0)
    return (None, None)


def short(value: float, digits: int = 4) -> str:
    """A number to `digits` significant figures, without float noise ('0.3', not '0.300000004')."""
    if not math.isfinite(value):
        return "n/a" if math.isnan(value) else ("∞" if value > 0 else "-∞")
    text = f"{value:.{digits}g}"
    return "0" if text in ("-0", "0") else text


def _nice_step(span: float, count: int) -> float:
    raw = span / max(1, count - 1)
    power = 10 ** math.floor(math.log10(raw))
    return next(m * power for m in _MANTISSAS if m * power >= raw * 0.999)


def clip(value: float, bounds: Bounds) -> float:
    """`value` moved inside `bounds` (either end may be open)."""
    low, high = bounds
    if low is not None:
        value = max(low, value)
    if high is not None:
        value = min(high, value)
    return value


@dataclass(frozen=True)
class Axis:
    """A value axis: its domain, its tick values and whether it is drawn on a log scale."""

    low: float
    high: float
    ticks: list[float]
    log: bool = False

    def share(self, value: float) -> float:
        """Where `value` falls between low (0) and high (1)."""
        if self.log:
            low, high, value = math.log10(self.low), math.log10(self.high), math.log10(value)
        else:
            low, high = self.low, self.high
        return 0.5 if high == low else (value - low) / (high - low)

    def labels(self) -> list[str]:
        """Each tick as the axis prints it."""
        return [short(t) for t in self.ticks]


def linear_axis(values: Sequence[float], bounds: Bounds = (None, None), count: int = 5) -> Axis:
    """Round ticks one step around the data, never past `bounds`; the domain is the outer ticks."""
    finite = [v for v in values if math.isfinite(v)]
    if not finite:
        low, high = bounds
        low = 0.0 if low is None else low
        return linear_axis([low, low + 1.0 if high is None else high], bounds, count)
    low, high = min(finite), max(finite)
    if high == low:
        # a flat series: a small window around it, so the one value sits mid-axis
        pad = abs(low) * 0.05 or 0.05
        low, high = clip(low - pad, bounds), clip(high + pad, bounds)
        if high == low:
            return Axis(low, low, [low])
    step = _nice_step(high - low, count)
    decimals = max(0, -math.floor(math.log10(step)) + 1)
    start, end = math.floor(low / step + 1e-9), math.ceil(high / step - 1e-9)
    ticks = [round(i * step, decimals) for i in range(start, end + 1)]
    ticks = [t for t in ticks if clip(t, bounds) == t]
    # a bound that is not a multiple of the step (r2's 1.0 under a step of 10) still closes the
    # axis, so the data stays inside the drawn ticks
    if not ticks or ticks[0] > low:
        ticks.insert(0, clip(start * step, bounds))
    if ticks[-1] < high:
        ticks.append(clip(end * step, bounds))
    return Axis(ticks[0], ticks[-1], ticks)


def wants_log(values: Sequence[float], declared: bool = False) -> bool:
    """A log axis for a range drawn with `log: true`, or positive values spanning decades."""
    finite = [v for v in values if math.isfinite(v)]
    if not finite or min(finite) <= 0:
        return False
    return declared or max(finite) / min(finite) >= LOG_RATIO


def log_axis(values: Sequence[float]) -> Axis:
    """Powers of ten around positive data (with 2 and 5 between them when under two decades)."""
    finite = [v for v in values if math.isfinite(v) and v > 0]
    low_power = math.floor(math.log10(min(finite)) + 1e-9)
    high_power = math.ceil(math.log10(max(finite)) - 1e-9)
    if high_power == low_power:
        high_power += 1
    ticks = [10.0**p for p in range(low_power, high_power + 1)]
    if high_power - low_power < 2:
        ticks = sorted({t * m for t in ticks for m in (1, 2, 5)} | {10.0**high_power})
        ticks = [t for t in ticks if t <= 10.0**high_power]
        # drop the in-between ticks that lie beyond the data on either side
        inside = [t for t in ticks if min(finite) <= t <= max(finite)]
        below = [t for t in ticks if t < min(finite)]
        above = [t for t in ticks if t > max(finite)]
        low_end = [below[-1]] if below and (not inside or inside[0] > min(finite)) else []
        high_end = [above[0]] if above and (not inside or inside[-1] < max(finite)) else []
        ticks = low_end + inside + high_end
    ticks = [float(short(t)) for t in ticks]
    return Axis(ticks[0], ticks[-1], ticks, log=True)


def value_axis(
    values: Sequence[float], *, bounds: Bounds = (None, None), declared_log: bool = False
) -> Axis:
    """The axis for a set of values: log when `wants_log`, otherwise round linear ticks."""
    if wants_log(values, declared_log):
        return log_axis(values)
    return linear_axis(values, bounds)


def fit_label(text: str, width: int, lines: int = 2) -> list[str]:
    """`text` in at most `lines` lines of `width` characters, broken after commas or spaces.

    The last line ends in '…' when something had to go; the caller puts the full text in a
    <title> so a pointer or a screen reader still gets it.
    """
    marked = text.replace(", ", ",\u0000").replace(" ", " \u0000").replace("(", "(\u0000")
    words = [w for w in marked.split("\u0000") if w]
    out: list[str] = []
    current = ""
    for word in words:
        if len(current) + len(word) <= width:
            current += word
            continue
        if current:
            out.append(current.rstrip())
        current = word
        while len(current) > width:
            out.append(current[:width])
            current = current[width:]
    if current:
        out.append(current.rstrip())
    if len(out) <= lines:
        return out
    rest = " ".join(out[lines - 1 :])
    return [*out[: lines - 1], rest[: max(1, width - 1)].rstrip() + "…"]
