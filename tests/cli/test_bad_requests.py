"""Bad input to `foldwise select`: exit 2, one sentence naming the field, nothing stored.

Each case is one mutation of the valid base request (or of the job file, the data file or the
command line). The catalogue runs the command in this process (a subprocess costs a second or two
of imports per case); one case of each kind also runs as the real console script, several at a
time. Every case has its own working directory and store.
"""

from __future__ import annotations

import os
import re
import shutil
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from datetime import date, timedelta
from pathlib import Path
from typing import Any

import pytest

from .runner import (
    DATA_NAME,
    N_ROWS,
    Outcome,
    base_request,
    run_foldwise,
    run_foldwise_in_process,
    store_jobs,
    table_csv,
    write_job,
)

Mutation = Callable[[dict[str, Any]], None]


@dataclass(frozen=True)
class Case:
    """One bad input and the field its refusal must name."""

    id: str
    field: str
    mutate: Mutation | None = None
    contains: tuple[str, ...] = ()
    files: dict[str, bytes | str] = field(default_factory=dict)
    # the job file as raw text instead of the mutated request (for files that are not JSON)
    job_text: str | None = None
    argv: tuple[str, ...] = ("select", "job.json")


def family(**changes: Any) -> Mutation:
    """Replace keys of the first family."""

    def mutate(request: dict[str, Any]) -> None:
        request["families"][0].update(changes)

    return mutate


def top(**changes: Any) -> Mutation:
    """Replace top-level keys."""

    def mutate(request: dict[str, Any]) -> None:
        request.update(changes)

    return mutate


def split(which: str, drop: tuple[str, ...] = (), **changes: Any) -> Mutation:
    """Change the outer or inner split plan."""

    def mutate(request: dict[str, Any]) -> None:
        request[which].update(changes)
        for key in drop:
            request[which].pop(key, None)

    return mutate


def dataset_file(name: str) -> Mutation:
    return top(dataset={"path": name})


# 6 grid keys with 20 values each: 20**6 = 64,000,000 candidates, refused before expansion
def with_column(name: str, values: list[str]) -> str:
    """The shared table with one more column (a date written as text, a weight, ...)."""
    lines = table_csv().splitlines()
    rows = [f"{line},{value}" for line, value in zip(lines[1:], values, strict=True)]
    return "\n".join([f"{lines[0]},{name}", *rows]) + "\n"


# one day per row from 2023-12-10, written month first: a New Year falls inside
US_DATES = [(date(2023, 12, 10) + timedelta(days=i)).strftime("%m/%d/%Y") for i in range(N_ROWS)]
NEGATIVE_WEIGHTS = ["-1"] + ["1"] * (N_ROWS - 1)
MISSING_WEIGHTS = [""] * 2 + ["1"] * (N_ROWS - 2)
ONLY_LOGISTIC = [{"estimator": "LogisticRegression", "fixed": {"max_iter": 500}}]
TIME_OUTER = {"method": "time_series", "k": 3, "order_by": "when"}


def using(csv_name: str, **changes: Any) -> Mutation:
    """Point the request at another CSV of the case's files and change top-level keys."""
    return top(dataset={"path": csv_name}, **changes)


HUGE_GRID = {
    name: [i + 1 for i in range(20)]
    for name in ("C", "tol", "max_iter", "intercept_scaling", "l1_ratio", "verbose")
}

