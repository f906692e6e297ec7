"""Coverage study: how often each interval method covers the handed-over model's true error.

Issue 11. For each setting (task x rows) the script draws `--tables` tables from one fixed,
known distribution, runs the real engine in this process (service.cv: plan, nested run, result,
intervals), and takes as the truth the score of the model foldwise hands over (the final pick
refit on all rows) on `--fresh` new rows of the same distribution. It prints, per method, the
share of tables whose interval held the truth with its Monte-Carlo standard error
sqrt(c(1 - c)/T), the mean width, and the fits used relative to the plain job.

The distributions: a population of 200,000 rows drawn once with scikit-learn's
`make_classification(n_features=10, n_informative=4, flip_y=0.05, random_state=0)` or
`make_regression(n_features=10, n_informative=5, noise=20, random_state=0)`; every table and every
fresh sample is drawn from that population at random (i.i.d. from a known, fixed distribution).

Methods:
- quick: the engine's interval (corrected resampled t over the outer fold scores; Nadeau & Bengio
  2003, Bouckaert & Frank 2004), exactly as result v1 carries it;
- fold mean +- z*se: the band the issue measured (mean of the outer fold scores +- 1.645 * their
  standard error at level 0.9), printed as the naive baseline;
- nested (Bates, Hastie & Tibshirani 2024, Algorithm 1) with `--nested R` repetitions: the
  in-process reference driver (service/cv/nested_interval_run.py, which the service's stored
  work units equal to 1e-12: tests/engine/test_nested_interval_units.py), the job's whole search,
  pick and refit as the procedure; its fits are R * K * K selections on top of the plain job's.
  Off unless asked for (`--nested R`). With it come three diagnostic rows (indented) that take
  the same nested interval apart, to show where its width comes from: the unclipped standard error
  (the paper's MSE estimate alone), no bias correction (centred on Err_NCV), and the naive
  standard error; and a line per setting saying which bound of the clip [naive, sqrt(K) naive]
  set the standard error in how many tables.

Search spaces (`--space`): `small`, three candidates (the settings the README quotes), or
`large`, nine: the issue's logistic regression C x 5 and k-nearest neighbours k x 4 (Ridge alpha x
5 and k-nearest neighbours for regression).

Run from the repository root. `--quick` is a smoke run (10 tables, n = 100, 5,000 fresh rows,
about a minute); the full study is n = 100, 300 and 1,000 and both spaces, hours on two shared
cores, so run the cells you need:
`.venv/bin/python tests/benchmarks/bench_coverage.py [--quick] [--tables 40] [--rows 100,300,1000]
[--space small|large] [--nested R]`
"""

from __future__ import annotations

import argparse
import math
import time
from dataclasses import dataclass, field
from functools import cache

import numpy as np
import pandas as pd
from scipy import stats
from sklearn.datasets import make_classification, make_regression
from sklearn.metrics import get_scorer
from threadpoolctl import threadpool_limits

from service.cv.intervals import attach_intervals
from service.cv.nested import run_nested
from service.cv.nested_interval_run import ScoreInterval, run_nested_interval
from service.cv.nested_interval_units import ROW_LOSSES
from service.cv.plan import build_plan
from service.cv.spec import SelectionSpec

POPULATION = 200_000
FOLDS = 5  # outer and inner K of every job in the study

FAMILIES = {
    # small search spaces: three candidates each
    "classification": [
        {
            "estimator": "LogisticRegression",
            "fixed": {"max_iter": 1000},
            "grid": {"C": [0.01, 0.1, 1]},
        }
    ],
    "regression": [{"estimator": "Ridge", "grid": {"alpha": [0.1, 10.0, 1000.0]}}],
}
LARGE_FAMILIES = {
    # the nine-candidate search, and its regression counterpart
    "classification": [
        {
            "estimator": "LogisticRegression",
            "fixed": {"max_iter": 1000},
            "grid": {"C": [0.01, 0.1, 1, 10, 100]},
        },
        {"estimator": "KNeighborsClassifier", "grid": {"n_neighbors": [1, 5, 15, 45]}},
    ],
    "regression": [
        {"estimator": "Ridge", "grid": {"alpha": [0.1, 1.0, 10.0, 100.0, 1000.0]}},
        {"estimator": "KNeighborsRegressor", "grid": {"n_neighbors": [1, 5, 15, 45]}},
    ],
}
SPACES = {"small": FAMILIES, "large": LARGE_FAMILIES}
METRIC = {"classification": "accuracy", "regression": "neg_mean_squared_error"}


@cache
def population(task: str) -> tuple[np.ndarray, np.ndarray]:
    """The fixed distribution, as a large population drawn once."""
    if task == "classification":
        X, y = make_classification(
            n_samples=POPULATION, n_features=10, n_informative=4, flip_y=0.05, random_state=0
        )
        return X, y
    X, y = make_regression(
        n_samples=POPULATION, n_features=10, n_informative=5, noise=20.0, random_state=0
    )
    return X, y


