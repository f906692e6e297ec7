"""Benchmark: the engine alone, with a fold's preprocessing shared by its candidates or not,
against scikit-learn's own nested cross-validation on the same splits, in one process.

The table is invented (seeded): 420 rows, two categorical columns and six numeric ones, gaps in
four of them, a binary target. Eight candidates: logistic regression x 4 (C), random forest x 2
(max_depth), SVC x 2 (C); outer stratified 5-fold (seed 2), inner stratified 3-fold (seed 1);
accuracy and roc_auc, pick by accuracy.

- engine, shared: service.cv.nested.run_nested on a plan built in the round, cache emptied
  before each round (no store, no pool);
- engine, per candidate: the same with sharing off (every fold fits each candidate's whole
  pipeline, as before the cache);
- scikit-learn: GridSearchCV over the same candidates (a Pipeline of the same ColumnTransformer
  and the estimator) inside cross_validate, then the same search on all rows.

Rounds alternate the three; medians and ratios are printed, with the cache's size at its peak.
The ratios are reported only if all three give the same outer scores (to 1e-9).

Run from the repository root:
`.venv/bin/python tests/benchmarks/bench_engine_shared.py [--rounds 3]`
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from collections.abc import Callable
from typing import Any

import numpy as np
import pandas as pd
from sklearn.base import clone
from sklearn.compose import ColumnTransformer
from sklearn.ensemble import RandomForestClassifier
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import GridSearchCV, StratifiedKFold, cross_validate
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import OneHotEncoder, StandardScaler
from sklearn.svm import SVC
from threadpoolctl import threadpool_limits

from service.cv.nested import run_nested
from service.cv.plan import build_plan
from service.cv.spec import SelectionSpec

try:  # absent on a checkout before the cache: only the per-candidate engine is timed there
    from service.cv import shared_folds
except ImportError:  # pragma: no cover - a baseline checkout
    shared_folds = None  # type: ignore[assignment]

TOLERANCE = 1e-9
METRICS = ["accuracy", "roc_auc"]
NUMERIC = [f"x{i}" for i in range(6)]
CATEGORICAL = ["site", "grade"]

FAMILIES: list[dict[str, Any]] = [
    {
        "estimator": "LogisticRegression",
        "fixed": {"max_iter": 1000},
        "grid": {"C": [0.01, 0.1, 1, 10]},
    },
    {
        "estimator": "RandomForestClassifier",
        "fixed": {"n_estimators": 100},
        "grid": {"max_depth": [None, 6]},
    },
    {"estimator": "SVC", "grid": {"C": [0.5, 2.0]}},
]
# scikit-learn's side: the same classes, with random_state=0 where the engine pins it
REFERENCE_GRID = [
    {
        "model": [LogisticRegression(max_iter=1000, random_state=0)],
        "model__C": [0.01, 0.1, 1, 10],
    },
    {
        "model": [RandomForestClassifier(n_estimators=100, random_state=0)],
        "model__max_depth": [None, 6],
    },
    {"model": [SVC(random_state=0)], "model__C": [0.5, 2.0]},
]


def invented_table(rows: int = 420, seed: int = 0) -> pd.DataFrame:
    """Two categorical columns and six numeric ones, gaps in four columns, a binary target."""
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({name: rng.normal(size=rows) for name in NUMERIC})
    frame["site"] = rng.choice(["north", "south", "east", "west", "hill"], rows).astype(object)
    frame["grade"] = rng.choice(["a", "b", "c"], rows, p=[0.5, 0.3, 0.2]).astype(object)
    signal = (
        frame["x0"]
        - 0.7 * frame["x1"]
        + 0.4 * frame["x2"] * frame["x3"]
        + 0.8 * (frame["site"] == "hill")
        - 0.5 * (frame["grade"] == "c")
    )
    frame["failed"] = (signal + rng.normal(0, 0.8, rows) > 0.3).astype("int64")
    for column in ("x0", "x4", "site", "grade"):
        frame.loc[rng.choice(rows, rows // 12, replace=False), column] = np.nan
    return frame


def request() -> dict[str, Any]:
    return {
        "target": "failed",
        "task": "classification",
        "features": NUMERIC + CATEGORICAL,
        "families": FAMILIES,
        "outer": {"method": "stratified_kfold", "k": 5, "seed": 2},
        "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
        "metrics": METRICS,
        "pick_by": "accuracy",
    }


KINDS = {**{name: "numeric" for name in NUMERIC}, **{c: "categorical" for c in CATEGORICAL}}


def engine(frame: pd.DataFrame, shared: bool) -> tuple[np.ndarray, dict[str, Any]]:
    """Outer scores (fold x metric) of the engine, and the result dict."""
    if shared_folds is not None:
        limits = (shared_folds.DEFAULT_MAX_ENTRIES, shared_folds.DEFAULT_MAX_MB * 2**20)
        shared_folds.set_limits(*(limits if shared else (0, 0)))
    spec = SelectionSpec.model_validate(request())
    plan = build_plan(spec, frame, {**KINDS, "failed": "numeric"})
    result = run_nested(plan).result
    scores = np.array([[row["scores"][m] for m in METRICS] for row in result["outer"]])
    return scores, result


def reference(frame: pd.DataFrame) -> np.ndarray:
    """scikit-learn's nested CV: the search inside cross_validate, then the search on all rows."""
    X = frame[NUMERIC + CATEGORICAL].copy()
    X[CATEGORICAL] = X[CATEGORICAL].astype(object)
    y = frame["failed"].to_numpy()
    numeric = Pipeline([("impute", SimpleImputer(strategy="median")), ("scale", StandardScaler())])
    categorical = Pipeline(
        [
            ("impute", SimpleImputer(strategy="most_frequent")),
            ("encode", OneHotEncoder(handle_unknown="ignore", sparse_output=False)),
        ]
    )
    columns = ColumnTransformer(
        [("numeric", numeric, NUMERIC), ("categorical", categorical, CATEGORICAL)]
    )
    pipeline = Pipeline([("preprocess", columns), ("model", LogisticRegression())])
    search = GridSearchCV(
        pipeline,
        REFERENCE_GRID,
        cv=StratifiedKFold(3, shuffle=True, random_state=1),
        scoring={m: m for m in METRICS},
        refit="accuracy",
    )
    outer = cross_validate(
        search, X, y, cv=StratifiedKFold(5, shuffle=True, random_state=2), scoring=METRICS
    )
    clone(search).fit(X, y)
    return np.column_stack([outer[f"test_{m}"] for m in METRICS])


