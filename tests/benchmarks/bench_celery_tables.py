"""Benchmark: three jobs on the Celery path, one and two workers, against scikit-learn.

Issue 12's tables, each run by scikit-learn as a whole process (a search-CV object inside
`cross_validate`, then the search on all rows; n_jobs 1 and 2) and by foldwise on real
`foldwise worker` processes (Redis, PostgreSQL; 1 and 2 workers, already running), alternated
round by round in the same run:

- **mixed**: the invented 420-row table of bench_engine_shared.py (two categorical columns and
  six numeric ones, gaps in four), 8 candidates (logistic regression x 4, random forest x 2,
  SVC x 2), outer 5 x inner 3, accuracy and roc_auc;
- **task**: bench_select.py's table (make_classification, 3,000 rows by default) and its 10
  candidates, outer 5 x inner 3;
- **tiny**: bench_fixed_costs.py's job on iris (ships with scikit-learn), 28 fits.

foldwise's wall runs from submission to the job's `succeeded` row; scikit-learn's includes its
interpreter start-up (about a second). A ratio is printed only if both sides gave the same outer
scores (to 1e-9). Printed: medians per side, foldwise 1 worker / scikit-learn n_jobs 1 (goal
<= 1.05, < 1.0 on mixed) and foldwise 2 workers / scikit-learn's best of n_jobs 1 and 2 (goal
<= 0.85). The machine is shared and noisy: read the medians.

From the repository root: `.venv/bin/python tests/benchmarks/bench_celery_tables.py
[--rounds 3] [--tables mixed,task,tiny] [--rows 3000]`.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import sys
import tempfile
from pathlib import Path
from typing import Any

REPO = Path(__file__).resolve().parents[2]
sys.path[:0] = [str(REPO), str(Path(__file__).resolve().parent)]

import bench_engine_shared  # noqa: E402  (the mixed table)
import bench_fixed_costs  # noqa: E402  (the tiny job)
import bench_select  # noqa: E402  (the 3,000-row task)
from bench_service import run_distributed  # noqa: E402
from whole_process import timed  # noqa: E402

TOLERANCE = 1e-9
GOAL_ONE, GOAL_ONE_MIXED, GOAL_TWO = 1.05, 1.0, 0.85

# One reference for the three jobs: numeric columns imputed by the median and scaled, text
# columns imputed by the most frequent value and one-hot encoded (foldwise's "auto"), the
# families' grids in one GridSearchCV, random_state 0 where a class takes one and was given none.
REFERENCE_SCRIPT = '''\
"""scikit-learn reference; argv: JOB CSV N_JOBS."""

import inspect
import json
import sys

import pandas as pd
from sklearn import ensemble, linear_model, svm
from sklearn.base import clone
from sklearn.compose import ColumnTransformer
from sklearn.impute import SimpleImputer
from sklearn.model_selection import GridSearchCV, StratifiedKFold, cross_validate
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import OneHotEncoder, StandardScaler

ESTIMATORS = {
    "LogisticRegression": linear_model.LogisticRegression,
    "RandomForestClassifier": ensemble.RandomForestClassifier,
    "SVC": svm.SVC,
}

job = json.load(open(sys.argv[1], encoding="utf-8"))
frame = pd.read_csv(sys.argv[2])
n_jobs = int(sys.argv[3])
y = frame.pop(job["target"]).to_numpy()
numbers = [c for c in frame.columns if pd.api.types.is_numeric_dtype(frame[c])]
text = [c for c in frame.columns if c not in numbers]
frame[text] = frame[text].astype(object)
parts = [("numeric", Pipeline([("impute", SimpleImputer(strategy="median")),
                               ("scale", StandardScaler())]), numbers)]
if text:
    parts.append(("categorical", Pipeline([
        ("impute", SimpleImputer(strategy="most_frequent")),
        ("encode", OneHotEncoder(handle_unknown="ignore", sparse_output=False)),
    ]), text))
grid = []
for family in job["families"]:
    cls = ESTIMATORS[family["estimator"]]
    fixed = dict(family.get("fixed") or {})
    if "random_state" in inspect.signature(cls).parameters:
        fixed.setdefault("random_state", 0)
    grid.append({"model": [cls(**fixed)],
                 **{f"model__{k}": v for k, v in (family.get("grid") or {}).items()}})
pipeline = Pipeline([("preprocess", ColumnTransformer(parts)), ("model", grid[0]["model"][0])])
inner, outer = job["inner"], job["outer"]
search = GridSearchCV(
    pipeline, grid, n_jobs=n_jobs, refit=job["pick_by"],
    cv=StratifiedKFold(inner["k"], shuffle=True, random_state=inner["seed"]),
    scoring={m: m for m in job["metrics"]},
)
scores = cross_validate(
    search, frame, y, scoring=job["metrics"], n_jobs=1,
    cv=StratifiedKFold(outer["k"], shuffle=True, random_state=outer["seed"]),
)
clone(search).fit(frame, y)
json.dump({"outer": {m: scores[f"test_{m}"].tolist() for m in job["metrics"]}}, sys.stdout)
'''


def _mixed(folder: Path) -> tuple[Path, dict[str, Any]]:
    csv = folder / "mixed.csv"
    bench_engine_shared.invented_table().to_csv(csv, index=False)
    return csv, {
        "dataset": {"path": str(csv)},
        "preprocess": "auto",
        **bench_engine_shared.request(),
    }


def _task(folder: Path, rows: int) -> tuple[Path, dict[str, Any]]:
    sub = folder / "task"
    sub.mkdir(exist_ok=True)
    csv, job_path = bench_select.build_task(sub, rows)
    return csv, json.loads(job_path.read_text(encoding="utf-8"))


def _tiny(folder: Path) -> tuple[Path, dict[str, Any]]:
    sub = folder / "tiny"
    sub.mkdir(exist_ok=True)
    csv, job_path = bench_fixed_costs.build_task(sub)
    return csv, json.loads(job_path.read_text(encoding="utf-8"))


def _reference(folder: Path, job: dict[str, Any], csv: Path, n_jobs: int) -> tuple[float, Any]:
    job_path = csv.with_suffix(".job.json")
    job_path.write_text(json.dumps(job), encoding="utf-8")
    command = [sys.executable, str(folder / "reference.py"), str(job_path), str(csv), str(n_jobs)]
    seconds, out = timed(command, env=dict(os.environ), cwd=folder, timeout=900)
    return seconds, json.loads(out)


def _differences(result: dict[str, Any], reference: dict[str, Any]) -> list[str]:
    problems = []
    for metric, values in reference["outer"].items():
        ours = [fold["scores"][metric] for fold in result["outer"]]
        if len(ours) != len(values) or any(
            abs(a - b) > TOLERANCE for a, b in zip(ours, values, strict=True)
        ):
            problems.append(f"{metric}: foldwise {ours} vs scikit-learn {values}")
    return problems


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=3)
    parser.add_argument("--tables", default="mixed,task,tiny")
    parser.add_argument("--rows", type=int, default=3000)
    args = parser.parse_args()
    folder = Path(tempfile.mkdtemp(prefix="foldwise-bench-celery-"))
    (folder / "reference.py").write_text(REFERENCE_SCRIPT, encoding="utf-8")
    builders = {
        "mixed": lambda: _mixed(folder),
        "task": lambda: _task(folder, args.rows),
        "tiny": lambda: _tiny(folder),
    }
    summary = []
    for table in args.tables.split(","):
        csv, job = builders[table]()
        walls: dict[str, list[float]] = {"sk1": [], "sk2": [], "fw1": [], "fw2": []}
        references: list[Any] = []
        results: list[Any] = []
        for round_ in range(args.rounds):
            order = ["sk1", "sk2", "fw1", "fw2"]
            for side in order if round_ % 2 == 0 else list(reversed(order)):
                n = int(side[-1])
                if side.startswith("sk"):
                    seconds, reference = _reference(folder, job, csv, n)
                    walls[side].append(seconds)
                    references.append(reference)
                else:
                    ours = run_distributed(folder, job, n, f"{table}-{side}-r{round_}x")
                    walls[side].append(ours["wall"])
                    results.append(ours["result"])
            print(
                f"{table} round {round_ + 1}: "
                + ", ".join(f"{side} {values[-1]:.2f}s" for side, values in walls.items()),
                file=sys.stderr,
                flush=True,
            )
        problems = [p for r in results for ref in references for p in _differences(r, ref)]
        if problems:
            print(f"{table}: not the same work:\n  " + "\n  ".join(problems[:4]))
            return 1
        med = {side: statistics.median(values) for side, values in walls.items()}
        one = med["fw1"] / med["sk1"]
        best = min(med["sk1"], med["sk2"])
        two = med["fw2"] / best
        goal_one = GOAL_ONE_MIXED if table == "mixed" else GOAL_ONE
        summary.append(
            f"  {table:<6} scikit-learn n_jobs=1 {med['sk1']:6.2f}s, n_jobs=2 {med['sk2']:6.2f}s; "
            f"foldwise 1 worker {med['fw1']:6.2f}s, 2 workers {med['fw2']:6.2f}s\n"
            f"         1 worker / sk n_jobs=1: {one:.3f} (goal <= {goal_one}); "
            f"2 workers / sk best: {two:.3f} (goal <= {GOAL_TWO})"
        )
    print(f"\nCelery path against scikit-learn, medians of {args.rounds} rounds:")
    print("\n".join(summary))
    return 0


if __name__ == "__main__":
    sys.exit(main())
