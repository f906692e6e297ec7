"""A finished job with a `nested` interval (issue 11) on its report page in a real Chromium.

The page draws the interval as a bracket on the fold strip, names its method in words with its
repetitions and the coverage study's figure, counts the interval's procedure scores apart from
the job's own outer fold scores, and passes axe-core like every other page.
"""

from __future__ import annotations

import copy
import re
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import func, select

from service.cv.intervals import NESTED_COVERAGE, interval_words
from service.cv.scopes import INTERVAL_REPEAT_BASE
from service.store.models import FoldScore, JobCandidate, JobFold

from .conftest import IRIS_JOB
from .live import LiveServer
from .pages import check_page, marks, sign_in, watch_console

# iris (ships with scikit-learn; Fisher 1936): logistic regression over two C values, the iris
# job's 3 outer folds, 2 inner folds, R = 2 repetitions of the interval's partitions
NESTED_JOB: dict[str, Any] = {
    **copy.deepcopy(IRIS_JOB),
    "families": [copy.deepcopy(IRIS_JOB["families"][1])],
    "inner": {"method": "stratified_kfold", "k": 2, "seed": 1},
    "interval": {"method": "nested", "repetitions": 2},
}


@pytest.fixture(scope="module")
def nested_job(server: LiveServer, owner_token: str) -> str:
    """The id of the nested-interval job, submitted over HTTP by team 'owners' and finished."""
    return server.submit_and_wait(owner_token, copy.deepcopy(NESTED_JOB))


def _stored_scores(server: LiveServer, job_id: str, interval: bool) -> int:
    # a plain count over the store's rows: the job's own outer folds, or the interval's
    # procedure folds and their searches' folds (stored with repeats from the base up)
    with server.sessions() as session:
        keys = select(JobCandidate.candidate_key).where(JobCandidate.job_id == job_id)
        own = (JobFold.role == "outer") & (JobFold.repeat < INTERVAL_REPEAT_BASE)
        procedures = ((JobFold.role == "outer") & (JobFold.repeat >= INTERVAL_REPEAT_BASE)) | (
            (JobFold.role == "inner") & (JobFold.parent_repeat >= INTERVAL_REPEAT_BASE)
        )
        return int(
            session.scalar(
                select(func.count())
                .select_from(JobFold)
                .join(FoldScore, FoldScore.fold_fingerprint == JobFold.fingerprint)
                .where(
                    JobFold.job_id == job_id,
                    procedures if interval else own,
                    FoldScore.candidate_key.in_(keys),
                )
            )
            or 0
        )


def test_nested_interval_is_drawn_named_and_passes_axe(
    browser: Any, server: LiveServer, owner_token: str, nested_job: str, output_dir: Path
) -> None:
    result = server.job(owner_token, nested_job)["result"]
    interval = result["estimate"]["accuracy"]["interval"]
    assert interval["method"] == "nested" and interval["repetitions"] == 2
    page = browser.new_page()
    errors = watch_console(page)
    sign_in(page, server.base_url, owner_token, f"/reports/jobs/{nested_job}")

    # named: the method in words, its repetitions and bias-corrected point, the study's figure
    line = page.locator('[data-field="interval"]')
    text = line.inner_text()
    assert interval_words(interval) in text
    assert "nested cross-validation (Bates, Hastie & Tibshirani 2024)" in text
    assert f"2 repetitions, bias-corrected point {interval['point']:.4f}" in text
    assert NESTED_COVERAGE in text
    assert line.locator('[data-field="lower"]').inner_text() == f"{interval['lower']:.4f}"
    assert line.locator('[data-field="upper"]').inner_text() == f"{interval['upper']:.4f}"

    # drawn: one bracket on the strip at the result's bounds, where the strip's own ticks put
    # them, under one dot per outer fold of the job's own (none for the procedures)
    drawn = marks(page, "interval")
    assert len(drawn) == 1
    assert float(drawn[0]["lower"]) == interval["lower"]
    assert float(drawn[0]["upper"]) == interval["upper"]
    assert len(marks(page, "outer-score")) == len(result["outer"]) == 3
    geometry = page.eval_on_selector(
        'svg:has([data-kind="interval"])',
        """s => ({d: s.querySelector('[data-kind="interval"]').getAttribute('d'),
                  title: s.querySelector('[data-kind="interval"] title').textContent,
                  ticks: Array.from(s.querySelectorAll('[data-kind="x-tick"]'))
                              .map(e => [+e.dataset.value, +e.getAttribute('x')])})""",
    )
    assert geometry["title"].startswith(interval_words(interval))
    (v0, p0), (v1, p1) = geometry["ticks"][0], geometry["ticks"][-1]
    at = [float(n) for n in re.findall(r"[MH]([\d.]+)", geometry["d"])]
    for value, pixel in zip((interval["lower"], interval["upper"]), at, strict=True):
        assert abs(p0 + (value - v0) / (v1 - v0) * (p1 - p0) - pixel) <= 0.2

    # the outer count is the job's own outer folds; the procedures' scores are counted apart
    meta = page.locator("p.meta").inner_text()
    own = _stored_scores(server, nested_job, interval=False)
    procedures = _stored_scores(server, nested_job, interval=True)
    assert f" {own} outer fold scores" in meta
    assert f"(and {procedures} for the nested interval's procedures)" in meta
    assert procedures > own > 0

    check_page(page, "job-nested-interval", output_dir)
    assert errors == []
