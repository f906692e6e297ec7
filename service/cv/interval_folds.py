"""The nested interval's folds: the rows each of its whole-selection procedures fits and scores.

Bates, Hastie & Tibshirani (2024, Algorithm 1) draw R fresh K-fold partitions; for each
repetition r and outer part o the selection procedure (inner search, pick, refit) is fitted
- without parts o and j, and scored on part j, for every j != o (the CV over the other K - 1
  parts that gives e_in(o));
- without part o alone, and scored on part o (e_out(o)).
Each of those R·K·K (train, test) pairs is an outer fold of its own here, with scope
'r{INTERVAL_REPEAT_BASE + r·K + o}f{j}' (j = o for the second kind), so it runs on the machinery
every outer fold runs on: inner units for its search, a pick, a refit unit scored on its test
part, each stored under its fold fingerprint and candidate key, and so reused by any later request
that fits the same rows. Training rows are sorted, as scikit-learn's splitters give them, so a
procedure fold equal to one of the job's own outer folds has its fingerprint.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from sklearn.model_selection import KFold, StratifiedKFold

from service.cv.errors import SpecError
from service.cv.scopes import INTERVAL_REPEAT_BASE, interval_position
from service.cv.spec import DEFAULT_INTERVAL_REPETITIONS, SelectionSpec
from service.cv.splits import Fold, SplitInputs, fold_fingerprint, split_rows


def repetitions_of(spec: SelectionSpec) -> int:
    """How many partitions the nested interval draws for `spec`."""
    return spec.interval.repetitions or DEFAULT_INTERVAL_REPETITIONS


def interval_seed(spec: SelectionSpec) -> int:
    """Repetition r's partition is shuffled with this + r: the outer seed, so a request fixes it."""
    return spec.outer.seed if spec.outer.seed is not None else 0


def partitions(
    spec: SelectionSpec, y: np.ndarray, repetitions: int, seed: int
) -> list[list[np.ndarray]]:
    """The K test parts of each repetition: (Stratified)KFold(K, shuffle, seed + r)."""
    stratified = spec.outer.method == "stratified_kfold"
    rows = np.arange(len(y))
    found = []
    for r in range(repetitions):
        splitter = (StratifiedKFold if stratified else KFold)(
            spec.outer.k, shuffle=True, random_state=seed + r
        )
        found.append([np.asarray(test) for _, test in splitter.split(rows, y)])
    return found


@dataclass(frozen=True)
class ProcedurePlace:
    """Where a procedure fold sits in the algorithm: repetition, outer part, scored part."""

    repetition: int
    outer: int
    part: int  # equal to `outer` for the procedure fitted without part `outer` alone


def place_of(fold: Fold, k: int) -> ProcedurePlace:
    """The (repetition, outer part, scored part) of a procedure fold."""
    repetition, outer = interval_position(fold.repeat, k)
    return ProcedurePlace(repetition, outer, fold.index)


def procedure_training_rows(parts: list[np.ndarray], outer: int, part: int) -> np.ndarray:
    """The rows the procedure fits on: every part but `outer` and `part`, sorted."""
    left_out = {outer, part}
    return np.sort(np.concatenate([p for i, p in enumerate(parts) if i not in left_out]))


def build_interval_folds(
    spec: SelectionSpec, inputs: SplitInputs, *, n_rows: int, versions: str
) -> tuple[list[Fold], dict[str, list[Fold]]]:
    """The procedure folds of a `nested` interval and each one's inner folds (none otherwise)."""
    if spec.interval.method != "nested":
        return [], {}
    k = spec.outer.k
    folds: list[Fold] = []
    inner: dict[str, list[Fold]] = {}
    drawn = partitions(spec, inputs.y, repetitions_of(spec), interval_seed(spec))
    for r, parts in enumerate(drawn):
        for o in range(k):
            for j in range(k):
                train = procedure_training_rows(parts, o, j)
                test = parts[j]
                fold = Fold(
                    INTERVAL_REPEAT_BASE + r * k + o,
                    j,
                    train,
                    test,
                    fold_fingerprint(train, test, n_rows, versions),
                )
                try:
                    inner[fold.scope] = split_rows(
                        spec.inner, train, inputs, n_rows=n_rows, versions=versions, field="inner"
                    )
                except SpecError as exc:
                    raise SpecError(
                        "interval.method",
                        f"'nested' runs the search on {len(train)} rows ({k - 2} of the {k} "
                        f"outer parts), where the inner split fails: {exc.message} Use 'quick', "
                        "or a larger outer k.",
                    ) from None
                folds.append(fold)
    return folds, inner


def shared_with_outer(outer: list[Fold], interval_folds: list[Fold]) -> set[str]:
    """Scopes of procedure folds that are one of the job's own outer folds (same rows, same
    fingerprint): their search and refit are the job's, so no unit of their own runs.

    With the outer seed, repetition 0 draws the job's own partition, so its K procedures fitted
    without one part are the job's outer folds: R · K · K procedures make R · K · K - K units.
    """
    own = {fold.fingerprint for fold in outer}
    return {fold.scope for fold in interval_folds if fold.fingerprint in own}
