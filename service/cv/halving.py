"""Successive halving inside each inner loop, as scikit-learn's HalvingGridSearchCV runs it.

Jamieson & Talwalkar 2016 (AISTATS); Li et al. 2018 (JMLR 18:185). The reference for every
detail is scikit-learn's HalvingGridSearchCV with resource="n_samples"
(sklearn/model_selection/_search_successive_halving.py):

- the rounds: halving_schedule.rounds_for, the same expressions as `_run_search`; the race
  itself (halving_race.race) is shared with the service, which reads it from stored scores;
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
from service.cv.halving_race import race
from service.cv.plan import SelectionPlan
from service.cv.selection import Pick
from service.cv.splits import Fold
from service.cv.units import UnitRef, _fit_and_score_fold


@dataclass
class HalvingOutcome:
    """Each scope's pick, the fits the searches made and one row per round of each search."""

    picks: dict[str, Pick] = field(default_factory=dict)
    fits: int = 0
    train_rows: int = 0  # rows fitted on, summed over the fits: the work halving saves
    rounds: list[dict[str, Any]] = field(default_factory=list)


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


def halving_search(plan: SelectionPlan, scope: str, outcome: HalvingOutcome) -> Pick:
    """Race the candidates over the round folds of `scope`; the last round's best is the pick."""
    found = race(plan, scope, lambda racing, folds: _mean_scores(plan, scope, racing, folds))
    assert found.pick is not None  # every round is fitted here, so the race ends
    outcome.fits += sum(row["fits"] for row in found.rounds)
    outcome.train_rows += sum(row["train_rows"] for row in found.rounds)
    outcome.rounds.extend(found.rounds)
    return found.pick


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