CASES = [
    Case(
        "unknown-estimator",
        "families[0].estimator",
        family(estimator="LogisticRegresion"),
        contains=("LogisticRegression",),
    ),
    Case("dotted-sklearn-name", "families[0].estimator", family(estimator="sklearn.svm.SVC")),
    Case("dotted-os-system", "families[0].estimator", family(estimator="os.system")),
    Case(
        "estimator-for-other-task",
        "families[0].estimator",
        family(estimator="Ridge", fixed={}, grid={"alpha": [1.0]}),
        contains=("regression",),
    ),
    Case("unknown-hyperparameter", "families[0].grid.Cee", family(grid={"Cee": [1.0]})),
    # halving runs as work units now: a first round larger than a search is refused up front
    Case(
        "halving-min-rows-beyond-the-search",
        "search.min_rows",
        top(search={"strategy": "halving", "min_rows": 10 * N_ROWS}),
        contains=("lower min_rows",),
    ),
    Case("wrongly-typed-hyperparameter", "families[0].grid.C", family(grid={"C": ["big"]})),
    Case("out-of-range-hyperparameter", "families[0].grid.C", family(grid={"C": [-1]})),
    Case("grid-value-not-a-list", "families[0].grid.C", family(grid={"C": 1.0})),
    Case(
        "range-low-not-below-high",
        "families[0].ranges.C.high",
        family(grid={}, ranges={"C": {"low": 2.0, "high": 1.0}}, draws=2),
    ),
    Case(
        "ranges-without-draws",
        "families[0].draws",
        family(grid={}, ranges={"C": {"low": 0.1, "high": 1.0}}),
    ),
    Case("k-of-one", "outer.k", split("outer", k=1)),
    Case(
        "k-above-row-count",
        "outer.k",
        split("outer", method="kfold", k=N_ROWS + 1),
        contains=(str(N_ROWS),),
    ),
    # 24 rows per label: k=30 is below the row count but above the largest class
    Case(
        "stratified-k-above-largest-class",
        "outer.k",
        split("outer", k=30),
        contains=("largest class",),
    ),
    Case("missing-target-column", "target", top(target="outcome"), contains=("outcome",)),
    Case(
        "constant-target",
        "target",
        dataset_file("constant.csv"),
        files={"constant.csv": "x1,label\n" + "".join(f"{i},1\n" for i in range(12))},
    ),
    Case(
        "partly-missing-target",
        "target",
        dataset_file("gaps.csv"),
        contains=("missing",),
        files={
            "gaps.csv": "x1,label\n"
            + "".join(f"{i},{'' if i % 5 == 0 else i % 2}\n" for i in range(20))
        },
    ),
    Case(
        "header-only-csv",
        "dataset.path",
        dataset_file("header.csv"),
        files={"header.csv": "x1,x2,label\n"},
    ),
    Case(
        "binary-junk-csv",
        "dataset.path",
        dataset_file("junk.csv"),
        files={"junk.csv": bytes(range(256)) * 8},
    ),
    Case("missing-data-file", "dataset.path", dataset_file("absent.csv")),
    Case("job-file-not-json", "job.json", job_text="{families: [LogisticRegression]"),
    Case("job-file-missing", "nowhere.json", argv=("select", "nowhere.json")),
    Case("unknown-metric", "metrics[1]", top(metrics=["accuracy", "acuracy"])),
    Case("regression-metric-on-classification", "metrics[1]", top(metrics=["accuracy", "r2"])),
    Case("pick-by-not-among-metrics", "pick_by", top(pick_by="f1_macro")),
    Case("unknown-split-method", "outer.method", split("outer", method="shuffle_split")),
    Case("group-kfold-without-groups", "outer.groups", split("outer", method="group_kfold", k=2)),
    Case(
        "astronomical-search-space",
        "families",
        top(families=[{"estimator": "LogisticRegression", "grid": HUGE_GRID}]),
        contains=("64,000,000",),
    ),
    Case("repeats-without-seed", "outer.seed", split("outer", drop=("seed",), repeats=2)),
    Case("unknown-top-level-field", "priority", top(priority="high")),
    Case("feature-not-a-column", "features[1]", top(features=["x1", "x9"]), contains=("x9",)),
    Case("target-also-a-feature", "features[1]", top(features=["x1", "label"])),
    Case("zero-workers", "--workers", argv=("select", "job.json", "--workers", "0")),
    Case(
        "preprocess-none-with-categorical",
        "preprocess",
        top(preprocess="none"),
        contains=("colour",),
    ),
    Case(
        "roc-auc-on-three-classes",
        "metrics[1]",
        top(target="grade", metrics=["accuracy", "roc_auc"]),
        contains=("roc_auc_ovr",),
    ),
    # Beyond the first catalogue: values that pass scikit-learn's constraints but are not JSON
    # (a store key is the candidate's canonical JSON), and seeds numpy cannot take.
    # non-finite numbers are refused before anything reads them, naming the exact place
    Case("infinite-hyperparameter", "families[0].grid.C[0]", family(grid={"C": [float("inf")]})),
    Case(
        "minus-infinity-fixed-value",
        "families[0].fixed.tol",
        family(fixed={"max_iter": 500, "tol": float("-inf")}),
        contains=("-Infinity",),
    ),
    Case(
        "nan-inside-dict-hyperparameter",
        "families[1].fixed.metric_params.p",
        lambda r: r["families"][1].update(fixed={"metric_params": {"p": float("nan")}}),
    ),
    Case("seed-too-large", "outer.seed", split("outer", seed=2**33)),
    # column types, time order, recipes and weights
    Case("unknown-column-kind", "columns.x1.kind", top(columns={"x1": {"kind": "text"}})),
    Case(
        "unknown-date-format",
        "columns.when.format",
        using("dated.csv", columns={"when": {"kind": "datetime", "format": "%m/%Q/%Y"}}),
        contains=("%Q",),
        files={"dated.csv": with_column("when", US_DATES)},
    ),
    Case(
        "date-format-that-does-not-match",
        "columns.when.format",
        using("dated.csv", columns={"when": {"kind": "datetime", "format": "%Y-%m-%d"}}),
        files={"dated.csv": with_column("when", US_DATES)},
    ),
    Case(
        "month-first-dates-ordering-time-without-format",
        "outer.order_by",
        using("dated.csv", outer=TIME_OUTER),
        contains=("'when'", "format"),
        files={"dated.csv": with_column("when", US_DATES)},
    ),
    Case(
        "gap-leaving-no-training-rows",
        "outer.gap",
        using(
            "dated.csv",
            outer={**TIME_OUTER, "gap": 40},
            columns={"when": {"kind": "datetime", "format": "%m/%d/%Y"}},
        ),
        contains=("no training rows",),
        files={"dated.csv": with_column("when", US_DATES)},
    ),
    Case("gap-on-a-shuffled-split", "outer.gap", split("outer", gap=2)),
    Case(
        "recipe-step-on-a-missing-column",
        "preprocess.groups[0].columns[0]",
        top(preprocess={"groups": [{"columns": ["x9"], "treat_as": "categorical"}]}),
        contains=("x9",),
    ),
    Case(
        "recipe-value-outside-scikit-learn-constraints",
        "preprocess.select.k",
        top(preprocess={"select": {"method": "k_best", "k": -3}}),
    ),
    Case(
        "unknown-recipe-imputation",
        "preprocess.numeric.impute",
        top(preprocess={"numeric": {"impute": "average"}}),
    ),
    Case(
        "negative-weights",
        "weights",
        using("weighted.csv", weights="w", families=ONLY_LOGISTIC),
        contains=("negative",),
        files={"weighted.csv": with_column("w", NEGATIVE_WEIGHTS)},
    ),
    Case(
        "missing-weights",
        "weights",
        using("weighted.csv", weights="w", families=ONLY_LOGISTIC),
        contains=("missing",),
        files={"weighted.csv": with_column("w", MISSING_WEIGHTS)},
    ),
    Case(
        "weights-for-a-family-without-sample-weight",
        "families[1].estimator",
        using("weighted.csv", weights="w"),
        contains=("KNeighborsClassifier",),
        files={"weighted.csv": with_column("w", ["1"] * N_ROWS)},
    ),
    # bounds on what drives work: refused from the numbers alone, before any fold is built
    Case(
        "a-million-repeats",
        "outer.repeats",
        split("outer", repeats=1_000_000),
        contains=("100", "1000000"),
    ),
    Case("k-past-the-cap", "outer.k", split("outer", k=5_000), contains=("1000",)),
    # 10 x 100 outer folds x (2 inner folds x 102 candidates + 1) + (2 x 102 + 1) = 205,205
    Case(
        "job-past-the-fits-cap",
        "outer.repeats",
        lambda r: (
            r["outer"].update(k=10, repeats=100),
            r["families"][0]["grid"].update(C=[0.01 * (i + 1) for i in range(100)]),
        ),
        contains=("205,205 fits", "at most 200,000", "reduce outer.repeats"),
    ),
    Case("target-name-too-long", "target", top(target="t" * 5_000), contains=("1000",)),
    # interval (issue 11): refused from the request alone, before any fit
    Case("interval-level-too-high", "interval.level", top(interval={"level": 0.9995}), ("0.999",)),
    Case("interval-level-at-one-half", "interval.level", top(interval={"level": 0.5})),
    Case(
        "interval-unknown-method",
        "interval.method",
        top(interval={"method": "bootstrap"}),
        contains=("'quick'", "'nested'"),
    ),
    Case(
        "interval-one-repetition",
        "interval.repetitions",
        top(interval={"method": "nested", "repetitions": 1}),
        contains=("2 to 100",),
    ),
    Case(
        "interval-repetitions-past-the-cap",
        "interval.repetitions",
        top(interval={"method": "nested", "repetitions": 101}),
        contains=("2 to 100",),
    ),
    Case(
        "interval-repetitions-on-quick",
        "interval.repetitions",
        top(interval={"repetitions": 5}),
        contains=("outer.repeats",),
    ),
    Case(
        "interval-nested-on-a-grouped-split",
        "interval.method",
        lambda r: (
            r.update(interval={"method": "nested"}),
            r["outer"].update(method="group_kfold", groups="grade"),
        ),
        contains=("group_kfold",),
    ),
    Case(
        "interval-nested-with-two-outer-folds",
        "interval.method",
        lambda r: (r.update(interval={"method": "nested"}), r["outer"].update(k=2)),
        contains=("outer.k", "'quick'"),
    ),
    Case(
        "interval-nested-on-a-learning-curve",
        "interval.method",
        top(kind="learning_curve", sizes=[0.5, 1.0], interval={"method": "nested"}),
        contains=("learning curve", "'quick'"),
    ),
    # 100 repetitions x 3 x 3 procedures x (2 inner folds x 301 candidates + 1) = 542,700 fits
    Case(
        "interval-nested-past-the-fits-cap",
        "interval.repetitions",
        lambda r: (
            r.update(interval={"method": "nested", "repetitions": 100}),
            r["families"][0]["grid"].update(C=[0.01 * (i + 1) for i in range(299)]),
        ),
        contains=("at most 200,000", "interval.repetitions"),
    ),
]
CASE_IDS = [c.id for c in CASES]
assert len(set(CASE_IDS)) == len(CASE_IDS), "case ids must be unique"


