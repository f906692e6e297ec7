"""Validation curves and heat maps from stored inner scores: grouping only, no refits."""

from __future__ import annotations

import json
from collections import defaultdict
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from service.cv.scopes import FINAL_SCOPE, parse_outer_scope
from service.web.queries import CandidateRow, InnerCell
from service.web.svg import Point


def value_label(value: Any) -> str:
    """A hyperparameter value as the page shows it."""
    if value is None:
        return "None"
    if isinstance(value, bool):
        return str(value)
    if isinstance(value, float):
        return f"{value:.6g}"
    if isinstance(value, str | int):
        return str(value)
    return json.dumps(value, sort_keys=True)


def scope_label(scope: str) -> str:
    """'r0f2' → 'outer fold 2 (repeat 0)'; 'all' → the search on all rows."""
    if scope == FINAL_SCOPE:
        return "all rows (final search)"
    repeat, fold = parse_outer_scope(scope)
    return f"outer fold {fold}" + (f" (repeat {repeat})" if repeat else "")


def _scope_order(scope: str) -> tuple[int, int, int]:
    if scope == FINAL_SCOPE:
        return (1, 0, 0)
    return (0, *parse_outer_scope(scope))


def _ordered_values(values: list[Any]) -> list[Any]:
    distinct: list[Any] = []
    for value in values:
        if value not in distinct:
            distinct.append(value)
    numbers = all(isinstance(v, int | float) and not isinstance(v, bool) for v in distinct)
    return sorted(distinct) if numbers else distinct


@dataclass(frozen=True)
class Family:
    """Candidates of one estimator and the hyperparameters that vary among them."""

    estimator: str
    candidates: list[CandidateRow]
    varying: list[str]

    def values(self, key: str) -> list[str]:
        """The labels of `key`'s values, in numeric order when they are numbers."""
        return [
            value_label(v) for v in _ordered_values([c.params.get(key) for c in self.candidates])
        ]


def families(candidates: Sequence[CandidateRow]) -> list[Family]:
    """Group candidates by estimator (first appearance order) and find their varying keys."""
    groups: dict[str, list[CandidateRow]] = defaultdict(list)
    for row in candidates:
        groups[row.estimator].append(row)
    out = []
    for estimator, rows in groups.items():
        keys = sorted({k for row in rows for k in row.params})
        varying = [
            k for k in keys if len({json.dumps(r.params.get(k), sort_keys=True) for r in rows}) > 1
        ]
        out.append(Family(estimator, rows, varying))
    return out


@dataclass(frozen=True)
class Curve:
    """Mean inner score per value of one hyperparameter, one series per scope."""

    estimator: str
    key: str
    x_labels: list[str]
    series: list[tuple[str, list[Point]]]


def validation_curve(family: Family, key: str, cells: Sequence[InnerCell]) -> Curve:
    """Pool each scope's inner scores over candidates sharing a value of `key`."""
    label_of = {c.key: value_label(c.params.get(key)) for c in family.candidates}
    sums: dict[tuple[str, str], list[float]] = defaultdict(lambda: [0.0, 0.0])
    for cell in cells:
        if cell.candidate_key in label_of:
            acc = sums[(cell.scope, label_of[cell.candidate_key])]
            acc[0] += cell.total
            acc[1] += cell.n
    x_labels = family.values(key)
    series = []
    for scope in sorted({s for s, _ in sums}, key=_scope_order):
        points = [
            Point(x, sums[(scope, x)][0] / sums[(scope, x)][1], int(sums[(scope, x)][1]))
            for x in x_labels
            if (scope, x) in sums and sums[(scope, x)][1]
        ]
        series.append((scope_label(scope), points))
    return Curve(family.estimator, key, x_labels, series)


@dataclass(frozen=True)
class Heat:
    """Mean inner score over two hyperparameters of one family."""

    estimator: str
    row_key: str
    col_key: str
    rows: list[str]
    cols: list[str]
    cells: dict[tuple[str, str], tuple[float, int]]
    scope: str

    @property
    def over(self) -> str:
        """What the cells average, as the caption names it."""
        return scope_label(self.scope) if self.scope == FINAL_SCOPE else "every scope pooled"


def heat(family: Family, cells: Sequence[InnerCell]) -> Heat | None:
    """For a family with exactly two varying keys: the final search's inner means per pair."""
    if len(family.varying) != 2:
        return None
    row_key, col_key = family.varying
    by_key = {c.key: c for c in family.candidates}
    mine = [c for c in cells if c.candidate_key in by_key]
    # the search on all rows is the one whose pick becomes the final model; without it
    # (a job that stopped early) every scope is pooled, and the caption says which
    scope = FINAL_SCOPE if any(c.scope == FINAL_SCOPE for c in mine) else "pooled"
    sums: dict[tuple[str, str], list[float]] = defaultdict(lambda: [0.0, 0.0])
    for cell in mine:
        if scope == FINAL_SCOPE and cell.scope != FINAL_SCOPE:
            continue
        params = by_key[cell.candidate_key].params
        acc = sums[(value_label(params.get(row_key)), value_label(params.get(col_key)))]
        acc[0] += cell.total
        acc[1] += cell.n
    grid = {pair: (acc[0] / acc[1], int(acc[1])) for pair, acc in sums.items() if acc[1]}
    return Heat(
        family.estimator,
        row_key,
        col_key,
        family.values(row_key),
        family.values(col_key),
        grid,
        scope,
    )
