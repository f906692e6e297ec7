"""The nested interval run in one process: the reference the service's work units must equal.

Bates, Hastie & Tibshirani (2024, Algorithm 1) assess a procedure; for a selection job the
procedure is the job's whole inner search, pick and refit, because that is what produced the
model handed over. This driver runs it R · K · (K - 1) + R · K times on the rows the algorithm
names, each time fitting whole pipelines afresh and calling predict(), and hands the per-row
losses to nested_interval.py. The service runs the same procedures as stored work units
(service/cv/interval_folds.py, nested_interval_units.py) on the same partitions; its interval
must equal this one (tests/engine/test_nested_interval_units.py), and the coverage study
(tests/benchmarks/bench_coverage.py) uses this driver.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from service.cv.interval_folds import partitions, procedure_training_rows
from service.cv.metrics import make_scorer_set
from service.cv.nested_interval import NestedInterval, OuterFoldLosses, nested_interval
from service.cv.nested_interval_units import ROW_LOSSES
from service.cv.plan import SelectionPlan
from service.cv.preprocess import build_pipeline
from service.cv.selection import best_position
from service.cv.splits import split_rows
from service.cv.weights import fit_model

Floats = npt.NDArray[np.float64]


@dataclass(frozen=True)
class ScoreInterval:
    """The interval on the metric's own scale (higher is better), and the loss-scale details."""

    metric: str
    point: float
    lower: float
    upper: float
    loss: NestedInterval
    fits: int


def _procedure_losses(
    plan: SelectionPlan, train: npt.NDArray[np.intp], test: npt.NDArray[np.intp]
) -> tuple[Floats, int]:
    """The job's selection procedure fitted on `train`, its per-row losses on `test`, its fits."""
    spec = plan.spec
    metric = spec.pick_metric
    X, y = plan.table.X, plan.y
    # the inner plan on `train`, as the engine applies it to an outer training part
    folds = split_rows(
        spec.inner, train, plan.split_inputs, n_rows=plan.n_rows, versions="", field="inner"
    )
    means, fits = [], 0
    for candidate in plan.candidates:
        scores = []
        for fold in folds:
            model = build_pipeline(candidate, plan.table, spec.task, spec.recipe)
            fit_model(model, X.iloc[fold.train], y[fold.train], None)
            scorer = make_scorer_set(model, [metric])
            scores.append(scorer(model, X.iloc[fold.test], y[fold.test])[metric])
            fits += 1
        means.append(float(np.mean(scores)))
    chosen = plan.candidates[best_position(means)]  # ties to the earliest, as the engine picks
    model = build_pipeline(chosen, plan.table, spec.task, spec.recipe)
    fit_model(model, X.iloc[train], y[train], None)
    loss = ROW_LOSSES[metric][0]
    return loss(y[test], model.predict(X.iloc[test])), fits + 1


def run_nested_interval(plan: SelectionPlan, repetitions: int, seed: int) -> ScoreInterval:
    """The nested interval for the pick metric of `plan`, with `repetitions` seeded partitions."""
    spec = plan.spec
    metric = spec.pick_metric
    if metric not in ROW_LOSSES or plan.weights is not None:
        raise ValueError(f"the in-process nested interval serves {sorted(ROW_LOSSES)} unweighted")
    k = spec.outer.k
    reps: list[list[OuterFoldLosses]] = []
    plain: list[Floats] = []  # every outer per-row loss of every repetition: the plain CV
    fits = 0
    for parts in partitions(spec, plan.y, repetitions, seed):
        folds = []
        for out in range(k):
            held_out = []
            for j in range(k):  # CV over the other K - 1 folds, fitted on the other K - 2
                if j == out:
                    continue
                train = procedure_training_rows(parts, out, j)
                losses, used = _procedure_losses(plan, train, parts[j])
                held_out.append(losses)
                fits += used
            train = procedure_training_rows(parts, out, out)
            outer, used = _procedure_losses(plan, train, parts[out])
            fits += used
            folds.append(OuterFoldLosses(float(np.concatenate(held_out).mean()), outer))
            plain.append(outer)
        reps.append(folds)
    found = nested_interval(reps, np.concatenate(plain), spec.interval.level, n_rows=plan.n_rows)
    _, sign, offset = ROW_LOSSES[metric]
    ends = sorted((sign * found.lower + offset, sign * found.upper + offset))
    return ScoreInterval(metric, sign * found.point + offset, ends[0], ends[1], found, fits)
