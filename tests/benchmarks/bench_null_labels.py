"""Benchmark: under null labels the nested estimate stays at chance, the non-nested best does not.

Varma & Simon 2006 (BMC Bioinformatics 7:91): with labels independent of the features, a tuned
classifier's non-nested cross-validated score is optimistic while the nested estimate stays at
chance [abstract]. The design is docs/references.md's fast one: 40 rows x 1000 standard
Gaussian features and balanced labels drawn independently (the same draws as
tests/engine/null_labels.py, seed by seed), KNeighborsClassifier with k in {1, 3, ..., 15},
stratified 5-fold outer loop (seed s) and inner loop (seed s + 1), accuracy; one repetition per
seed s = 0 .. rounds - 1. docs/references.md's rerun over 20 seeds: mean non-nested best about
0.59, mean nested about 0.51.

Each repetition runs the engine (service.cv.nested.run_nested, as a job's numbers are made) and,
as the reference, scikit-learn alone: GridSearchCV inside cross_val_score on the same splits for
the nested estimate, and the same GridSearchCV on all rows for the non-nested best
(`best_score_`). The figures are printed only if both agree to 1e-9 on every seed.

Printed: per seed the nested estimate, the non-nested best and their gap (the optimism gap of
result v1); then the mean, standard error (ddof 1) and t = (mean - 0.5) / SE of each over the
seeds, the share of seeds with a positive gap, and the wall time of the engine's runs.

The claim holds (exit code 0) when, over the seeds, the nested mean lies within three standard
errors of chance (0.5), and the non-nested best and the gap each lie more than three standard
errors above chance and zero. Three standard errors is common practice for "clearly", not a
published value. Exit code 1 when the claim fails or the engine and scikit-learn disagree.

Run from the repository root:
`.venv/bin/python tests/benchmarks/bench_null_labels.py [--rounds 20] [--features 1000]`
(one repetition takes 5-15 s on the shared two-core machine at 1000 features; the engine's fit
on a 1000-column frame costs tens of milliseconds, mostly scikit-learn's per-column checks).
The small in-suite version is tests/engine/test_null_labels.py.
"""

from __future__ import annotations

import argparse
import math
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.model_selection import GridSearchCV, StratifiedKFold, cross_val_score
from sklearn.neighbors import KNeighborsClassifier
from threadpoolctl import threadpool_limits

from service.cv.nested import run_nested
from service.cv.plan import build_plan
from service.cv.spec import SelectionSpec

# the tests' folder, for the study's table as the engine tests draw it
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from engine.null_labels import null_frame

ROWS = 40
N_NEIGHBORS = list(range(1, 16, 2))
FOLDS = 5
TOLERANCE = 1e-9
CHANCE = 0.5  # balanced labels
CLEARLY = 3.0  # standard errors; common practice, not a published value


def engine(seed: int, frame: pd.DataFrame) -> tuple[float, float, float]:
    """The engine's nested estimate, non-nested best (final pick's inner mean) and gap."""
    spec = SelectionSpec.model_validate(
        {
            "target": "target",
            "task": "classification",
            "families": [
                {"estimator": "KNeighborsClassifier", "grid": {"n_neighbors": N_NEIGHBORS}}
            ],
            "preprocess": "none",
            "outer": {"method": "stratified_kfold", "k": FOLDS, "seed": seed},
            "inner": {"method": "stratified_kfold", "k": FOLDS, "seed": seed + 1},
            "metrics": ["accuracy"],
        }
    )
    kinds = {name: "numeric" for name in frame.columns}
    result = run_nested(build_plan(spec, frame, kinds)).result
    return (
        result["estimate"]["accuracy"]["mean"],
        result["final_pick"]["inner_mean"],
        result["optimism_gap"],
    )


def scikit_learn(seed: int, frame: pd.DataFrame) -> tuple[float, float]:
    """scikit-learn alone on the same splits: nested mean and the non-nested best_score_."""
    X = frame.drop(columns="target").to_numpy()
    y = frame["target"].to_numpy()
    search = GridSearchCV(
        KNeighborsClassifier(),
        {"n_neighbors": N_NEIGHBORS},
        cv=StratifiedKFold(FOLDS, shuffle=True, random_state=seed + 1),
        scoring="accuracy",
    )
    outer = StratifiedKFold(FOLDS, shuffle=True, random_state=seed)
    nested = float(cross_val_score(search, X, y, cv=outer, scoring="accuracy").mean())
    return nested, float(search.fit(X, y).best_score_)


def describe(name: str, values: np.ndarray, centre: float) -> tuple[float, float]:
    mean = float(values.mean())
    se = float(values.std(ddof=1) / math.sqrt(len(values)))
    t = (mean - centre) / se if se > 0 else math.inf
    print(f"{name:18s} mean {mean:.4f}  SE {se:.4f}  t against {centre:.1f}: {t:+.2f}")
    return mean, se


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=20, help="repetitions (seeds 0 .. N-1)")
    parser.add_argument("--features", type=int, default=1000)
    options = parser.parse_args()
    if options.rounds < 2:
        parser.error("--rounds must be at least 2 (a standard error needs two seeds)")
    rows = []
    engine_seconds = 0.0
    print(f"{options.rounds} seeds, {ROWS} rows x {options.features} features, k in {N_NEIGHBORS}")
    print(f"{'seed':>4} {'nested':>8} {'non-nested':>11} {'gap':>8}")
    with threadpool_limits(1):  # one BLAS thread, as the service's pool children use
        for seed in range(options.rounds):
            frame = null_frame(seed, rows=ROWS, features=options.features)
            started = time.perf_counter()
            nested, best, gap = engine(seed, frame)
            engine_seconds += time.perf_counter() - started
            ref_nested, ref_best = scikit_learn(seed, frame)
            if abs(nested - ref_nested) > TOLERANCE or abs(best - ref_best) > TOLERANCE:
                print(
                    f"seed {seed}: engine ({nested}, {best}) differs from scikit-learn "
                    f"({ref_nested}, {ref_best}); no figures"
                )
                return 1
            rows.append((nested, best, gap))
            print(f"{seed:4d} {nested:8.4f} {best:11.4f} {gap:+8.4f}", flush=True)
    nested_all, best_all, gap_all = np.array(rows).T
    print("engine and scikit-learn agree to 1e-9 on every seed")
    nested_mean, nested_se = describe("nested", nested_all, CHANCE)
    best_mean, best_se = describe("non-nested best", best_all, CHANCE)
    gap_mean, gap_se = describe("optimism gap", gap_all, 0.0)
    print(f"seeds with a positive gap: {int((gap_all > 0).sum())} of {len(gap_all)}")
    print(f"engine wall: {engine_seconds:.1f} s ({engine_seconds / options.rounds:.2f} s a seed)")
    claim = {
        "nested mean within 3 SE of chance": abs(nested_mean - CHANCE) <= CLEARLY * nested_se,
        "non-nested best more than 3 SE above chance": best_mean - CHANCE > CLEARLY * best_se,
        "gap more than 3 SE above zero": gap_mean > CLEARLY * gap_se,
    }
    for words, holds in claim.items():
        print(f"{'holds' if holds else 'FAILS'}: {words}")
    return 0 if all(claim.values()) else 1


if __name__ == "__main__":
    sys.exit(main())