def _prepare(case: Case, folder: Path, shared_csv: Path) -> None:
    shutil.copy(shared_csv, folder / DATA_NAME)
    for name, content in case.files.items():
        target = folder / name
        if isinstance(content, bytes):
            target.write_bytes(content)
        else:
            target.write_text(content, encoding="utf-8")
    if case.job_text is not None:
        (folder / "job.json").write_text(case.job_text, encoding="utf-8")
        return
    request = base_request()
    if case.mutate is not None:
        case.mutate(request)
    write_job(folder, request)


# One case of each way in (the request, a data file, the job file, an option, the bounds) also
# runs as the real console script, so the exit code and streams are proven end to end; the whole
# catalogue runs in this process, where a case costs milliseconds instead of seconds of imports.
SUBPROCESS_CASES = [
    c
    for c in CASES
    if c.id
    in {
        "unknown-estimator",
        "binary-junk-csv",
        "job-file-not-json",
        "zero-workers",
        "job-past-the-fits-cap",
    }
]


def _run(case: Case, folder: Path) -> Outcome:
    return run_foldwise(*case.argv, cwd=folder, home=folder / "home")


def _selected(request: pytest.FixtureRequest, test_name: str) -> set[str]:
    """Ids of the cases of `test_name` this session runs."""
    return {
        item.callspec.params["case"].id
        for item in request.session.items
        if getattr(item, "originalname", "") == test_name and hasattr(item, "callspec")
    }


