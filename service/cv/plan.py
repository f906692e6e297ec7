"""A selection plan: the validated spec bound to a table, with every fold and candidate fixed."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import numpy.typing as npt
import pandas as pd
import sklearn

from service.cv.candidates import Candidate, enumerate_candidates
from service.cv.columns import apply_column_types, order_values
from service.cv.errors import SpecError
from service.cv.halving_schedule import check_first_rounds, check_halving, round_folds
from service.cv.interval_folds import build_interval_folds
from service.cv.intervals import check_interval
from service.cv.metrics import check_metrics
from service.cv.preprocess import FeatureTable, check_preprocess, feature_table
from service.cv.recipe import check_recipe
from service.cv.scopes import FINAL_SCOPE
from service.cv.slices import check_slices
from service.cv.spec import SelectionSpec
from service.cv.splits import Fold, SplitInputs, split_rows
from service.cv.subsample import subsample_outer
from service.cv.weights import check_weight_families, observation_weights

SCORING_VERSION = "1"  # ours, among the versions below


def library_versions() -> dict[str, str]:
    """The versions that can change fold indices or scores."""
    # "foldwise-scoring" is ours: bump it when the way a unit fits or scores changes, so fold
    # fingerprints (which embed these versions) change and old scores are no longer reused
    return {
        "scikit-learn": sklearn.__version__,
        "numpy": np.__version__,
        "foldwise-scoring": SCORING_VERSION,
    }


@dataclass(frozen=True)
class SelectionPlan:
    """Everything fixed before the first fit; every worker rebuilds the same plan."""

    spec: SelectionSpec
    candidates: list[Candidate]
    table: FeatureTable
    y: npt.NDArray[np.generic]
    outer: list[Fold]
    inner: dict[str, list[Fold]]  # outer scope (or FINAL_SCOPE) -> its inner folds
    split_inputs: SplitInputs
    versions: dict[str, str] = field(default_factory=library_versions)
    weights: npt.NDArray[np.float64] | None = None  # one observation weight per row, if given
    # a `nested` interval's procedure folds (service/cv/interval_folds.py): outer folds that
    # the estimate does not average, their inner folds in `inner` beside the job's own
    interval_folds: list[Fold] = field(default_factory=list)
    # a halving search's folds, per scope and round (halving_schedule.round_folds); empty for
    # the full grid
    rounds: dict[str, list[list[Fold]]] = field(default_factory=dict)

    @property
    def n_rows(self) -> int:
        """Rows in the table."""
        return len(self.y)

    @property
    def scopes(self) -> list[str]:
        """Outer fold scopes in (repeat, fold) order, the interval's procedure folds, then 'all'."""
        return [f.scope for f in self.outer + self.interval_folds] + [FINAL_SCOPE]

    def outer_fold(self, scope: str) -> Fold:
        """The outer fold called `scope`."""
        for fold in self.outer + self.interval_folds:
            if fold.scope == scope:
                return fold
        raise KeyError(scope)

    def candidate(self, key: str) -> Candidate:
        """The candidate with `key`."""
        for candidate in self.candidates:
            if candidate.key == key:
                return candidate
        raise KeyError(key)


def _column(frame: pd.DataFrame, name: str, field: str) -> pd.Series:
    if name not in frame.columns:
        cols = ", ".join(map(str, frame.columns[:8])) + (", ..." if frame.shape[1] > 8 else "")
        raise SpecError(field, f"column {name!r} is not in the table (columns: {cols}).")
    return frame[name]


def _target(spec: SelectionSpec, frame: pd.DataFrame, kinds: dict[str, str]) -> np.ndarray:
    col = _column(frame, spec.target, "target")
    missing = int(col.isna().sum())
    if missing == len(col):
        raise SpecError("target", f"target column {spec.target!r} has no values; pick another.")
    if missing:
        raise SpecError(
            "target",
            f"target column {spec.target!r} has {missing} missing values; drop or fill those "
            "rows before selecting.",
        )
    if col.nunique() < 2:
        raise SpecError(
            "target", f"target column {spec.target!r} has a single value; nothing to predict."
        )
    kind = kinds.get(spec.target, "categorical")
    if spec.task == "regression":
        if kind != "numeric":
            raise SpecError(
                "target",
                f"target {spec.target!r} is {kind}, not numeric; use task 'classification'.",
            )
        return col.to_numpy(dtype="float64")
    if kind == "numeric":
        values = col.to_numpy(dtype="float64")
        if not np.all(np.equal(np.mod(values, 1), 0)):
            raise SpecError(
                "target",
                f"target {spec.target!r} has non-integer numbers; use task 'regression' or "
                "encode the classes as labels.",
            )
        return values.astype("int64")
    if kind == "boolean":
        return col.astype(bool).to_numpy()
    return col.astype(str).to_numpy(dtype=object)


