"""Benchmark: `foldwise select` against the same nested cross-validation written in scikit-learn.

The goal it measures: on one worker, foldwise takes at most 1.10x the wall time of scikit-learn
doing the same fits, counting start-up and every store write. Both sides run as whole processes
started by this script, alternated round by round, on the same CSV and the same request; the
benchmark refuses to report a ratio unless both produced the same outer scores and final pick.

Run from the repository root: `.venv/bin/python tests/benchmarks/bench_select.py [--rounds 5]`.
See README.md beside this file for what each figure means.
"""

from __future__ import annotations

import argparse
import importlib
import json
import os
import platform
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

from whole_process import clean_env, foldwise_command
from whole_process import timed as timed_run

TOLERANCE = 1e-9
GOAL = 1.10
# a run that takes longer than this is stuck, not slow
RUN_TIMEOUT_SECONDS = 3600

FAMILIES: list[dict[str, Any]] = [
    {
        "estimator": "LogisticRegression",
        "fixed": {"max_iter": 1000},
        "grid": {"C": [0.01, 0.1, 1, 10]},
    },
    {
        "estimator": "RandomForestClassifier",
        "fixed": {"n_estimators": 50, "n_jobs": 1, "random_state": 0},
        "grid": {"max_depth": [None, 6], "min_samples_leaf": [1, 5, 20]},
    },
]

# The scikit-learn side: a search-CV object inside cross_validate, then the same search on all
# rows, its best estimator pickled. It reads the very job file foldwise reads, so the two cannot
# drift apart; estimators that take a random_state and were given none get 0, as foldwise does.
REFERENCE_SCRIPT = '''\
"""scikit-learn reference: nested CV for the job request in argv[1]; argv: JOB CSV N_JOBS MODEL."""

import inspect
import json
import pickle
import sys

import pandas as pd
from sklearn import ensemble, linear_model
from sklearn.base import clone
from sklearn.compose import ColumnTransformer
from sklearn.impute import SimpleImputer
from sklearn.model_selection import GridSearchCV, StratifiedKFold, cross_validate
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import StandardScaler

ESTIMATORS = {
    "LogisticRegression": linear_model.LogisticRegression,
    "RandomForestClassifier": ensemble.RandomForestClassifier,
}


def candidate_grid(families):
    grid = []
    for family in families:
        cls = ESTIMATORS[family["estimator"]]
        fixed = dict(family.get("fixed") or {})
        if "random_state" in inspect.signature(cls).parameters:
            fixed.setdefault("random_state", 0)
        point = {"model": [cls(**fixed)]}
        point |= {f"model__{k}": v for k, v in (family.get("grid") or {}).items()}
        grid.append(point)
    return grid


def main():
    job_path, csv_path, n_jobs, model_path = sys.argv[1], sys.argv[2], int(sys.argv[3]), sys.argv[4]
    with open(job_path, encoding="utf-8") as handle:
        job = json.load(handle)
    frame = pd.read_csv(csv_path)
    y = frame.pop(job["target"]).to_numpy()
    numeric = Pipeline([("impute", SimpleImputer(strategy="median")), ("scale", StandardScaler())])
    pipeline = Pipeline(
        [
            ("preprocess", ColumnTransformer([("numeric", numeric, list(frame.columns))])),
            ("model", ESTIMATORS[job["families"][0]["estimator"]]()),
        ]
    )
    inner, outer = job["inner"], job["outer"]
    search = GridSearchCV(
        pipeline,
        candidate_grid(job["families"]),
        cv=StratifiedKFold(inner["k"], shuffle=True, random_state=inner["seed"]),
        scoring={m: m for m in job["metrics"]},
        refit=job["pick_by"],
        n_jobs=n_jobs,
    )
    scores = cross_validate(
        search,
        frame,
        y,
        cv=StratifiedKFold(outer["k"], shuffle=True, random_state=outer["seed"]),
        scoring=job["metrics"],
        n_jobs=1,
    )
    final = clone(search).fit(frame, y)
    n_candidates = len(final.cv_results_["params"])
    with open(model_path, "wb") as handle:
        pickle.dump(final.best_estimator_, handle, protocol=5)
    model = final.best_estimator_.named_steps["model"]
    params = {
        k: v
        for k, v in model.get_params().items()
        if v is None or isinstance(v, (bool, int, float, str))
    }
    json.dump(
        {
            "outer": {m: scores[f"test_{m}"].tolist() for m in job["metrics"]},
            "final_pick": {"estimator": type(model).__name__, "params": params},
            "fits": outer["k"] * (n_candidates * inner["k"] + 1) + n_candidates * inner["k"] + 1,
        },
        sys.stdout,
    )
    sys.stdout.write("\\n")


if __name__ == "__main__":
    main()
'''


