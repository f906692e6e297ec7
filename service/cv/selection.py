"""Picks and estimates from fold scores: the aggregation half of nested cross-validation.

Scores come in as a flat mapping (fold fingerprint, candidate key, metric) -> value, the same
key the store uses, so the aggregation is the same whether the scores were just computed or
read back from the database.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass
from typing import Any

import numpy as np

from service.cv.candidates import Candidate
from service.cv.describe import describe_values
from service.cv.plan import SelectionPlan
from service.cv.scopes import FINAL_SCOPE

ScoreBook = dict[tuple[str, str, str], float]


@dataclass(frozen=True)
class Pick:
    """The candidate an inner procedure chose for one scope, with its inner mean score."""

    scope: str
    candidate: Candidate
    inner_mean: float


def inner_means(plan: SelectionPlan, scope: str, book: ScoreBook) -> list[float]:
    """Each candidate's unweighted mean `pick_by` score over the scope's inner folds."""
    metric = plan.spec.pick_metric
    folds = plan.inner[scope]
    # one row per candidate, one column per fold, averaged along the row as a search-CV does
    table = np.array(
        [[book[(f.fingerprint, c.key, metric)] for f in folds] for c in plan.candidates],
        dtype="float64",
    )
    return [float(v) for v in np.average(table, axis=1)]


def best_position(means: list[float]) -> int:
    """The best mean; ties go to the earliest candidate and NaN ranks last (scikit-learn's rule)."""
    values = np.asarray(means, dtype="float64")
    if np.all(np.isnan(values)):
        raise ValueError("every candidate scored NaN on the inner folds")
    return int(np.flatnonzero(values == np.nanmax(values))[0])


def pick(plan: SelectionPlan, scope: str, book: ScoreBook) -> Pick:
    """The inner procedure's choice for `scope`."""
    means = inner_means(plan, scope, book)
    best = best_position(means)
    return Pick(scope, plan.candidates[best], means[best])


def assemble(plan: SelectionPlan, book: ScoreBook, picks: dict[str, Pick]) -> dict[str, Any]:
    """The engine's part of result v1: outer folds, estimate, final pick, frequency, gap."""
    spec = plan.spec
    outer: list[dict[str, Any]] = []
    for fold in plan.outer:
        chosen = picks[fold.scope]
        scores = {m: book[(fold.fingerprint, chosen.candidate.key, m)] for m in spec.metrics}
        outer.append(
            {
                "repeat": fold.repeat,
                "fold": fold.index,
                "n_train": len(fold.train),
                "n_test": len(fold.test),
                "pick": chosen.candidate.public(),
                "inner_mean": chosen.inner_mean,
                "scores": scores,
            }
        )
    estimate = {m: describe_values([row["scores"][m] for row in outer]) for m in spec.metrics}
    final = picks[FINAL_SCOPE]
    counts = Counter(picks[f.scope].candidate.key for f in plan.outer)
    frequency = [{**c.public(), "count": counts[c.key]} for c in plan.candidates if counts[c.key]]
    frequency.sort(key=lambda row: -row["count"])  # stable: ties stay in candidate order
    return {
        "task": spec.task,
        "n_rows": plan.n_rows,
        "metrics": list(spec.metrics),
        "pick_by": spec.pick_metric,
        "outer": outer,
        "estimate": estimate,
        "final_pick": {**final.candidate.public(), "inner_mean": final.inner_mean},
        "pick_frequency": frequency,
        "optimism_gap": final.inner_mean - estimate[spec.pick_metric]["mean"],
    }