def frame_of(X: np.ndarray, y: np.ndarray) -> pd.DataFrame:
    """The rows as the engine takes a table: named feature columns and `target`."""
    frame = pd.DataFrame(X, columns=[f"x{i}" for i in range(X.shape[1])])
    frame["target"] = y
    return frame


def spec_for(
    task: str, level: float, seed: int, outer_repeats: int, space: str = "small"
) -> SelectionSpec:
    """The job: the search space, outer 5-fold (seeded, optionally repeated), inner 5-fold."""
    method = "stratified_kfold" if task == "classification" else "kfold"
    return SelectionSpec.model_validate(
        {
            "target": "target",
            "task": task,
            "families": SPACES[space][task],
            "outer": {"method": method, "k": FOLDS, "repeats": outer_repeats, "seed": seed},
            "inner": {"method": method, "k": FOLDS, "seed": seed + 1},
            "metrics": [METRIC[task]],
            "interval": {"level": level},
        }
    )


@dataclass
class Tally:
    """One method's record over the tables of a setting."""

    covered: list[bool] = field(default_factory=list)
    widths: list[float] = field(default_factory=list)
    fits: list[float] = field(default_factory=list)  # relative to the plain job

    point_errors: list[float] = field(default_factory=list)  # its own point minus truth

    def add(
        self,
        lower: float,
        upper: float,
        truth: float,
        fits: float = 1.0,
        point: float | None = None,
    ) -> None:
        self.covered.append(lower <= truth <= upper)
        self.widths.append(upper - lower)
        self.fits.append(fits)
        if point is not None:
            self.point_errors.append(point - truth)


@dataclass
class Setting:
    """The tallies and the estimate's error for one task and size."""

    methods: dict[str, Tally] = field(default_factory=dict)
    errors: list[float] = field(default_factory=list)  # estimate minus truth
    fits: list[int] = field(default_factory=list)
    seconds: float = 0.0
    clips: list[str] = field(default_factory=list)  # which clip bound set the nested SE
    se_ratios: list[float] = field(default_factory=list)  # unclipped SE / naive SE


def one_table(task: str, n: int, table: int, args: argparse.Namespace, into: Setting) -> None:
    """Draw a table, run the engine, score the handed-over model on fresh rows, tally."""
    X, y = population(task)
    rng = np.random.default_rng([n, table, 0 if task == "classification" else 1])
    rows = rng.choice(POPULATION, size=n + args.fresh, replace=False)
    train, fresh = rows[:n], rows[n:]
    frame = frame_of(X[train], y[train])
    spec = spec_for(
        task, args.level, seed=table, outer_repeats=args.outer_repeats, space=args.space
    )
    kinds = {column: "numeric" for column in frame.columns}
    plan = build_plan(spec, frame, kinds)
    outcome = run_nested(plan)
    result = outcome.result
    cautions = attach_intervals(spec, result)
    metric = METRIC[task]
    estimate = result["estimate"][metric]
    fresh_frame = frame_of(X[fresh], y[fresh]).drop(columns="target")
    truth = float(get_scorer(metric)(outcome.model, fresh_frame, y[fresh]))
    into.errors.append(estimate["mean"] - truth)
    into.fits.append(outcome.fits)
    interval = estimate["interval"]
    if interval is None:  # a flat fold record: counted as not covering, and said
        print(f"  table {table}: no quick interval ({' '.join(cautions)})")
        into.methods.setdefault("quick", Tally()).add(math.inf, -math.inf, truth)
    else:
        into.methods.setdefault("quick", Tally()).add(interval["lower"], interval["upper"], truth)
    z = float(stats.norm.ppf(0.5 + args.level / 2))
    half = z * estimate["se"]
    into.methods.setdefault("fold mean +- z*se", Tally()).add(
        estimate["mean"] - half, estimate["mean"] + half, truth
    )
    if args.nested:
        nested = run_nested_interval(plan, args.nested, seed=1000 * table)
        # its fits come on top of the plain job's (it does not reuse the job's outer folds)
        relative = (outcome.fits + nested.fits) / outcome.fits
        into.methods.setdefault(f"nested R={args.nested}", Tally()).add(
            nested.lower, nested.upper, truth, relative, point=nested.point
        )
        _diagnose_nested(nested, truth, z, into)