def build_task(folder: Path, rows: int) -> tuple[Path, Path]:
    """Write the classification table and the job request v1 into `folder`."""
    import pandas as pd
    from sklearn.datasets import make_classification

    X, y = make_classification(n_samples=rows, n_features=20, n_informative=8, random_state=0)
    frame = pd.DataFrame(X, columns=[f"x{i:02d}" for i in range(X.shape[1])])
    frame["target"] = y
    csv = folder / "task.csv"
    frame.to_csv(csv, index=False)
    job = {
        "dataset": {"path": str(csv)},
        "target": "target",
        "features": None,
        "task": "classification",
        "families": FAMILIES,
        "preprocess": "auto",
        "outer": {"method": "stratified_kfold", "k": 5, "repeats": 1, "seed": 2},
        "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
        "metrics": ["accuracy", "roc_auc"],
        "pick_by": "accuracy",
    }
    job_path = folder / "job.json"
    job_path.write_text(json.dumps(job, indent=2), encoding="utf-8")
    return csv, job_path


def _timed(command: list[str], *, env: dict[str, str], cwd: Path) -> tuple[float, str]:
    return timed_run(command, env=env, cwd=cwd, timeout=RUN_TIMEOUT_SECONDS)


def run_foldwise(folder: Path, job: Path, workers: int, tag: str) -> tuple[float, dict[str, Any]]:
    """One whole `foldwise select` process on a fresh home (so it migrates a new store)."""
    home = folder / "homes" / tag
    command = [*foldwise_command(), "select", str(job), "--json", "--workers", str(workers)]
    seconds, out = _timed(command, env=clean_env(home), cwd=folder)
    return seconds, json.loads(out)


def run_reference(
    folder: Path, job: Path, csv: Path, n_jobs: int, tag: str
) -> tuple[float, dict[str, Any]]:
    """One whole scikit-learn reference process."""
    model = folder / "reference_models" / f"{tag}.pkl"
    model.parent.mkdir(parents=True, exist_ok=True)
    command = [sys.executable, str(folder / "reference_select.py"), str(job), str(csv)]
    seconds, out = _timed([*command, str(n_jobs), str(model)], env=clean_env(), cwd=folder)
    return seconds, json.loads(out)


def same_work(result: dict[str, Any], reference: dict[str, Any]) -> list[str]:
    """Differences between foldwise's result and the reference's; empty when the work matches."""
    problems = []
    for metric, values in reference["outer"].items():
        ours = [fold["scores"][metric] for fold in result["outer"]]
        if len(ours) != len(values):
            problems.append(f"{metric}: {len(ours)} outer folds vs {len(values)}")
            continue
        for i, (a, b) in enumerate(zip(ours, values, strict=True)):
            if abs(a - b) >= TOLERANCE:
                problems.append(f"outer fold {i} {metric}: foldwise {a!r} vs scikit-learn {b!r}")
    pick, ref_pick = result["final_pick"], reference["final_pick"]
    if pick["estimator"] != ref_pick["estimator"]:
        problems.append(f"final pick {pick['estimator']} vs {ref_pick['estimator']}")
    else:
        for name, value in pick["params"].items():
            if ref_pick["params"].get(name, "<unset>") != value:
                problems.append(f"final pick {name}: {value!r} vs {ref_pick['params'].get(name)!r}")
    if result["work"]["fits"] != reference["fits"]:
        problems.append(f"fits: foldwise {result['work']['fits']} vs {reference['fits']}")
    return problems