def timed(run: Callable[[], Any]) -> tuple[float, float, Any]:
    """Wall seconds, this process's CPU seconds (steadier on shared cores), the value."""
    started, cpu = time.perf_counter(), time.process_time()
    value = run()
    return time.perf_counter() - started, time.process_time() - cpu, value


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=3)
    args = parser.parse_args()
    frame = invented_table()
    sides: dict[str, Callable[[], Any]] = {
        "engine, per candidate": lambda: engine(frame, shared=False),
        "scikit-learn": lambda: reference(frame),
    }
    if shared_folds is not None:
        sides = {"engine, shared": lambda: engine(frame, shared=True), **sides}
    times: dict[str, list[float]] = {name: [] for name in sides}
    cpu_times: dict[str, list[float]] = {name: [] for name in sides}
    outputs: dict[str, Any] = {}
    peak: dict[str, int] = {}
    with threadpool_limits(1):  # one BLAS thread for both, as the pool's children run
        for round_ in range(args.rounds):
            order = list(sides) if round_ % 2 == 0 else list(reversed(sides))
            for name in order:
                seconds, cpu, outputs[name] = timed(sides[name])
                times[name].append(seconds)
                cpu_times[name].append(cpu)
                if name == "engine, shared" and shared_folds is not None:
                    peak = shared_folds.CACHE.stats()
                print(f"round {round_ + 1}: {name}: {seconds:.2f} s ({cpu:.2f} s CPU)", flush=True)
    reference_scores = outputs["scikit-learn"]
    agree = True
    for name in sides:
        scores = outputs[name][0] if name != "scikit-learn" else reference_scores
        difference = float(np.max(np.abs(scores - reference_scores)))
        print(f"{name}: largest outer-score difference from scikit-learn {difference:.2e}")
        agree &= difference <= TOLERANCE
    if "engine, shared" in outputs:
        same = outputs["engine, shared"][1] == outputs["engine, per candidate"][1]
        print(f"shared and per-candidate results identical: {same}")
        agree &= same
        print(
            f"cache after a shared round: {peak['entries']} entries, peak "
            f"{peak['peak_bytes'] / 1024:.0f} KiB, {peak['hits']} hits, {peak['misses']} misses"
        )
    medians = {name: statistics.median(values) for name, values in times.items()}
    cpu_medians = {name: statistics.median(values) for name, values in cpu_times.items()}
    for name, value in medians.items():
        print(
            f"median {name}: {value:.2f} s wall, {cpu_medians[name]:.2f} s CPU over "
            f"{args.rounds} rounds"
        )
    if not agree:
        print("the sides did not give the same outer scores: no ratio reported")
        return 1
    for kind, table in (("wall", medians), ("CPU", cpu_medians)):
        for name in table:
            if name != "scikit-learn":
                ratio = table[name] / table["scikit-learn"]
                print(f"ratio ({kind}) {name} / scikit-learn: {ratio:.3f}")
        if "engine, shared" in table:
            gain = table["engine, shared"] / table["engine, per candidate"]
            print(f"ratio ({kind}) shared / per candidate: {gain:.3f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
