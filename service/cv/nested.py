"""Nested cross-validation in one process: the engine's pieces composed, with no store.

The service runs the same units spread over workers and keeps their scores in the database;
this driver is what it must agree with, and what the reference tests hold against scikit-learn.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

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
    book: ScoreBook = {}
    first = inner_units(plan)
    total = len(first) + len(plan.outer) + 1
    fits = 0
    for done, ref in enumerate(first, 1):
        outcome = fit_and_score(plan, ref)
        record(book, outcome)
        fits += outcome.fits
        if progress:
            progress(done, total)
    picks = {scope: pick(plan, scope, book) for scope in plan.scopes}
    model: Any = None
    for done, ref in enumerate(refit_units(picks), len(first) + 1):
        outcome = fit_and_score(plan, ref)
        record(book, outcome)
        fits += outcome.fits
        model = outcome.model or model
        if progress:
            progress(done, total)
    assert model is not None
    return NestedOutcome(assemble(plan, book, picks), model, fits)