# ---- store writes, measured inside one foldwise run (a separate process: --probe-store) ----


class _Clock:
    """Summed wall seconds and call counts per label."""

    def __init__(self) -> None:
        self.seconds: dict[str, float] = {}
        self.calls: dict[str, int] = {}

    def add(self, label: str, seconds: float) -> None:
        self.seconds[label] = self.seconds.get(label, 0.0) + seconds
        self.calls[label] = self.calls.get(label, 0) + 1

    def wrap(self, module: Any, name: str, label: str | None = None) -> None:
        original = getattr(module, name)

        def timed(*args: Any, **kwargs: Any) -> Any:
            started = time.perf_counter()
            try:
                return original(*args, **kwargs)
            finally:
                self.add(label or name, time.perf_counter() - started)

        setattr(module, name, timed)


def _watch_sql(clock: _Clock, engine: Any) -> Any:
    """Time every statement and every commit/rollback the engine sends to the database."""
    from sqlalchemy import event

    @event.listens_for(engine, "before_cursor_execute")
    def _before(conn: Any, cursor: Any, statement: Any, params: Any, context: Any, many: Any):
        conn.info.setdefault("bench_started", []).append(time.perf_counter())

    @event.listens_for(engine, "after_cursor_execute")
    def _after(conn: Any, cursor: Any, statement: Any, params: Any, context: Any, many: Any):
        clock.add("sql statements", time.perf_counter() - conn.info["bench_started"].pop())

    dialect = engine.dialect
    for name in ("do_commit", "do_rollback"):
        clock.wrap(dialect, name, "sql commit/rollback")
    return engine


def probe_store(job_path: Path) -> dict[str, Any]:
    """Run the job once in this process (one worker) with timers around the store-writing code."""
    started = time.perf_counter()
    # what `foldwise select` imports before it runs anything
    for name in ("service.cli.main", "service.cli.progress", "service.cli.render"):
        importlib.import_module(name)
    import service.jobs.execution.execute as execute
    import service.jobs.execution.run_batch as run_batch
    import service.jobs.local.driver as embedded
    import service.store.db as db
    from service.config import load_settings

    imports = time.perf_counter() - started
    clock = _Clock()
    for module in (embedded, db):
        original = module.make_engine
        module.make_engine = lambda url, _make=original, **kw: _watch_sql(clock, _make(url, **kw))
    clock.wrap(embedded, "upgrade_database", "migrate new store")
    clock.wrap(embedded, "prepare_submission", "prepare (read, hash, validate, plan)")
    clock.wrap(embedded, "create_submission", "create the job")
    # the local driver runs units in batches, as a Celery worker does (service/cv/unit_batches.py)
    clock.wrap(run_batch, "execute_batch", "execute_batch")
    clock.wrap(run_batch, "advance_job", "advance_job")
    clock.wrap(run_batch, "fit_and_score", "fit_and_score")
    clock.wrap(run_batch, "_record", "_record")
    clock.wrap(run_batch, "model_file_of", "model_file_of")
    # the cancellation check asks the store at most once a second from inside fit_and_score
    clock.wrap(execute.StopCheck, "__call__", "_cancel_requested")
    job = json.loads(job_path.read_text(encoding="utf-8"))
    run_started = time.perf_counter()
    outcome = embedded.run_embedded(
        job, settings=load_settings(), workers=1, base_dir=job_path.parent
    )
    total = time.perf_counter() - run_started
    return {
        "imports": imports,
        "run_embedded": total,
        "seconds": clock.seconds,
        "calls": clock.calls,
        "fits": outcome.result["work"]["fits"],
    }


