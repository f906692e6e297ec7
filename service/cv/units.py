"""Work units: the grain of distribution, and the one function that fits and scores a unit.

A unit is one candidate over the folds of one scope:
- `inner`: over the inner folds of an outer fold (or of all rows), scored with every metric;
- `outer_refit`: the outer fold's pick refit on the outer training part, scored on its test part;
- `final_refit`: the final pick refit on all rows (no score; the model is the output).
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, Literal

from service.cv.candidates import Candidate
from service.cv.metrics import make_scorer_set
from service.cv.plan import SelectionPlan
from service.cv.predictions import capture, score_stored
from service.cv.preprocess import build_pipeline
from service.cv.scopes import FINAL_SCOPE
from service.cv.splits import Fold
from service.cv.weights import fit_model

UnitKind = Literal["inner", "outer_refit", "final_refit"]


class UnitCancelled(Exception):
    """Raised between fits when the caller's stop check says the job was cancelled."""


class NonFiniteScore(ValueError):
    """A fold score that came out NaN or infinite; the message names metric, candidate, fold."""


def fold_name(plan: SelectionPlan, ref: UnitRef, fold: Fold) -> str:
    """Which fold, in words: an outer fold, or an inner fold of an outer fold or of all rows."""
    if ref.kind == "outer_refit":
        return f"outer fold {fold.scope}"
    where = "all rows" if ref.scope == FINAL_SCOPE else f"outer fold {ref.scope}"
    return f"inner fold {fold.scope} of {where}"


def check_finite(
    scores: dict[str, float], plan: SelectionPlan, ref: UnitRef, fold: Fold
) -> dict[str, float]:
    """The scores if every one is a finite number; NonFiniteScore naming the first that is not."""
    # The rule: a NaN or infinite fold score is never stored, and no mean is taken over it; the
    # unit fails, and with it the job, because a pick or an estimate that skipped it would be
    # computed over other folds than the ones the request fixed.
    for metric, value in scores.items():
        if not math.isfinite(value):
            candidate = plan.candidate(ref.candidate_key)
            rows = len(fold.test)
            raise NonFiniteScore(
                f"{metric} came out as {value} for candidate {candidate.estimator} "
                f"{candidate.params} (key {candidate.key[:12]}) on {fold_name(plan, ref, fold)} "
                f"({rows} test row{'' if rows == 1 else 's'}), so scikit-learn could not score "
                "it there; give the test folds more rows (a smaller k) or pick another metric."
            )
    return scores


@dataclass(frozen=True)
class UnitRef:
    """Which unit: its kind, its scope (an outer fold's scope or 'all') and its candidate key."""

    kind: UnitKind
    scope: str
    candidate_key: str


@dataclass
class UnitOutcome:
    """What one unit produced: one plain dict per fold it scored, and the fitted model if any."""

    ref: UnitRef
    folds: list[dict[str, Any]]
    fits: int
    seconds: float
    model: Any = None  # a Pipeline, or a TransformedTargetRegressor around one


def unit_folds(plan: SelectionPlan, ref: UnitRef) -> list[Fold]:
    """The folds a unit fits on (none for the final refit, which uses all rows)."""
    if ref.kind == "inner":
        return plan.inner[ref.scope]
    if ref.kind == "outer_refit":
        return [plan.outer_fold(ref.scope)]
    return []


def inner_units(plan: SelectionPlan) -> list[UnitRef]:
    """Every inner unit: each outer fold and the all-rows scope, times each candidate."""
    return [UnitRef("inner", scope, c.key) for scope in plan.scopes for c in plan.candidates]


def _fit_and_score_fold(
    candidate: Candidate, plan: SelectionPlan, ref: UnitRef, fold: Fold, metrics: list[str]
) -> dict[str, Any]:
    pipeline = build_pipeline(candidate, plan.table, plan.spec.task, plan.spec.recipe)
    X, y, w = plan.table.X, plan.y, plan.weights
    started = time.perf_counter()
    # a fit that fails raises (scikit-learn's error_score="raise"): a failed unit keeps the text
    fit_model(pipeline, X.iloc[fold.train], y[fold.train], None if w is None else w[fold.train])
    fitted = time.perf_counter()
    X_test, y_test = X.iloc[fold.test], y[fold.test]
    w_test = None if w is None else w[fold.test]
    # each response is computed once: kept so a later request can add a metric without a refit
    # (service/cv/predictions.py), and handed to scikit-learn's own scorers from there
    predictions = capture(pipeline, X_test, plan.spec.task)
    scores = score_stored(predictions, y_test, metrics, w_test)
    if scores is None:  # a scorer wants a response the model did not offer: let it say so
        weighted = {} if w_test is None else {"sample_weight": w_test}
        scores = make_scorer_set(pipeline, metrics)(pipeline, X_test, y_test, **weighted)
    check_finite(scores, plan, ref, fold)
    done = time.perf_counter()
    return {
        "fingerprint": fold.fingerprint,
        "n_train": len(fold.train),
        "n_test": len(fold.test),
        "fit_seconds": fitted - started,
        "score_seconds": done - fitted,
        "scores": scores,
        "predictions": predictions,
    }


def fit_and_score(
    plan: SelectionPlan, ref: UnitRef, should_stop: Callable[[], bool] | None = None
) -> UnitOutcome:
    """Fit and score one unit, checking `should_stop` before each fit."""
    candidate = plan.candidate(ref.candidate_key)
    started = time.perf_counter()
    if ref.kind == "final_refit":
        if should_stop and should_stop():
            raise UnitCancelled(ref)
        assert ref.scope == FINAL_SCOPE
        model = build_pipeline(candidate, plan.table, plan.spec.task, plan.spec.recipe)
        fit_model(model, plan.table.X, plan.y, plan.weights)
        return UnitOutcome(ref, [], 1, time.perf_counter() - started, model)
    outcomes = []
    for fold in unit_folds(plan, ref):
        if should_stop and should_stop():
            raise UnitCancelled(ref)
        outcomes.append(_fit_and_score_fold(candidate, plan, ref, fold, plan.spec.metrics))
    return UnitOutcome(ref, outcomes, len(outcomes), time.perf_counter() - started)
