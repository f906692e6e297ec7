"""`foldwise select` of a learning-curve file, run as the real console script."""

from __future__ import annotations

import json
from pathlib import Path

from cli.runner import run_foldwise, store_jobs, write_job

from .requests import SIZES, curve


def test_select_prints_the_curve_and_its_json(tmp_path: Path) -> None:
    body = curve(sizes=[0.25, 1.0])
    job = write_job(tmp_path, body)
    shown = run_foldwise("select", str(job), cwd=tmp_path)
    assert shown.code == 0, shown.stderr
    assert "Learning curve" in shown.stdout and "1 - accuracy" in shown.stdout
    assert "25%" in shown.stdout and "100%" in shown.stdout
    as_json = run_foldwise("select", str(job), "--json", cwd=tmp_path)
    assert as_json.code == 0, as_json.stderr
    result = json.loads(as_json.stdout)
    assert [p["size"] for p in result["points"]] == [0.25, 1.0]
    # one curve of two sizes, all succeeded: the same request again was answered by the stored
    # curve (its parent job), without a fit and without new jobs
    assert "answered by job" in as_json.stderr
    assert sorted(s for _, s in store_jobs(tmp_path / "home")) == ["succeeded"] * 3


def test_bad_sizes_exit_2_with_one_sentence_and_store_nothing(tmp_path: Path) -> None:
    job = write_job(tmp_path, curve(sizes=[*SIZES, 1.0]))
    refused = run_foldwise("select", str(job), cwd=tmp_path)
    assert refused.code == 2
    assert refused.stderr.strip() == "error: sizes: a size is listed twice; list each once."
    assert store_jobs(tmp_path / "home") == []