# ---- reporting ----


def _versions() -> dict[str, str]:
    import numpy
    import sklearn

    try:
        nproc = subprocess.run(["nproc"], capture_output=True, text=True).stdout.strip()
    except OSError:
        nproc = "?"
    return {
        "python": platform.python_version(),
        "numpy": numpy.__version__,
        "scikit-learn": sklearn.__version__,
        "nproc": nproc,
        "os.cpu_count": str(os.cpu_count()),
        "platform": platform.platform(),
    }


def _line(label: str, seconds: float) -> None:
    print(f"  {label:<62} {seconds:8.3f} s")


def _print_store(probe: dict[str, Any], fw_median: float) -> None:
    s, calls = probe["seconds"], probe["calls"]

    def get(label: str) -> float:
        return float(s.get(label, 0.0))

    units = get("execute_batch")
    cancel_checks = get("_cancel_requested")
    fitting = get("fit_and_score") - cancel_checks
    unit_overhead = units - get("fit_and_score") - get("_record") - get("model_file_of")
    migrate = get("migrate new store")
    prepare = get("prepare (read, hash, validate, plan)")
    other = probe["run_embedded"] - migrate - prepare - get("create the job") - units
    other -= get("advance_job")
    print("\nWhere one foldwise run spends its time (in-process, 1 worker, one run):")
    _line("imports (cli + embedded, fresh process)", probe["imports"])
    _line("migrate new store (upgrade_database)", migrate)
    _line("prepare_submission (read CSV, hash, validate, plan)", prepare)
    _line("create_submission (dataset copy, folds, units; no commit)", get("create the job"))
    _line("fits and scoring (fit_and_score minus cancel checks)", fitting)
    _line("cancel checks before each fit (_cancel_requested)", cancel_checks)
    _line("_record (fold-score inserts, final pick, model chunks)", get("_record"))
    _line("model_file_of (serialize, sha256, cache file)", get("model_file_of"))
    _line("batch claim/finish/commit (execute_batch - fit - record)", unit_overhead)
    _line("advance_job (fan-in, picks, refit units, result)", get("advance_job"))
    _line("rest of run_embedded (engines, create_job commit, reads)", other)
    _line("run_embedded total", probe["run_embedded"])
    counted = ("execute_batch", "advance_job", "_cancel_requested")
    print("  calls: " + ", ".join(f"{k} {calls.get(k, 0)}" for k in counted))
    _line("SQL: statements (cursor execute, every engine)", get("sql statements"))
    _line("SQL: commits and rollbacks (every engine)", get("sql commit/rollback"))
    brief = get("create the job") + get("_record") + get("advance_job")
    writes = brief + unit_overhead
    store = writes + migrate + cancel_checks
    print("\nstore writes:")
    _line("create_submission + _record + advance_job", brief)
    _line("... + per-batch claim/finish/commit", writes)
    _line("... + migrating the new store + cancel checks (all store work)", store)
    print(f"  {'all store work / median 1-worker foldwise wall time':<62} {store / fw_median:8.1%}")
    _line("foldwise's own time (run_embedded - fits and scoring)", probe["run_embedded"] - fitting)


