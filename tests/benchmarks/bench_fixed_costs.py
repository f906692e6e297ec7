"""Benchmark: foldwise's fixed costs, against scikit-learn doing the same small job as a process.

Issue 12, item 1: a job answered entirely from the store under 1.5 s wall from the command line,
and a tiny job (iris, 28 fits) within 0.5 s of scikit-learn doing the same fits as a whole
process. Every figure is a whole process started by this script; the sides are alternated round
by round and medians are printed, with the ratios and differences measured in the same run.

- `foldwise --help`;
- `foldwise select job.json --json` on a fresh store (first run: migrate, read, hash, 28 fits);
- a standalone script doing the same fits with scikit-learn (GridSearchCV inside
  cross_validate, then the search on all rows);
- `foldwise select` on the same job again, same store: answered by the first run's job (same
  request, table bytes, code and libraries) without planning or fitting;
- `foldwise select --rerun` on it: a new job whose every unit is answered from the store.

Run from the repository root: `.venv/bin/python tests/benchmarks/bench_fixed_costs.py [--rounds 5]`.
Exit code 0 after a report (goals met or not: the figures say), 1 if the two sides did not do the
same work or a process failed.
"""

from __future__ import annotations

import argparse
import json
import shutil
import statistics
import sys
import tempfile
from pathlib import Path
from typing import Any

from whole_process import clean_env, foldwise_command
from whole_process import timed as timed_run

TOLERANCE = 1e-9
STORE_GOAL_SECONDS = 1.5
TINY_GOAL_SECONDS = 0.5
RUN_TIMEOUT_SECONDS = 600
# 2 candidates; outer 3 x (2 x inner 3 + 1 refit) + 2 x 3 + 1 final = 28 fits
JOB: dict[str, Any] = {
    "target": "target",
    "features": None,
    "task": "classification",
    "families": [
        {"estimator": "LogisticRegression", "fixed": {"max_iter": 1000}, "grid": {"C": [0.1, 1]}}
    ],
    "preprocess": "auto",
    "outer": {"method": "stratified_kfold", "k": 3, "repeats": 1, "seed": 2},
    "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
    "metrics": ["accuracy"],
    "pick_by": "accuracy",
}

# The scikit-learn side, written beside the job: the same table, folds, candidates and
# preprocessing (median imputation then standard scaling, as foldwise's "auto" on numbers).
REFERENCE_SCRIPT = '''\
"""scikit-learn reference: nested CV for the job request in argv[1] on the CSV in argv[2]."""

import json
import sys

import pandas as pd
from sklearn.base import clone
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression
from sklearn.model_selection import GridSearchCV, StratifiedKFold, cross_validate
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import StandardScaler


def main():
    with open(sys.argv[1], encoding="utf-8") as handle:
        job = json.load(handle)
    frame = pd.read_csv(sys.argv[2])
    y = frame.pop(job["target"]).to_numpy()
    family = job["families"][0]
    pipeline = Pipeline(
        [
            ("impute", SimpleImputer(strategy="median")),
            ("scale", StandardScaler()),
            ("model", LogisticRegression(**family["fixed"])),
        ]
    )
    inner, outer = job["inner"], job["outer"]
    search = GridSearchCV(
        pipeline,
        {f"model__{k}": v for k, v in family["grid"].items()},
        cv=StratifiedKFold(inner["k"], shuffle=True, random_state=inner["seed"]),
        scoring=job["pick_by"],
    )
    scores = cross_validate(
        search,
        frame,
        y,
        cv=StratifiedKFold(outer["k"], shuffle=True, random_state=outer["seed"]),
        scoring=job["metrics"],
    )
    final = clone(search).fit(frame, y)
    n_candidates = len(final.cv_results_["params"])
    json.dump(
        {
            "outer": {m: scores[f"test_{m}"].tolist() for m in job["metrics"]},
            "final_C": final.best_params_["model__C"],
            "fits": outer["k"] * (n_candidates * inner["k"] + 1) + n_candidates * inner["k"] + 1,
        },
        sys.stdout,
    )
    sys.stdout.write("\\n")


if __name__ == "__main__":
    main()
'''


def build_task(folder: Path) -> tuple[Path, Path]:
    """Iris (ships with scikit-learn) as task.csv, and the job request v1 reading it."""
    from sklearn.datasets import load_iris

    csv = folder / "task.csv"
    load_iris(as_frame=True).frame.to_csv(csv, index=False)
    job_path = folder / "job.json"
    job_path.write_text(json.dumps({"dataset": {"path": str(csv)}, **JOB}), encoding="utf-8")
    (folder / "reference.py").write_text(REFERENCE_SCRIPT, encoding="utf-8")
    return csv, job_path


def _timed(command: list[str], *, env: dict[str, str], cwd: Path) -> tuple[float, str]:
    return timed_run(command, env=env, cwd=cwd, timeout=RUN_TIMEOUT_SECONDS)


