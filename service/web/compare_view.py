"""The comparison page: two jobs' outer folds side by side, drawn from service.analysis."""

from __future__ import annotations

import math
from itertools import zip_longest
from typing import Any

from markupsafe import Markup
from sqlalchemy.orm import Session

from service.analysis.compare import Comparison, PairedTest
from service.analysis.queries import compare_jobs
from service.auth import Principal
from service.cv.intervals import interval_words
from service.errors import BadInput
from service.web import svg


def _two_ids(text: str) -> tuple[str, str]:
    ids = [part.strip() for part in text.split(",") if part.strip()]
    if len(ids) != 2:
        raise BadInput("jobs", "give two job ids separated by a comma, as in ?jobs=A,B.")
    return ids[0], ids[1]


def _number(value: float) -> str:
    if math.isnan(value):
        return "n/a"
    if math.isinf(value):
        return "∞" if value > 0 else "-∞"
    return f"{value:.4g}"


def _differences_chart(
    metric: str, differences: list[float], interval: dict[str, Any] | None
) -> Markup:
    points = [svg.Point(str(i), d, 1) for i, d in enumerate(differences)]
    return svg.difference_dots(
        points,
        label=f"Per-fold {metric} difference, first job minus second",
        interval=(interval["lower"], interval["upper"], interval_words(interval))
        if interval
        else None,
    )


def compare_page(session: Session, jobs: str, principal: Principal) -> dict[str, Any]:
    """Context of the comparison page, or an error sentence naming the field `jobs`."""
    context: dict[str, Any] = {"title": "comparison", "jobs": jobs, "error": None}
    try:
        left, right = _two_ids(jobs)
        comparison: Comparison = compare_jobs(session, principal, left, right)
    except BadInput as exc:
        context["error"] = str(exc)
        return context
    rows = []
    for item in comparison.metrics:
        test = item.test
        paired = isinstance(test, PairedTest)
        rows.append(
            {
                "metric": item.metric,
                "left_mean": item.left_mean,
                "right_mean": item.right_mean,
                # different folds may differ in number: rows then pair nothing, so pad
                "folds": list(zip_longest(item.left, item.right, item.differences or [])),
                "test": "corrected resampled t" if paired else "Welch t (different folds)",
                "t": _number(test.t),
                "df": _number(float(test.df)),
                "p": _number(test.p_value),
                "mean_difference": test.mean_difference,
                "interval": test.interval,
                "interval_words": interval_words(test.interval) if test.interval else None,
                "chart": _differences_chart(item.metric, item.differences, test.interval)
                if item.differences is not None
                else None,
            }
        )
    context.update(comparison=comparison, rows=rows, left=left, right=right)
    return context