@pytest.fixture(scope="module")
def outcomes(
    request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory, shared_csv: Path
) -> dict[str, Outcome]:
    """Run every selected case of the catalogue in this process; case id -> outcome."""
    selected = _selected(request, "test_bad_request_is_refused")
    found = {}
    for case in CASES:
        if case.id in selected:
            folder = tmp_path_factory.mktemp(case.id)
            _prepare(case, folder, shared_csv)
            env = {"FOLDWISE_HOME": str(folder / "home")}
            found[case.id] = run_foldwise_in_process(*case.argv, cwd=folder, env=env)
    return found


@pytest.fixture(scope="module")
def script_outcomes(
    request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory, shared_csv: Path
) -> dict[str, Outcome]:
    """Run the selected subprocess cases as the console script, several at once."""
    selected = _selected(request, "test_bad_request_is_refused_by_the_console_script")
    todo = []
    for case in SUBPROCESS_CASES:
        if case.id in selected:
            folder = tmp_path_factory.mktemp(f"script-{case.id}")
            _prepare(case, folder, shared_csv)
            todo.append((case, folder))
    # imports dominate each run, so one more process than cores keeps the cores busy
    workers = min(6, (os.cpu_count() or 1) + 1)
    with ThreadPoolExecutor(workers) as pool:
        futures = {case.id: pool.submit(_run, case, folder) for case, folder in todo}
        return {case_id: future.result() for case_id, future in futures.items()}


