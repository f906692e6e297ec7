"""Successive halving inside each inner loop, as scikit-learn's HalvingGridSearchCV runs it.

Jamieson & Talwalkar 2016 (AISTATS); Li et al. 2018 (JMLR 18:185). The reference for every
detail is scikit-learn's HalvingGridSearchCV with resource="n_samples"
(sklearn/model_selection/_search_successive_halving.py):

- the rounds: halving_schedule.rounds_for, the same expressions as `_run_search`;
- the rows of a round: each inner fold's train and test parts are cut to
  int(rows / search rows x part size) with sklearn.utils.resample(replace=False,
  random_state=seed), as `_SubsampleMetaSplitter` does, and kept in the order it returns them
  (the order rows reach a fit can change its floating-point result);
- the keep rule: `_top_k`, the last ceil(n / factor) of an argsort of the mean scores, which is
  also the order the next round sees the candidates in (so ties break as they do there);
- the pick: the best mean of the last round, first of equals (`_select_best_index`).

The outer loop then assesses this procedure, refit on the whole outer training part, exactly as
cross_validate assesses a halving search object: the estimate stays honest.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from service.cv.candidates import Candidate
from service.cv.halving_schedule import cut, keep_count, rounds_for
from service.cv.plan import SelectionPlan
from service.cv.scopes import FINAL_SCOPE
from service.cv.selection import Pick
from service.cv.splits import Fold, fold_fingerprint
from service.cv.units import UnitRef, _fit_and_score_fold


@dataclass
class HalvingOutcome:
    """Each scope's pick, the fits the searches made and one row per round of each search."""

    picks: dict[str, Pick] = field(default_factory=dict)
    fits: int = 0
    train_rows: int = 0  # rows fitted on, summed over the fits: the work halving saves
    rounds: list[dict[str, Any]] = field(default_factory=list)


def _versions_tag(plan: SelectionPlan) -> str:
    # as build_plan tags fold fingerprints, so a round's folds get keys of their own
    return ";".join(f"{k}={v}" for k, v in sorted(plan.versions.items()))


def round_folds(plan: SelectionPlan, folds: list[Fold], fraction: float, seed: int) -> list[Fold]:
    """The inner folds cut to `fraction` of each part, as _SubsampleMetaSplitter cuts them."""
    tag = _versions_tag(plan)
    out = []
    for fold in folds:
        train, test = cut(fold.train, fraction, seed), cut(fold.test, fraction, seed)
        fingerprint = fold_fingerprint(train, test, plan.n_rows, tag)
        out.append(Fold(fold.repeat, fold.index, train, test, fingerprint))
    return out


def _search_rows(plan: SelectionPlan, scope: str) -> np.ndarray:
    """The rows a scope's search is given: an outer training part, or every row."""
    if scope == FINAL_SCOPE:
        return np.arange(plan.n_rows)
    return plan.outer_fold(scope).train


def _mean_scores(
    plan: SelectionPlan, scope: str, racing: list[Candidate], folds: list[Fold]
) -> Any:
    """Each racing candidate's mean `pick_by` score over `folds`, fitted and scored here."""
    metric = plan.spec.pick_metric
    table = []
    for candidate in racing:
        ref = UnitRef("inner", scope, candidate.key)
        fitted = [_fit_and_score_fold(candidate, plan, ref, f, [metric]) for f in folds]
        table.append([fold["scores"][metric] for fold in fitted])
    # one row per candidate, one column per fold, averaged as a search-CV's mean_test_score
    return np.average(np.array(table, dtype="float64"), axis=1)


def _top(means: Any, racing: list[Candidate], keep: int) -> list[Candidate]:
    """scikit-learn's _top_k: NaN first, then ascending; the last `keep`, in that order."""
    order = np.roll(np.argsort(means), np.count_nonzero(np.isnan(means)))
    return [racing[i] for i in order[-keep:]]


def halving_search(plan: SelectionPlan, scope: str, outcome: HalvingOutcome) -> Pick:
    """Race the candidates over the inner folds of `scope`; the last round's best is the pick."""
    search = plan.spec.search
    rows = _search_rows(plan, scope)
    folds = plan.inner[scope]
    classes = len(np.unique(plan.y[rows])) if plan.spec.task == "classification" else None
    _, schedule = rounds_for(search, len(plan.candidates), len(folds), len(rows), classes)
    racing = list(plan.candidates)
    means: Any = None
    last = racing
    for index, n_rows in enumerate(schedule):
        these = round_folds(plan, folds, n_rows / len(rows), search.seed)
        means = _mean_scores(plan, scope, racing, these)
        keep = keep_count(search, len(racing))
        outcome.fits += len(racing) * len(these)
        fitted_rows = len(racing) * sum(len(f.train) for f in these)
        outcome.train_rows += fitted_rows
        outcome.rounds.append(
            {
                "scope": scope,
                "round": index,
                "candidates": len(racing),
                "rows": n_rows,
                "fits": len(racing) * len(these),
                "train_rows": fitted_rows,
                "kept": keep,
                "best_mean": float(np.nanmax(means)),
            }
        )
        last, racing = racing, _top(means, racing, keep)
    best = 0 if np.all(np.isnan(means)) else int(np.nanargmax(means))
    return Pick(scope, last[best], float(means[best]))


def halving_picks(
    plan: SelectionPlan, progress: Callable[[int], None] | None = None
) -> HalvingOutcome:
    """A halving search in every scope (each outer fold, then all rows), in order."""
    outcome = HalvingOutcome()
    for done, scope in enumerate(plan.scopes, 1):
        outcome.picks[scope] = halving_search(plan, scope, outcome)
        if progress:
            progress(done)
    return outcome


def full_grid_work(plan: SelectionPlan) -> tuple[int, int]:
    """(fits, rows fitted on) of the full grid's inner searches: each candidate on each fold.

    Halving may make more fits than the grid (a candidate kept is fitted again in every round),
    but on fewer rows each; the rows fitted on are what its saving is measured in.
    """
    folds = [fold for scope_folds in plan.inner.values() for fold in scope_folds]
    n = len(plan.candidates)
    return len(folds) * n, sum(len(fold.train) for fold in folds) * n
