"""`foldwise select` on a valid small job: result v1 on stdout, a summary, the store's rows."""

from __future__ import annotations

import json
import math
import shutil
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Any

import pytest

from .runner import DATA_NAME, N_ROWS, Outcome, base_request, run_foldwise, store_count, store_jobs

# README.md, "Result v1"
RESULT_V1_KEYS = {
    "dataset_hash",
    "task",
    "n_rows",
    "metrics",
    "pick_by",
    "outer",
    "estimate",
    "final_pick",
    "pick_frequency",
    "optimism_gap",
    "work",
    "versions",
    "cautions",
}
RUNS = {
    "json": ("select", "job.json", "--json"),
    "json_two_workers": ("select", "job.json", "--json", "--workers", "2"),
    "summary": ("select", "job.json"),
}


def n_candidates(request: dict[str, Any]) -> int:
    """Grid points summed over families (the base request has no ranges and no duplicates)."""
    return sum(math.prod(len(v) for v in f.get("grid", {}).values()) for f in request["families"])


@pytest.fixture(scope="module")
def request_v1() -> dict[str, Any]:
    return base_request()


@pytest.fixture(scope="module")
def runs(
    tmp_path_factory: pytest.TempPathFactory, shared_csv: Path, request_v1: dict[str, Any]
) -> dict[str, Outcome]:
    """The valid job run three ways, each in its own directory and fresh store, side by side."""
    folders = {}
    for name in RUNS:
        folder = tmp_path_factory.mktemp(name)
        shutil.copy(shared_csv, folder / DATA_NAME)  # the request names it relative to the cwd
        (folder / "job.json").write_text(json.dumps(request_v1), encoding="utf-8")
        folders[name] = folder
    with ThreadPoolExecutor(len(RUNS)) as pool:
        futures = {
            name: pool.submit(run_foldwise, *argv, cwd=folders[name]) for name, argv in RUNS.items()
        }
        return {name: future.result() for name, future in futures.items()}


@pytest.fixture(scope="module")
def result(runs: dict[str, Outcome]) -> dict[str, Any]:
    out = runs["json"]
    assert out.code == 0, out.stderr
    parsed: dict[str, Any] = json.loads(out.stdout)
    return parsed


def test_json_prints_result_v1_alone_on_stdout(runs: dict[str, Outcome]) -> None:
    out = runs["json"]
    assert out.code == 0, out.stderr
    # json.loads refuses anything before or after the document, so nothing else is on stdout
    result = json.loads(out.stdout)
    assert set(result) >= RESULT_V1_KEYS, RESULT_V1_KEYS - set(result)
    assert out.stdout.count("\n") == 1


def test_no_progress_bar_when_stderr_is_not_a_terminal(runs: dict[str, Outcome]) -> None:
    for name in RUNS:
        err = runs[name].stderr
        assert "elapsed" not in err, name
        assert "\r" not in err and "\x1b[" not in err, name
        assert "Traceback" not in err, name


def test_result_describes_the_request(result: dict[str, Any], request_v1: dict[str, Any]) -> None:
    outer_k = request_v1["outer"]["k"]
    pick_by = request_v1["pick_by"]
    assert result["task"] == "classification"
    assert result["n_rows"] == N_ROWS
    assert result["metrics"] == request_v1["metrics"]
    assert result["pick_by"] == pick_by
    assert len(result["dataset_hash"]) == 64
    assert [(f["repeat"], f["fold"]) for f in result["outer"]] == [(0, i) for i in range(outer_k)]
    assert sum(f["n_test"] for f in result["outer"]) == N_ROWS
    for metric in request_v1["metrics"]:
        per_fold = [f["scores"][metric] for f in result["outer"]]
        assert result["estimate"][metric]["values"] == per_fold
    assert sum(p["count"] for p in result["pick_frequency"]) == outer_k
    # README.md, "Result v1": the final pick's inner mean minus the outer mean, for pick_by
    gap = result["final_pick"]["inner_mean"] - result["estimate"][pick_by]["mean"]
    assert result["optimism_gap"] == pytest.approx(gap)
    assert {"foldwise", "scikit-learn", "numpy", "python"} <= set(result["versions"])
    assert result["cautions"] and all(isinstance(c, str) and c for c in result["cautions"])