def _check_refusal(case: Case, out: Outcome) -> None:
    assert "Traceback" not in out.stdout + out.stderr, out.stderr
    assert out.code == 2, f"exit {out.code}; stderr: {out.stderr}"
    assert out.stdout == ""
    # exactly one line, ending in a newline, "error: <field>: <sentence>"
    assert out.stderr.endswith("\n") and out.stderr.count("\n") == 1, out.stderr
    line = out.stderr.rstrip("\n")
    prefix = f"error: {case.field}: "
    assert line.startswith(prefix), f"expected field {case.field!r} in: {line}"
    sentence = line.removeprefix(prefix)
    # one sentence: closed by a full stop (or a question), no second sentence inside it
    assert sentence.endswith((".", "?")), sentence
    assert re.search(r"[.?!]\s+[A-Z]", sentence) is None, f"more than one sentence: {sentence}"
    for part in case.contains:
        assert part in sentence, f"{part!r} not in: {sentence}"
    # nothing stored as succeeded; in fact no job row at all, since refusal precedes the store
    jobs = store_jobs(out.home)
    assert [status for _, status in jobs if status == "succeeded"] == []
    assert jobs == []


@pytest.mark.parametrize("case", CASES, ids=CASE_IDS)
def test_bad_request_is_refused(case: Case, outcomes: dict[str, Outcome]) -> None:
    _check_refusal(case, outcomes[case.id])


@pytest.mark.parametrize("case", SUBPROCESS_CASES, ids=[c.id for c in SUBPROCESS_CASES])
def test_bad_request_is_refused_by_the_console_script(
    case: Case, script_outcomes: dict[str, Outcome]
) -> None:
    _check_refusal(case, script_outcomes[case.id])
