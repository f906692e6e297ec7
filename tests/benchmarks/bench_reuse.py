"""Benchmark: what reuse saves. Two figures, each against a goal.

1. A resubmitted job (the same request again) over its first run: goal under 2%.
2. A job whose grid overlaps an earlier one, over the same request computed from scratch, set
   beside the fraction of its units that are new: goal within 10% of that fraction (the ratio
   divided by the fraction between 0.9 and 1.1).

Every run is `run_embedded` in this process on a store of its own (SQLite under a temporary
FOLDWISE_HOME, or the PostgreSQL URL given), one worker, timed wall-clock from request to result,
so each figure includes validation, hashing the table, store writes and the fan-in.

Run from the repository root: `.venv/bin/python tests/benchmarks/bench_reuse.py [--rounds 3]`.
"""

from __future__ import annotations

import argparse
import copy
import statistics
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

from service.config import Settings, load_settings
from service.jobs.local.driver import run_embedded
from service.store.db import upgrade_database

# breast cancer Wisconsin ships with scikit-learn (Street, Wolberg & Mangasarian 1993)
FIRST_GRID = [0.01, 0.03, 0.1, 0.3, 1.0, 3.0]
# between the old values, so a new unit costs about what an old one does (large C values make
# lbfgs iterate longer, and the fraction of units would then understate the fraction of work)
NEW_VALUES = [0.05, 0.5]
RESUBMIT_GOAL = 0.02
OVERLAP_TOLERANCE = 0.10


def request(grid: list[float], **changes: Any) -> dict[str, Any]:
    """The benchmark's job: standardised logistic regression over a C grid, 5 x 3 folds."""
    body: dict[str, Any] = {
        "dataset": {"sample": "breast_cancer"},
        "target": "target",
        "task": "classification",
        "families": [
            {"estimator": "LogisticRegression", "fixed": {"max_iter": 5000}, "grid": {"C": grid}}
        ],
        "outer": {"method": "stratified_kfold", "k": 5, "seed": 2},
        "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
        "metrics": ["accuracy", "roc_auc"],
    }
    body.update(copy.deepcopy(changes))
    return body


def timed(body: dict[str, Any], settings: Settings) -> tuple[float, dict[str, Any]]:
    """Seconds from request to result, and the result."""
    started = time.perf_counter()
    outcome = run_embedded(body, settings=settings)
    return time.perf_counter() - started, outcome.result


def store(folder: Path, name: str, database_url: str | None) -> Settings:
    """Settings with a home (and, without a URL, a SQLite store) of their own."""
    env = {"FOLDWISE_HOME": str(folder / name)}
    if database_url:
        env["FOLDWISE_DATABASE_URL"] = database_url
    return load_settings(env)


def one_round(folder: Path, index: int, database_url: str | None) -> dict[str, float]:
    """First run, resubmission, overlap, and the overlapping request from scratch."""
    shared = store(folder, f"shared-{index}", database_url)
    first_seconds, first = timed(request(FIRST_GRID), shared)
    again_seconds, again = timed(request(FIRST_GRID), shared)
    assert again["work"]["fits"] == 0, again["work"]
    assert again["outer"] == first["outer"]
    wider = FIRST_GRID + NEW_VALUES
    overlap_seconds, overlap = timed(request(wider), shared)
    scratch = store(folder, f"scratch-{index}", None)
    upgrade_database(scratch.database_url)  # a new store's migration is not the job's work
    scratch_seconds, fresh = timed(request(wider, reuse=False), scratch)
    assert overlap["outer"] == fresh["outer"], "reuse changed the estimate"
    work = overlap["work"]
    return {
        "first": first_seconds,
        "resubmit": again_seconds,
        "overlap": overlap_seconds,
        "scratch": scratch_seconds,
        "new_units": work["units_computed"] / work["units_total"],
        "new_fits": work["fits"] / fresh["work"]["fits"],
    }


def main() -> int:
    """Run the rounds and print both figures against their goals."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--database-url", default=None, help="a PostgreSQL URL (default SQLite)")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="foldwise-bench-reuse-") as tmp:
        one_round(Path(tmp), -1, None)  # warm-up: imports, the sample table's first load
        rounds = [one_round(Path(tmp), i, args.database_url) for i in range(args.rounds)]
    med = {key: statistics.median(r[key] for r in rounds) for key in rounds[0]}
    resubmit = med["resubmit"] / med["first"]
    overlap = med["overlap"] / med["scratch"]
    closeness = overlap / med["new_units"]
    print(f"rounds: {args.rounds} (medians); store: {args.database_url or 'SQLite'}")
    print(f"first run {med['first']:.3f} s, resubmitted {med['resubmit']:.3f} s")
    print(f"  resubmitted / first = {resubmit:.4f} (goal < {RESUBMIT_GOAL})")
    print(
        f"overlapping grid {med['overlap']:.3f} s, same request from scratch {med['scratch']:.3f} s"
    )
    print(
        f"  overlap / scratch = {overlap:.4f}; new units {med['new_units']:.4f} "
        f"(new fits {med['new_fits']:.4f}); ratio / fraction = {closeness:.3f} "
        f"(goal within {1 - OVERLAP_TOLERANCE:.2f}..{1 + OVERLAP_TOLERANCE:.2f})"
    )
    ok = resubmit < RESUBMIT_GOAL and abs(closeness - 1) <= OVERLAP_TOLERANCE
    print("goals met" if ok else "a goal was missed")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
