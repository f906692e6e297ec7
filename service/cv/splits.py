"""Split plans: outer folds, inner folds inside each outer training set, fold fingerprints."""

from __future__ import annotations

import hashlib
from dataclasses import dataclass

import numpy as np
from sklearn.model_selection import (
    GroupKFold,
    KFold,
    RepeatedKFold,
    RepeatedStratifiedKFold,
    StratifiedKFold,
    TimeSeriesSplit,
)
from sklearn.model_selection._split import BaseCrossValidator

from service.cv.errors import SpecError
from service.cv.scopes import outer_scope
from service.cv.spec import SplitSpec


@dataclass(frozen=True)
class Fold:
    """One train/test division; indices are absolute row numbers of the dataset."""

    repeat: int
    index: int
    train: np.ndarray
    test: np.ndarray
    fingerprint: str

    @property
    def scope(self) -> str:
        """A short stable name, used as the work unit scope of an outer fold."""
        return outer_scope(self.repeat, self.index)


@dataclass(frozen=True)
class SplitInputs:
    """What splitters may look at: labels, groups and an order, one entry per dataset row."""

    y: np.ndarray
    groups: np.ndarray | None
    order: np.ndarray | None


def fold_fingerprint(train: np.ndarray, test: np.ndarray, n_rows: int, versions: str) -> str:
    """sha256 of the exact train and test indices (in order), the row count and versions."""
    digest = hashlib.sha256()
    digest.update(f"foldwise-fold-v1|{n_rows}|{versions}|".encode())
    digest.update(np.asarray(train, dtype="<i8").tobytes())
    digest.update(b"|")
    digest.update(np.asarray(test, dtype="<i8").tobytes())
    return digest.hexdigest()


def make_splitter(plan: SplitSpec) -> BaseCrossValidator:
    """The scikit-learn splitter for a plan (shuffled with `seed` when one is given)."""
    shuffle = plan.seed is not None
    if plan.method == "kfold":
        if plan.repeats > 1:
            return RepeatedKFold(n_splits=plan.k, n_repeats=plan.repeats, random_state=plan.seed)
        return KFold(plan.k, shuffle=shuffle, random_state=plan.seed)
    if plan.method == "stratified_kfold":
        if plan.repeats > 1:
            return RepeatedStratifiedKFold(
                n_splits=plan.k, n_repeats=plan.repeats, random_state=plan.seed
            )
        return StratifiedKFold(plan.k, shuffle=shuffle, random_state=plan.seed)
    if plan.method == "group_kfold":
        return GroupKFold(plan.k, shuffle=shuffle, random_state=plan.seed)
    return TimeSeriesSplit(
        n_splits=plan.k, gap=plan.gap, max_train_size=plan.max_train_size, test_size=plan.test_size
    )


def _check_feasible(plan: SplitSpec, field: str, rows: np.ndarray, inputs: SplitInputs) -> None:
    n = len(rows)
    if plan.k > n:
        raise SpecError(f"{field}.k", f"k={plan.k} is more than the {n} rows to split; lower k.")
    if plan.method == "stratified_kfold":
        _, counts = np.unique(inputs.y[rows], return_counts=True)
        if counts.max() < plan.k:
            raise SpecError(
                f"{field}.k",
                f"k={plan.k} is more than the largest class has rows ({counts.max()}); lower k.",
            )
    if plan.method == "group_kfold" and inputs.groups is not None:
        n_groups = len(np.unique(inputs.groups[rows]))
        if plan.k > n_groups:
            raise SpecError(
                f"{field}.k",
                f"k={plan.k} is more than the {n_groups} distinct groups in {plan.groups!r}; "
                "lower k.",
            )
    if plan.method == "time_series":
        _check_time_slices(plan, field, n)


def _check_time_slices(plan: SplitSpec, field: str, n: int) -> None:
    """TimeSeriesSplit's own arithmetic: k test slices and a gap must leave training rows."""
    test_size = plan.test_size if plan.test_size is not None else n // (plan.k + 1)
    if test_size < 1:
        raise SpecError(f"{field}.k", f"k={plan.k} leaves no rows per time slice; lower k.")
    first_train = n - plan.gap - test_size * plan.k
    if first_train > 0:
        return
    # the gap is to blame when the test slices alone would leave training rows
    if plan.gap and n - test_size * plan.k > 0:
        blamed = "gap"
    else:
        blamed = "test_size" if plan.test_size is not None else "k"
    raise SpecError(
        f"{field}.{blamed}",
        f"{plan.k} test slices of {test_size} rows and a gap of {plan.gap} leave no training "
        f"rows for the first fold of the {n} rows to split; lower {blamed}.",
    )


def split_rows(
    plan: SplitSpec,
    rows: np.ndarray,
    inputs: SplitInputs,
    *,
    n_rows: int,
    versions: str,
    field: str,
) -> list[Fold]:
    """Split `rows` (absolute indices) as a search-CV object splits the subset it is given."""
    _check_feasible(plan, field, rows, inputs)
    splitter = make_splitter(plan)
    n = len(rows)
    y = inputs.y[rows]
    groups = inputs.groups[rows] if inputs.groups is not None else None
    if plan.method == "time_series":
        assert inputs.order is not None
        # TimeSeriesSplit assumes rows in time order: split positions of the stable time sort
        perm = np.argsort(inputs.order[rows], kind="stable")
        pairs = [(perm[tr], perm[te]) for tr, te in splitter.split(np.zeros((n, 1)))]
    else:
        pairs = list(splitter.split(np.zeros((n, 1)), y, groups))
    folds = []
    for i, (train_rel, test_rel) in enumerate(pairs):
        train, test = rows[train_rel], rows[test_rel]
        repeat, index = divmod(i, plan.k)
        fingerprint = fold_fingerprint(train, test, n_rows, versions)
        folds.append(Fold(repeat, index, train, test, fingerprint))
    return folds