def _diagnose_nested(nested: ScoreInterval, truth: float, z: float, into: Setting) -> None:
    """Where the nested interval's width comes from: its clipping and its bias correction.

    The same point and standard error taken apart: the interval with the unclipped standard error
    (the paper's MSE estimate alone), and the interval without the bias correction (centred on
    Err_NCV); plus which bound of the clip [naive, sqrt(K) naive] decided the standard error.
    """
    loss = nested.loss
    _, sign, offset = ROW_LOSSES[nested.metric]

    def add(name: str, centre: float, se: float) -> None:
        ends = sorted((sign * (centre - z * se) + offset, sign * (centre + z * se) + offset))
        point = sign * centre + offset
        into.methods.setdefault(name, Tally()).add(ends[0], ends[1], truth, point=point)

    add("  nested, SE unclipped", loss.point, loss.se_unclipped)
    add("  nested, no bias correction", loss.err_ncv, loss.se)
    add("  nested, naive SE", loss.point, loss.se_naive)
    ceiling = math.sqrt(FOLDS) * loss.se_naive
    into.clips.append(
        "naive"
        if loss.se_unclipped < loss.se_naive
        else "sqrt(K) naive"
        if loss.se_unclipped > ceiling
        else "unclipped"
    )
    into.se_ratios.append(loss.se_unclipped / loss.se_naive if loss.se_naive > 0 else math.nan)


def report(task: str, n: int, setting: Setting, args: argparse.Namespace) -> list[str]:
    """Lines of the table for one setting."""
    lines = []
    for name, tally in setting.methods.items():
        errors = np.asarray(tally.point_errors or setting.errors)
        bias = f"{errors.mean():+.4f} +- {errors.std(ddof=1) / math.sqrt(len(errors)):.4f}"
        count = len(tally.covered)
        share = float(np.mean(tally.covered))
        mc_se = math.sqrt(share * (1 - share) / count)
        finite = [w for w in tally.widths if math.isfinite(w)]
        lines.append(
            f"| {task} | {n} | {name} | {share:.3f} +- {mc_se:.3f} | "
            f"{np.mean(finite):.4f} | {np.mean(tally.fits):.2f} | {bias} | {count} |"
        )
    return lines


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--tables", type=int, default=40)
    parser.add_argument("--rows", default="100,300,1000", help="table sizes, comma-separated")
    parser.add_argument("--space", choices=sorted(SPACES), default="small")
    parser.add_argument("--quick", action="store_true", help="10 tables, n = 100, 5,000 fresh")
    parser.add_argument("--tasks", default="classification,regression")
    parser.add_argument("--level", type=float, default=0.9)
    parser.add_argument("--fresh", type=int, default=20_000, help="fresh rows for the truth")
    parser.add_argument("--outer-repeats", type=int, default=1)
    parser.add_argument("--nested", type=int, default=0, help="repetitions R (0: not run)")
    args = parser.parse_args()
    if args.quick:
        args.tables, args.rows, args.fresh = 10, "100", 5_000
    sizes = [int(v) for v in args.rows.split(",")]
    candidates = sum(
        len(next(iter(f.get("grid", {"": [0]}).values())))
        for f in SPACES[args.space]["classification"]
    )
    header = [
        f"Coverage at level {args.level}: {args.tables} tables per setting, outer 5-fold x "
        f"{args.outer_repeats} repeat(s), inner 5-fold, {candidates} candidates ({args.space} "
        f"space); truth = handed-over model "
        f"on {args.fresh} fresh rows. Coverage +- Monte-Carlo SE; fits relative to the plain job.",
        "",
        "| task | n | method | coverage | mean width | fits / plain | point - truth | tables |",
        "|---|---|---|---|---|---|---|---|",
    ]
    lines: list[str] = []
    clip_lines: list[str] = []
    started = time.perf_counter()
    with threadpool_limits(1):
        for task in args.tasks.split(","):
            for n in sizes:
                setting = Setting()
                began = time.perf_counter()
                for table in range(args.tables):
                    one_table(task, n, table, args, setting)
                setting.seconds = time.perf_counter() - began
                lines += report(task, n, setting, args)
                if setting.clips:
                    counts = {c: setting.clips.count(c) for c in sorted(set(setting.clips))}
                    clip_lines.append(
                        f"{task} n={n}: nested SE set by {counts}; unclipped SE / naive SE "
                        f"median {np.nanmedian(setting.se_ratios):.2f} "
                        f"(quartiles {np.nanpercentile(setting.se_ratios, 25):.2f}, "
                        f"{np.nanpercentile(setting.se_ratios, 75):.2f})"
                    )
                print(
                    f"done {task} n={n}: {setting.seconds:.0f} s, "
                    f"{int(np.median(setting.fits))} fits per table",
                    flush=True,
                )
    print("\n".join(header + lines))
    if clip_lines:
        print("\n" + "\n".join(clip_lines))
    note = "" if args.nested else "; nested (Bates et al. 2024) not run (--nested R)"
    print(f"\nwall {time.perf_counter() - started:.0f} s{note}")


if __name__ == "__main__":
    main()