def _features(spec: SelectionSpec, frame: pd.DataFrame) -> list[str]:
    reserved = {spec.target} | ({spec.weights} if spec.weights else set())
    for plan in (spec.outer, spec.inner):
        reserved |= {c for c in (plan.groups, plan.order_by) if c}
    if spec.features is None:
        return [str(c) for c in frame.columns if c not in reserved]
    for i, name in enumerate(spec.features):
        _column(frame, name, f"features[{i}]")
        if name == spec.target:
            raise SpecError(f"features[{i}]", "the target cannot also be a feature; remove it.")
        if name == spec.weights:
            raise SpecError(
                f"features[{i}]", "the weights column cannot also be a feature; remove it."
            )
    if len(set(spec.features)) != len(spec.features):
        raise SpecError("features", "a column is listed twice in features; list each once.")
    return list(spec.features)


def _split_inputs(
    spec: SelectionSpec, frame: pd.DataFrame, y: np.ndarray, kinds: dict[str, str]
) -> SplitInputs:
    groups = order = None
    for name, plan in (("outer", spec.outer), ("inner", spec.inner)):
        if plan.groups:
            col = _column(frame, plan.groups, f"{name}.groups")
            if col.isna().any():
                raise SpecError(f"{name}.groups", f"groups column {plan.groups!r} has gaps.")
            groups = col.astype(str).to_numpy(dtype=object)
        if plan.order_by:
            col = _column(frame, plan.order_by, f"{name}.order_by")
            if col.isna().any():
                raise SpecError(f"{name}.order_by", f"order column {plan.order_by!r} has gaps.")
            kind = kinds.get(plan.order_by, "categorical")
            order = order_values(plan.order_by, col, kind, f"{name}.order_by").to_numpy()
    return SplitInputs(y=y, groups=groups, order=order)


def build_plan(spec: SelectionSpec, frame: pd.DataFrame, kinds: dict[str, str]) -> SelectionPlan:
    """Validate `spec` against `frame` and fix candidates and folds; raises SpecError."""
    if len(frame) < 4:
        raise SpecError("dataset", f"the table has {len(frame)} rows; nested CV needs more.")
    frame, kinds = apply_column_types(frame, kinds, spec.columns)
    y = _target(spec, frame, kinds)
    n_classes = len(np.unique(y)) if spec.task == "classification" else None
    if n_classes is not None and n_classes > max(20, len(y) // 5):
        raise SpecError(
            "task",
            f"target {spec.target!r} has {n_classes} distinct values, too many for "
            "classification; use task 'regression'.",
        )
    check_metrics(spec.metrics, spec.task, n_classes)
    check_interval(spec)
    features = _features(spec, frame)
    check_slices(spec.slices, frame)
    table = feature_table(frame, features, kinds)
    candidates = enumerate_candidates(spec)
    if spec.recipe is not None:
        check_recipe(spec, table, candidates, y)
    else:
        check_preprocess(
            table, str(spec.preprocess), [(c.estimator, c.params) for c in candidates], spec.task
        )
    weights = observation_weights(spec.weights, frame, kinds) if spec.weights else None
    if weights is not None:
        check_weight_families(spec)
    inputs = _split_inputs(spec, frame, y, kinds)
    versions = library_versions()
    tag = ";".join(f"{k}={v}" for k, v in sorted(versions.items()))
    all_rows = np.arange(len(y))
    n = len(y)
    outer = split_rows(spec.outer, all_rows, inputs, n_rows=n, versions=tag, field="outer")
    strata = y if spec.task == "classification" else None  # learning curves: a share of each part
    outer = subsample_outer(
        outer, strata, spec.train_fraction, seed=spec.subsample_seed, n_rows=n, versions=tag
    )
    inner = {
        fold.scope: split_rows(
            spec.inner, fold.train, inputs, n_rows=n, versions=tag, field="inner"
        )
        for fold in outer
    }
    inner[FINAL_SCOPE] = split_rows(
        spec.inner, all_rows, inputs, n_rows=n, versions=tag, field="inner"
    )
    search_rows = [len(fold.train) for fold in outer] + [n]
    check_halving(spec, len(candidates), search_rows, len(inner[FINAL_SCOPE]), n_classes)
    searches = {fold.scope: (fold.train, inner[fold.scope]) for fold in outer}
    searches[FINAL_SCOPE] = (all_rows, inner[FINAL_SCOPE])
    check_first_rounds(spec, y, searches, len(candidates))
    rounds = {}
    if spec.search.strategy == "halving":
        for scope, (rows, folds) in searches.items():
            rounds[scope] = round_folds(
                spec.search,
                len(candidates),
                y,
                rows,
                folds,
                n_rows=n,
                versions=tag,
                classification=spec.task == "classification",
            )
    interval_folds, interval_inner = build_interval_folds(spec, inputs, n_rows=n, versions=tag)
    inner |= interval_inner
    return SelectionPlan(
        spec, candidates, table, y, outer, inner, inputs, versions, weights, interval_folds, rounds
    )
