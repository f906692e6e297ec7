"""A halving search's race, read from fold scores: how far it has got, what it needs next.

The rules are scikit-learn's HalvingGridSearchCV (service/cv/halving.py lists them); the scores
may come from fits made here (the in-process engine) or from the store (a job's work units,
round by round). Either way the same race is replayed from the first round, so every process
that reads the same scores reaches the same candidates, the same next round and the same pick.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from service.cv.candidates import Candidate
from service.cv.halving_schedule import keep_count, rounds_for
from service.cv.plan import SelectionPlan
from service.cv.scopes import FINAL_SCOPE
from service.cv.selection import Pick, ScoreBook, pick
from service.cv.splits import Fold

# each racing candidate's mean pick_by score over a round's folds; None: not all scored yet
MeansOf = Callable[[list[Candidate], list[Fold]], Any]


@dataclass
class Race:
    """One scope's race so far: its pick once the last round is scored, else the next round."""

    scope: str
    pick: Pick | None = None
    next_round: int | None = None  # the round whose scores are missing
    racing: list[Candidate] = field(default_factory=list)  # that round's candidates
    rounds: list[dict[str, Any]] = field(default_factory=list)  # one row per scored round
    # each round's candidates, as far as the scores tell them (the next round's included)
    racers: list[list[Candidate]] = field(default_factory=list)


def search_rows(plan: SelectionPlan, scope: str) -> np.ndarray:
    """The rows a scope's search is given: an outer training part, or every row."""
    if scope == FINAL_SCOPE:
        return np.arange(plan.n_rows)
    return plan.outer_fold(scope).train


def round_sizes(plan: SelectionPlan, scope: str) -> list[int]:
    """The rows of each round of the scope's search (scikit-learn's n_resources_)."""
    rows = search_rows(plan, scope)
    classes = len(np.unique(plan.y[rows])) if plan.spec.task == "classification" else None
    search = plan.spec.search
    return rounds_for(search, len(plan.candidates), len(plan.inner[scope]), len(rows), classes)[1]


def top(means: Any, racing: list[Candidate], keep: int) -> list[Candidate]:
    """scikit-learn's _top_k: NaN first, then ascending; the last `keep`, in that order."""
    order = np.roll(np.argsort(means), np.count_nonzero(np.isnan(means)))
    return [racing[i] for i in order[-keep:]]


def race(plan: SelectionPlan, scope: str, means_of: MeansOf) -> Race:
    """Replay the scope's race from its first round as far as `means_of` has scores."""
    search = plan.spec.search
    sizes = round_sizes(plan, scope)
    racing = list(plan.candidates)
    last, means = racing, None
    found = Race(scope)
    for index, folds in enumerate(plan.rounds[scope]):
        found.racers.append(racing)
        means = means_of(racing, folds)
        if means is None:
            found.next_round, found.racing = index, racing
            return found
        keep = keep_count(search, len(racing))
        found.rounds.append(
            {
                "scope": scope,
                "round": index,
                "candidates": len(racing),
                "rows": sizes[index],
                "fits": len(racing) * len(folds),
                "train_rows": len(racing) * sum(len(f.train) for f in folds),
                "kept": keep,
                "best_mean": float(np.nanmax(means)),
            }
        )
        last, racing = racing, top(means, racing, keep)
    assert means is not None  # a halving plan has at least one round (halving_schedule)
    best = 0 if np.all(np.isnan(means)) else int(np.nanargmax(means))
    found.pick, found.racing = Pick(scope, last[best], float(means[best])), last
    return found


def book_means(plan: SelectionPlan, book: ScoreBook) -> MeansOf:
    """`means_of` from stored fold scores: a search-CV's mean_test_score over a round's folds."""
    metric = plan.spec.pick_metric

    def means_of(racing: list[Candidate], folds: list[Fold]) -> Any:
        keys = [[(f.fingerprint, c.key, metric) for f in folds] for c in racing]
        if any(key not in book for row in keys for key in row):
            return None
        table = np.array([[book[key] for key in row] for row in keys], dtype="float64")
        return np.average(table, axis=1)

    return means_of


def pick_for(plan: SelectionPlan, scope: str, book: ScoreBook) -> Pick:
    """The scope's pick from stored scores, by the plan's strategy (grid or halving)."""
    if not plan.rounds:
        return pick(plan, scope, book)
    found = race(plan, scope, book_means(plan, book))
    if found.pick is None:
        raise LookupError(
            f"the halving search of {scope} has no scores for round {found.next_round}"
        )
    return found.pick


def full_grid_work(plan: SelectionPlan) -> tuple[int, int]:
    """(fits, rows fitted on) of the full grid's inner searches: each candidate on each fold.

    Halving may make more fits than the grid (a candidate kept is fitted again in every round),
    but on fewer rows each; the rows fitted on are what its saving is measured in.
    """
    folds = [fold for scope_folds in plan.inner.values() for fold in scope_folds]
    n = len(plan.candidates)
    return len(folds) * n, sum(len(fold.train) for fold in folds) * n


def search_section(
    plan: SelectionPlan, rounds: list[dict[str, Any]], refits: int
) -> dict[str, Any]:
    """Result v1's `search` for a halving job: its rounds and what it saved on the full grid."""
    search = plan.spec.search
    grid_fits, grid_rows = full_grid_work(plan)
    searched = sum(row["fits"] for row in rounds)
    return {
        "strategy": "halving",
        "factor": search.factor,
        "min_rows": search.min_rows,
        "seed": search.seed,
        # with the refits, which both strategies make alike
        "fits": searched + refits,
        "full_grid_fits": grid_fits + refits,
        # the inner searches' rows fitted on, summed over fits: what halving saves
        "inner_train_rows": sum(row["train_rows"] for row in rounds),
        "full_grid_inner_train_rows": grid_rows,
        "rounds": rounds,
    }


def inner_unit_count(plan: SelectionPlan, first: int) -> int:
    """The inner units a job will run, `first` of them made at intake: for halving, every
    round's candidates on every scope (the schedule fixes how many each round keeps)."""
    if not plan.rounds:
        return first
    total = 0
    for rounds in plan.rounds.values():
        racing = len(plan.candidates)
        for _ in rounds:
            total += racing
            racing = keep_count(plan.spec.search, racing)
    return total