def _median(values: list[float]) -> float:
    return statistics.median(values) if values else float("nan")


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=5, help="alternated rounds per variant")
    parser.add_argument("--rows", type=int, default=3000, help="rows of the generated table")
    parser.add_argument(
        "--workers", default="1,2", help="comma-separated worker counts (default 1,2)"
    )
    parser.add_argument("--keep", action="store_true", help="keep the temporary folder")
    parser.add_argument("--probe-store", type=Path, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.probe_store:
        json.dump(probe_store(args.probe_store), sys.stdout)
        return 0
    worker_counts = [int(w) for w in args.workers.split(",")]

    folder = Path(tempfile.mkdtemp(prefix="foldwise-bench-"))
    try:
        csv, job = build_task(folder, args.rows)
        (folder / "reference_select.py").write_text(REFERENCE_SCRIPT, encoding="utf-8")
        n_candidates = 4 + 6
        print(f"task: {args.rows} rows x 20 features, {n_candidates} candidates, outer 5 x inner 3")
        print(f"folder: {folder}")
        times: dict[tuple[str, int], list[float]] = {}
        fits: dict[str, int] = {}
        for round_index in range(args.rounds):
            for workers in worker_counts:
                tag = f"w{workers}-r{round_index}"
                # alternate which side goes first, so drift in machine load falls on both
                order = ["foldwise", "scikit-learn"]
                if round_index % 2:
                    order.reverse()
                outputs: dict[str, Any] = {}
                for side in order:
                    if side == "foldwise":
                        seconds, outputs[side] = run_foldwise(folder, job, workers, tag)
                    else:
                        seconds, outputs[side] = run_reference(folder, job, csv, workers, tag)
                    times.setdefault((side, workers), []).append(seconds)
                    print(
                        f"  round {round_index + 1} workers {workers} {side:<12} {seconds:7.2f} s"
                    )
                problems = same_work(outputs["foldwise"], outputs["scikit-learn"])
                if problems:
                    print("foldwise and scikit-learn did not do the same work:", file=sys.stderr)
                    for line in problems:
                        print(f"  {line}", file=sys.stderr)
                    return 1
                fits = {
                    "foldwise": outputs["foldwise"]["work"]["fits"],
                    "scikit-learn": outputs["scikit-learn"]["fits"],
                }

        probe_cmd = [sys.executable, str(Path(__file__).resolve()), "--probe-store", str(job)]
        _, probe_out = _timed(probe_cmd, env=clean_env(folder / "homes" / "probe"), cwd=folder)
        probe = json.loads(probe_out)

        print("\nversions: " + ", ".join(f"{k} {v}" for k, v in _versions().items()))
        print(f"\nmedian wall seconds over {args.rounds} rounds (whole processes):")
        print(
            f"  {'workers':>7} {'foldwise':>10} {'scikit-learn':>13} {'ratio':>7}  per-round ratios"
        )
        for workers in worker_counts:
            ours, theirs = times[("foldwise", workers)], times[("scikit-learn", workers)]
            ratio = _median(ours) / _median(theirs)
            per_round = ", ".join(f"{a / b:.3f}" for a, b in zip(ours, theirs, strict=True))
            print(
                f"  {workers:>7} {_median(ours):>10.2f} {_median(theirs):>13.2f} {ratio:>7.3f}"
                f"  {per_round}"
            )
        one = (
            _median(times[("foldwise", 1)]) / _median(times[("scikit-learn", 1)])
            if 1 in worker_counts
            else None
        )
        if one is not None:
            verdict = "met" if one <= GOAL else "NOT met"
            print(f"  goal: 1-worker ratio of medians <= {GOAL:.2f}: {verdict} ({one:.3f})")
        outer_k, inner_k = 5, 3
        expected = outer_k * (n_candidates * inner_k + 1) + n_candidates * inner_k + 1
        print(
            f"\nfits: foldwise work.fits {fits['foldwise']}, scikit-learn {fits['scikit-learn']}"
            f" (outer_k x (candidates x inner_k + 1) + candidates x inner_k + 1 = {expected})"
        )
        print("outer accuracy and roc_auc per fold and the final pick: identical (|diff| < 1e-9)")
        _print_store(probe, _median(times.get(("foldwise", 1), [float("nan")])))
        return 0
    finally:
        if args.keep:
            print(f"kept {folder}")
        else:
            shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    sys.exit(main())
