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

from sklearn.pipeline import Pipeline

from service.cv.candidates import Candidate
from service.cv.metrics import make_scorer_set
from service.cv.plan import SelectionPlan
from service.cv.predictions import capture, score_stored
from service.cv.preprocess import build_pipeline
from service.cv.scopes import FINAL_SCOPE
from service.cv.shared_folds import CACHE, SharedFold, handed_out, shared_fold, steps_key
from service.cv.splits import Fold
from service.cv.weights import fit_model, fit_transform_steps

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
    if plan.rounds:  # a round fold's stored repeat says its round (scopes.round_repeat)
        return f"inner fold {fold.index} of {where}, halving round {ref.round}"
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
    round: int = 0  # a halving search's round (plan.rounds); 0 for the full grid and refits


def ref_of(unit: Any) -> UnitRef:
    """The UnitRef of a stored unit (a work_unit row, or a batch claim's read of one)."""
    return UnitRef(unit.kind, unit.scope, unit.candidate_key, unit.halving_round)


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
        if plan.rounds:  # halving: the round's cut of the inner folds
            return plan.rounds[ref.scope][ref.round]
        return plan.inner[ref.scope]
    if ref.kind == "outer_refit":
        return [plan.outer_fold(ref.scope)]
    return []


def inner_units(plan: SelectionPlan) -> list[UnitRef]:
    """The first inner units: each outer fold and the all-rows scope, times each candidate.

    For the full grid these are all of them; a halving search starts with its first round,
    and the job's fan-in adds each later round's units for the candidates kept (halving_race).
    """
    return [UnitRef("inner", scope, c.key) for scope in plan.scopes for c in plan.candidates]


def _split(pipeline: Any) -> tuple[Pipeline, Any] | None:
    """The steps before the model (as a pipeline) and the model, for a plain pipeline with
    steps before its model; None otherwise (a target transform wraps the whole pipeline, and
    a model alone has nothing to share)."""
    if not isinstance(pipeline, Pipeline) or len(pipeline.steps) < 2:
        return None
    return Pipeline(pipeline.steps[:-1]), pipeline.steps[-1][1]


def _shared_inputs(plan: SelectionPlan, fold: Fold, steps: Pipeline) -> SharedFold:
    """The fold's rows through `steps` fitted on its train rows, shared by every candidate
    whose steps are the same (service/cv/shared_folds.py)."""
    X, y, w = plan.table.X, plan.y, plan.weights
    # what a fitted step can depend on: its definition, the table, the target, the weights
    # (scalers and selectors take them) and the fold's rows (the fingerprint covers both parts)
    key = (id(X), id(y), id(w), fold.fingerprint, steps_key(steps))

    def fit() -> tuple[Any, Any, Any]:
        w_train = None if w is None else w[fold.train]
        train = fit_transform_steps(steps, X.iloc[fold.train], y[fold.train], w_train)
        return steps, train, steps.transform(X.iloc[fold.test])

    return shared_fold(key, (X, y, w), fit)


def _fit_and_score_fold(
    candidate: Candidate,
    plan: SelectionPlan,
    ref: UnitRef,
    fold: Fold,
    metrics: list[str],
    share: bool = True,
) -> dict[str, Any]:
    pipeline = build_pipeline(candidate, plan.table, plan.spec.task, plan.spec.recipe)
    X, y, w = plan.table.X, plan.y, plan.weights
    w_train = None if w is None else w[fold.train]
    parts = _split(pipeline) if share and CACHE.enabled else None
    started = time.perf_counter()
    # a fit that fails raises (scikit-learn's error_score="raise"): a failed unit keeps the text
    if parts is None:
        model: Any = fit_model(pipeline, X.iloc[fold.train], y[fold.train], w_train)
        X_test: Any = X.iloc[fold.test]
    else:
        # what Pipeline.fit does, with the steps before the model fitted once per fold: the
        # model is fitted on, and predicts from, the same matrices the pipeline would hand it
        steps, model = parts
        inputs = _shared_inputs(plan, fold, steps)
        fit_model(model, handed_out(inputs.train), y[fold.train], w_train)
        X_test = handed_out(inputs.test)
    fitted = time.perf_counter()
    y_test = y[fold.test]
    w_test = None if w is None else w[fold.test]
    # each response is computed once: kept so a later request can add a metric without a refit
    # (service/cv/predictions.py), and handed to scikit-learn's own scorers from there
    predictions = capture(model, X_test, plan.spec.task)
    scores = score_stored(predictions, y_test, metrics, w_test)
    if scores is None:  # a scorer wants a response the model did not offer: let it say so
        weighted = {} if w_test is None else {"sample_weight": w_test}
        scores = make_scorer_set(model, metrics)(model, X_test, y_test, **weighted)
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
    plan: SelectionPlan,
    ref: UnitRef,
    should_stop: Callable[[], bool] | None = None,
    share: bool = True,
) -> UnitOutcome:
    """Fit and score one unit, checking `should_stop` before each fit.

    With `share`, a fold's preprocessing fitted for an earlier candidate in this process is
    reused (bit-identical scores); share=False fits the whole pipeline afresh on every fold.
    """
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
        metrics = plan.spec.metrics
        outcomes.append(_fit_and_score_fold(candidate, plan, ref, fold, metrics, share))
    return UnitOutcome(ref, outcomes, len(outcomes), time.perf_counter() - started)