def same_work(result: dict[str, Any], reference: dict[str, Any]) -> list[str]:
    """Differences between foldwise's result and the reference's; empty when the work matches."""
    problems = []
    for metric, values in reference["outer"].items():
        ours = [fold["scores"][metric] for fold in result["outer"]]
        if len(ours) != len(values) or any(
            abs(a - b) >= TOLERANCE for a, b in zip(ours, values, strict=False)
        ):
            problems.append(f"outer {metric}: foldwise {ours} vs scikit-learn {values}")
    if result["final_pick"]["params"].get("C") != reference["final_C"]:
        problems.append(f"final C {result['final_pick']['params']} vs {reference['final_C']}")
    if result["work"]["fits"] != reference["fits"]:
        problems.append(f"fits: foldwise {result['work']['fits']} vs {reference['fits']}")
    return problems


def one_round(folder: Path, csv: Path, job: Path, index: int) -> dict[str, float]:
    """Every measurement once; the first run and the reference swap order on odd rounds."""
    home = folder / "homes" / f"r{index}"
    select = [*foldwise_command(), "select", str(job), "--json"]
    seconds: dict[str, float] = {}
    outputs: dict[str, Any] = {}
    seconds["help"], _ = _timed([*foldwise_command(), "--help"], env=clean_env(home), cwd=folder)
    order = ["first", "reference"] if index % 2 == 0 else ["reference", "first"]
    for side in order:
        if side == "first":
            seconds[side], out = _timed(select, env=clean_env(home), cwd=folder)
        else:
            command = [sys.executable, str(folder / "reference.py"), str(job), str(csv)]
            seconds[side], out = _timed(command, env=clean_env(), cwd=folder)
        outputs[side] = json.loads(out)
    seconds["stored"], out = _timed(select, env=clean_env(home), cwd=folder)
    outputs["stored"] = json.loads(out)
    seconds["rerun"], out = _timed([*select, "--rerun"], env=clean_env(home), cwd=folder)
    outputs["rerun"] = json.loads(out)
    problems = same_work(outputs["first"], outputs["reference"])
    if outputs["stored"] != outputs["first"]:
        problems.append("the repeated request was not answered by the first run's job")
    if outputs["rerun"]["outer"] != outputs["first"]["outer"]:
        problems.append("the rerun, every unit from the store, differs from the first run")
    if outputs["rerun"]["work"]["units_computed"] != 0:
        problems.append(f"the rerun computed units: {outputs['rerun']['work']}")
    if problems:
        sys.exit("foldwise and scikit-learn did not do the same work:\n  " + "\n  ".join(problems))
    return seconds


def report(times: dict[str, list[float]], rounds: int) -> None:
    """Medians, the ratio and difference against scikit-learn, and the goals."""
    med = {k: statistics.median(v) for k, v in times.items()}
    print(f"\nmedian wall seconds over {rounds} rounds (whole processes):")
    labels = {
        "help": "foldwise --help",
        "first": "foldwise select, fresh store (28 fits)",
        "reference": "scikit-learn, same fits (standalone script)",
        "stored": "foldwise select again, answered by the stored job",
        "rerun": "foldwise select --rerun, a new job, every unit reused",
    }
    for key, label in labels.items():
        rounds_text = ", ".join(f"{s:.2f}" for s in times[key])
        print(f"  {label:<50} {med[key]:7.3f} s   ({rounds_text})")
    diff = med["first"] - med["reference"]
    print(f"  {'first run / scikit-learn':<50} {med['first'] / med['reference']:7.3f}")
    tiny_ok = "met" if diff <= TINY_GOAL_SECONDS else "NOT met"
    print(f"  {'first run - scikit-learn':<50} {diff:+7.3f} s   goal <= +0.5 s: {tiny_ok}")
    print(f"  {'stored run / scikit-learn':<50} {med['stored'] / med['reference']:7.3f}")
    store_ok = "met" if med["stored"] < STORE_GOAL_SECONDS else "NOT met"
    print(f"  {'stored run':<50} {med['stored']:7.3f} s   goal < 1.5 s: {store_ok}")
    print(
        f"  {'rerun (new job from stored units) / scikit-learn':<50} "
        f"{med['rerun'] / med['reference']:7.3f}"
    )


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=5, help="alternated rounds")
    parser.add_argument("--keep", action="store_true", help="keep the temporary folder")
    args = parser.parse_args()
    folder = Path(tempfile.mkdtemp(prefix="foldwise-fixed-"))
    try:
        csv, job = build_task(folder)
        print(f"iris, 2 candidates, outer 3 x inner 3, 28 fits; folder {folder}")
        times: dict[str, list[float]] = {}
        for index in range(args.rounds):
            measured = one_round(folder, csv, job, index)
            for key, seconds in measured.items():
                times.setdefault(key, []).append(seconds)
            print(
                f"  round {index + 1}: " + ", ".join(f"{k} {v:.2f} s" for k, v in measured.items())
            )
        report(times, args.rounds)
    finally:
        if not args.keep:
            shutil.rmtree(folder, ignore_errors=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
