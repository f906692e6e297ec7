"""Benchmark: what successive halving saves on a 40-candidate search, in one process.

Table: scikit-learn's bundled breast cancer table (569 rows, 30 numeric columns). Forty
candidates: SVC over C (8 values) x gamma (5 values); outer stratified 5-fold (seed 2), inner
stratified 3-fold (seed 1); accuracy; preprocess "auto" (median imputation, scaling).

- engine, grid: service.cv.nested.run_nested with the full grid (every candidate, every fold);
- engine, halving: the same with "search": {"strategy": "halving", "factor": 3, "min_rows": 40};
- scikit-learn, halving: HalvingGridSearchCV (min_resources=40, random_state=0) inside
  cross_validate, then the same search on all rows: the reference the engine must equal;
- service, grid / halving: the same requests as a job on the embedded pool, as `foldwise select`
  runs them (stored work units, each round's units added by the fan-in), 1 and 2 workers, each
  run on a new SQLite store so nothing is reused.

Rounds alternate the three; medians, ratios, fits and rows fitted on are printed. The halving
figures are reported only if the engine's outer scores equal scikit-learn's (to 1e-9).

Run from the repository root: `.venv/bin/python tests/benchmarks/bench_halving.py [--rounds 3]`
(`--no-service` leaves the service's runs out).
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from collections.abc import Callable
from typing import Any

import numpy as np
from sklearn.compose import ColumnTransformer
from sklearn.datasets import load_breast_cancer
from sklearn.experimental import enable_halving_search_cv  # noqa: F401  (makes the class)
from sklearn.impute import SimpleImputer
from sklearn.model_selection import HalvingGridSearchCV, StratifiedKFold, cross_validate
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.svm import SVC

from service.config import load_settings
from service.cv.nested import NestedOutcome, run_nested
from service.cv.plan import build_plan
from service.cv.spec import SelectionSpec

C_GRID = [0.01, 0.03, 0.1, 0.3, 1.0, 3.0, 10.0, 30.0]
GAMMA_GRID = [0.001, 0.003, 0.01, 0.03, 0.1]
X, Y = load_breast_cancer(return_X_y=True, as_frame=True)
FRAME = X.assign(target=Y)
KINDS = {name: "numeric" for name in FRAME.columns}
# min_rows 40: the default first round (16 rows) cuts some inner training part to one class
HALVING = {"strategy": "halving", "factor": 3, "min_rows": 40}


def spec(search: dict[str, Any]) -> SelectionSpec:
    return SelectionSpec.model_validate(
        {
            "target": "target",
            "task": "classification",
            "families": [{"estimator": "SVC", "grid": {"C": C_GRID, "gamma": GAMMA_GRID}}],
            "outer": {"method": "stratified_kfold", "k": 5, "seed": 2},
            "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
            "metrics": ["accuracy"],
            "search": search,
        }
    )


def engine(search: dict[str, Any]) -> NestedOutcome:
    return run_nested(build_plan(spec(search), FRAME, KINDS))


def service(search: dict[str, Any], workers: int) -> dict[str, Any]:
    """The request as a job on a new embedded store; its result v1."""
    # imported here: the pool's start-up belongs to the service's runs, not the module's
    from service.jobs.local.driver import run_embedded

    body = {"dataset": {"sample": "breast_cancer"}, **spec(search).model_dump(mode="json")}
    with tempfile.TemporaryDirectory() as home:
        settings = load_settings({"FOLDWISE_HOME": home})
        return run_embedded(body, settings=settings, workers=workers).result


def scikit_learn() -> np.ndarray:
    numeric = Pipeline([("impute", SimpleImputer(strategy="median")), ("scale", StandardScaler())])
    pipeline = Pipeline(
        [
            ("preprocess", ColumnTransformer([("numeric", numeric, list(X.columns))])),
            ("model", SVC(random_state=0)),  # the engine pins random_state=0 when none is given
        ]
    )

    def search() -> HalvingGridSearchCV:
        return HalvingGridSearchCV(
            pipeline,
            {"model__C": C_GRID, "model__gamma": GAMMA_GRID},
            cv=StratifiedKFold(3, shuffle=True, random_state=1),
            scoring="accuracy",
            factor=3,
            min_resources=40,
            random_state=0,
        )

    outer = StratifiedKFold(5, shuffle=True, random_state=2)
    scores = cross_validate(search(), X, Y, cv=outer, scoring="accuracy")["test_score"]
    search().fit(X, Y)
    return np.asarray(scores)


def timed(run: Callable[[], Any]) -> tuple[float, Any]:
    started = time.perf_counter()
    value = run()
    return time.perf_counter() - started, value


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--no-service", action="store_true")
    options = parser.parse_args()
    rounds = options.rounds
    runs: dict[str, Callable[[], Any]] = {
        "engine, grid": lambda: engine({}),
        "engine, halving": lambda: engine(HALVING),
        "scikit-learn, halving": scikit_learn,
    }
    if not options.no_service:
        runs |= {
            "service, grid, 1 worker": lambda: service({}, 1),
            "service, halving, 1 worker": lambda: service(HALVING, 1),
            "service, grid, 2 workers": lambda: service({}, 2),
            "service, halving, 2 workers": lambda: service(HALVING, 2),
        }
    seconds: dict[str, list[float]] = {name: [] for name in runs}
    last: dict[str, Any] = {}
    for _ in range(rounds):
        for name, run in runs.items():
            took, last[name] = timed(run)
            seconds[name].append(took)
    halving = last["engine, halving"].result
    ours = np.array([row["scores"]["accuracy"] for row in halving["outer"]])
    if not np.allclose(ours, last["scikit-learn, halving"], rtol=0, atol=1e-9):
        print("halving: the engine's outer scores differ from scikit-learn's; no figures")
        return 1
    for name in [n for n in last if n.startswith("service, halving")]:
        stored = np.array([row["scores"]["accuracy"] for row in last[name]["outer"]])
        if not np.allclose(stored, last["scikit-learn, halving"], rtol=0, atol=1e-9):
            print(f"{name}: the job's outer scores differ from scikit-learn's; no figures")
            return 1
    median = {name: statistics.median(values) for name, values in seconds.items()}
    for name, value in median.items():
        print(f"{name:24s} median {value:7.2f} s over {rounds} rounds")
    search = halving["search"]
    print(f"fits: halving {search['fits']}, full grid {search['full_grid_fits']}")
    rows, grid_rows = search["inner_train_rows"], search["full_grid_inner_train_rows"]
    print(
        f"inner rows fitted on: halving {rows:,}, full grid {grid_rows:,} ({rows / grid_rows:.2f})"
    )
    print(f"wall: halving / grid {median['engine, halving'] / median['engine, grid']:.2f}")
    ratio = median["engine, halving"] / median["scikit-learn, halving"]
    print(f"wall: engine halving / scikit-learn halving {ratio:.2f}")
    reference = median["scikit-learn, halving"]
    for workers in ("1 worker", "2 workers"):
        grid, halved = f"service, grid, {workers}", f"service, halving, {workers}"
        if grid in median:
            print(
                f"wall, service on {workers}: halving / grid {median[halved] / median[grid]:.2f}, "
                f"halving / scikit-learn halving {median[halved] / reference:.2f}"
            )
    return 0


if __name__ == "__main__":
    sys.exit(main())