def test_work_counts_follow_from_the_plan(
    result: dict[str, Any], request_v1: dict[str, Any]
) -> None:
    outer_k, inner_k = request_v1["outer"]["k"], request_v1["inner"]["k"]
    candidates = n_candidates(request_v1)
    scopes = outer_k + 1  # each outer training part, plus all rows for the final pick
    work = result["work"]
    # one inner unit per (scope, candidate), one refit per outer fold, one final refit
    assert work["units_total"] == scopes * candidates + outer_k + 1
    assert work["units_computed"] == work["units_total"] and work["units_reused"] == 0
    assert work["fits"] == scopes * candidates * inner_k + outer_k + 1


def test_summary_is_readable(runs: dict[str, Outcome]) -> None:
    out = runs["summary"]
    assert out.code == 0, out.stderr
    assert "Optimism gap" in out.stdout
    assert "Cautions" in out.stdout
    assert "Halving search" not in out.stdout  # a full-grid job's summary has no such line
    assert "Traceback" not in out.stdout + out.stderr
    with pytest.raises(json.JSONDecodeError):
        json.loads(out.stdout)


def test_two_workers_give_the_same_outer_scores(runs: dict[str, Outcome]) -> None:
    one, two = (runs[name] for name in ("json", "json_two_workers"))
    assert one.code == 0 and two.code == 0, one.stderr + two.stderr
    a, b = json.loads(one.stdout), json.loads(two.stdout)
    # same plan, same seeds: the pool must not change a single fold's score or pick
    assert [f["scores"] for f in a["outer"]] == [f["scores"] for f in b["outer"]]
    assert [f["pick"] for f in a["outer"]] == [f["pick"] for f in b["outer"]]
    assert a["final_pick"]["candidate_key"] == b["final_pick"]["candidate_key"]


def test_store_holds_the_job_and_every_fold_score(
    runs: dict[str, Outcome], request_v1: dict[str, Any]
) -> None:
    out = runs["json"]
    assert out.code == 0, out.stderr
    jobs = store_jobs(out.home)
    assert [status for _, status in jobs] == ["succeeded"]
    outer_k, inner_k = request_v1["outer"]["k"], request_v1["inner"]["k"]
    c = n_candidates(request_v1)
    m = len(request_v1["metrics"])
    # Inner units score every candidate on the inner folds of each outer training part
    # (outer_k * inner_k folds) and of all rows (inner_k folds, for the final pick), with every
    # metric: m * c * (outer_k * inner_k + inner_k). Each outer fold's pick is then refit on
    # the outer training part and scored on the outer test part: m * outer_k. The final refit
    # on all rows has no test part, so no score.
    expected = m * c * (outer_k * inner_k + inner_k) + m * outer_k
    assert store_count(out.home, "fold_score") == expected
    assert store_count(out.home, "fold_score", "job_id = ?", (jobs[0][0],)) == expected


def test_summary_prints_each_interval_with_its_method(
    runs: dict[str, Outcome], result: dict[str, Any]
) -> None:
    out = runs["summary"]
    assert out.code == 0, out.stderr
    for metric, estimate in result["estimate"].items():
        interval = estimate["interval"]
        # issue 11: the default interval is quick at level 0.9, beside every estimate
        assert (interval["method"], interval["level"]) == ("quick", 0.9)
        assert interval["lower"] <= estimate["mean"] <= interval["upper"]
        line = (
            f"  {metric}: 90% interval [{interval['lower']:.4f}, {interval['upper']:.4f}], "
            "method quick: corrected resampled t (Nadeau & Bengio 2003; Bouckaert & Frank 2004)."
        )
        assert line in out.stdout.splitlines(), out.stdout
