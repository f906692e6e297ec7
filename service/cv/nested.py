"""Nested cross-validation in one process: the engine's pieces composed, with no store.

The service runs the same units spread over workers and keeps their scores in the database;
this driver is what it must agree with, and what the reference tests hold against scikit-learn.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from service.cv.halving import halving_picks
from service.cv.halving_race import search_section
from service.cv.intervals import attach_intervals
from service.cv.nested_interval_units import nested_entries
from service.cv.plan import SelectionPlan
from service.cv.scopes import FINAL_SCOPE
from service.cv.selection import Pick, ScoreBook, assemble, pick
from service.cv.units import UnitOutcome, UnitRef, fit_and_score, inner_units


def record(book: ScoreBook, outcome: UnitOutcome) -> None:
    """Add a unit's fold scores to `book`."""
    for fold in outcome.folds:
        for metric, value in fold["scores"].items():
            book[(fold["fingerprint"], outcome.ref.candidate_key, metric)] = value


def refit_units(picks: dict[str, Pick]) -> list[UnitRef]:
    """Second phase: each outer fold's pick refit on its training part, the final pick on all."""
    refs = [
        UnitRef("outer_refit", scope, p.candidate.key)
        for scope, p in picks.items()
        if scope != FINAL_SCOPE
    ]
    refs.append(UnitRef("final_refit", FINAL_SCOPE, picks[FINAL_SCOPE].candidate.key))
    return refs


@dataclass
class NestedOutcome:
    """The engine's result dict, the fitted final model and the number of fits."""

    result: dict[str, Any]
    model: Any  # a Pipeline, or a TransformedTargetRegressor around one
    fits: int


def run_nested(
    plan: SelectionPlan, progress: Callable[[int, int], None] | None = None
) -> NestedOutcome:
    """Run every unit of `plan` here, in order, and aggregate."""
    if plan.spec.search.strategy == "halving":
        return _run_halving(plan, progress)
    book: ScoreBook = {}
    first = inner_units(plan)
    total = len(first) + len(plan.scopes)  # a refit per outer and procedure fold, and the final
    fits = 0
    for done, ref in enumerate(first, 1):
        outcome = fit_and_score(plan, ref)
        record(book, outcome)
        fits += outcome.fits
        if progress:
            progress(done, total)
    picks = {scope: pick(plan, scope, book) for scope in plan.scopes}
    kept: dict[tuple[str, str], Any] = {}
    model, refits = _refit(plan, book, picks, len(first), total, progress, kept)
    result = _with_intervals(plan, assemble(plan, book, picks), picks, kept)
    return NestedOutcome(result, model, fits + refits)


def _with_intervals(
    plan: SelectionPlan,
    result: dict[str, Any],
    picks: dict[str, Pick] | None = None,
    predictions: dict[tuple[str, str], Any] | None = None,
) -> dict[str, Any]:
    # the estimate carries its interval exactly as a stored job's does; the sentences about an
    # interval that cannot be served are cautions, which the caller gathers (the stored path:
    # service/jobs/execution/result.py)
    nested = None
    if plan.spec.interval.method == "nested" and picks is not None and predictions is not None:
        nested = nested_entries(plan, picks, predictions)
    attach_intervals(plan.spec, result, nested)
    return result


def _refit(
    plan: SelectionPlan,
    book: ScoreBook,
    picks: dict[str, Pick],
    done_before: int,
    total: int,
    progress: Callable[[int, int], None] | None,
    kept: dict[tuple[str, str], Any] | None = None,
) -> tuple[Any, int]:
    """The second phase: refit the picks, scoring each outer one on its test part (its
    predictions go to `kept`, by fold fingerprint and candidate key, if given)."""
    model: Any = None
    fits = 0
    for done, ref in enumerate(refit_units(picks), done_before + 1):
        outcome = fit_and_score(plan, ref)
        record(book, outcome)
        if kept is not None:
            kept |= {(f["fingerprint"], ref.candidate_key): f["predictions"] for f in outcome.folds}
        fits += outcome.fits
        model = outcome.model or model
        if progress:
            progress(done, total)
    assert model is not None
    return model, fits


def _run_halving(plan: SelectionPlan, progress: Callable[[int, int], None] | None) -> NestedOutcome:
    """Nested CV with successive halving as the inner search (service/cv/halving.py)."""
    total = len(plan.scopes) + len(plan.outer) + 1
    searched = halving_picks(plan, (lambda done: progress(done, total)) if progress else None)
    book: ScoreBook = {}
    model, refits = _refit(plan, book, searched.picks, len(plan.scopes), total, progress)
    result = _with_intervals(plan, assemble(plan, book, searched.picks))
    result["search"] = search_section(plan, searched.rounds, refits)
    return NestedOutcome(result, model, searched.fits + refits)
