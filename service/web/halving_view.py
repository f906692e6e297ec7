"""The job page's "Halving rounds" section, read from result v1's `search` section."""

from __future__ import annotations

from typing import Any

from service.jobs.handover.search_summary import halving_summary
from service.web.validation_curves import scope_label


def halving_rounds(result: dict[str, Any]) -> dict[str, Any] | None:
    """The summary line and each search's rounds, outer folds then all rows; None for a job
    that searched the full grid."""
    summary = halving_summary(result)
    if summary is None:
        return None
    by_scope: dict[str, list[dict[str, Any]]] = {}
    # the result lists rounds search by search in the plan's order (outer folds by repeat and
    # fold, then all rows) and each search's rounds in order: kept as listed
    for row in result["search"]["rounds"]:
        by_scope.setdefault(row["scope"], []).append(row)
    searches = [
        {"scope": scope, "label": scope_label(scope), "rounds": rounds}
        for scope, rounds in by_scope.items()
    ]
    return {"summary": summary, "factor": result["search"]["factor"], "searches": searches}
