"""The job report in a real headless Chromium: its charts against the store and scikit-learn."""

from __future__ import annotations

import copy
import re
import uuid
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from sklearn.datasets import load_iris
from sklearn.model_selection import GridSearchCV, StratifiedKFold
from sklearn.neighbors import KNeighborsClassifier
from sqlalchemy import func, select

from service.cv.intervals import QUICK_COVERAGE
from service.store.models import FoldScore, Job, JobCandidate, JobFold

from .conftest import KNN_GRID
from .live import LiveServer
from .pages import marks, sign_in, watch_console


def _stored_inner_scores(server: LiveServer, job_id: str, metric: str) -> int:
    # a plain count over the store's rows, independent of the page's GROUP BY
    with server.sessions() as session:
        folds = select(JobFold.fingerprint).where(
            JobFold.job_id == job_id, JobFold.role.in_(("inner", "final_inner"))
        )
        keys = select(JobCandidate.candidate_key).where(JobCandidate.job_id == job_id)
        return int(
            session.scalar(
                select(func.count())
                .select_from(FoldScore)
                .where(
                    FoldScore.fold_fingerprint.in_(folds),
                    FoldScore.candidate_key.in_(keys),
                    FoldScore.metric == metric,
                )
            )
            or 0
        )


def _store_counts(server: LiveServer, job_id: str) -> tuple[int, int]:
    with server.sessions() as session:
        outer = session.scalar(
            select(func.count()).where(JobFold.job_id == job_id, JobFold.role == "outer")
        )
        candidates = session.scalar(
            select(func.count()).select_from(JobCandidate).where(JobCandidate.job_id == job_id)
        )
    return int(outer or 0), int(candidates or 0)


@pytest.fixture
def job_page(browser: Any, server: LiveServer, owner_token: str, iris_job: str) -> Any:
    """A signed-in page on the iris job's report, with its console errors collected."""
    page = browser.new_page()
    page.errors = watch_console(page)
    sign_in(page, server.base_url, owner_token, f"/reports/jobs/{iris_job}")
    assert page.url.endswith(f"/reports/jobs/{iris_job}")
    return page


def test_job_page_marks_match_the_store(
    job_page: Any, server: LiveServer, owner_token: str, iris_job: str, output_dir: Path
) -> None:
    """One dot per outer fold, one bar per candidate, curve points that hold every inner score."""
    outer, candidates = _store_counts(server, iris_job)
    assert outer == 3 and candidates == 12
    assert len(marks(job_page, "outer-score")) == outer
    # a bar for each candidate some outer fold picked, most picked first, one line for the rest
    result = server.job(owner_token, iris_job)["result"]
    counts = [row["count"] for row in result["pick_frequency"] if row["count"]]
    picked = sorted(counts, reverse=True)
    bars = marks(job_page, "pick-count")
    assert [int(b["count"]) for b in bars] == picked
    assert sum(int(b["count"]) for b in bars) == outer  # every outer fold picked exactly one
    never = marks(job_page, "never-picked")
    assert [int(n["count"]) for n in never] == [candidates - len(picked)]
    line = job_page.locator('[data-kind="never-picked"]').text_content()
    assert line == f"{candidates - len(picked)} others never picked"
    # Each curve pools one family's inner scores by one hyperparameter's value, so every stored
    # inner score of pick_by falls in exactly one point of each of that family's curves.
    stored = _stored_inner_scores(server, iris_job, "accuracy")
    points = job_page.eval_on_selector_all(
        "figure svg",
        """svgs => svgs.map(s => Array.from(s.querySelectorAll('[data-kind="inner-mean"]'))
                                    .reduce((n, e) => n + Number(e.dataset.n), 0))""",
    )
    curve_sums = [n for n in points if n]
    assert len(curve_sums) == 3  # n_neighbors and weights of KNN, C of logistic regression
    knn_share = 10 / 12  # 10 of the 12 candidates are KNN, each scored on the same inner folds
    assert curve_sums[0] == curve_sums[1] == round(stored * knn_share)
    assert curve_sums[2] == stored - curve_sums[0]
    cells = marks(job_page, "heat-cell")
    assert len(cells) == len(KNN_GRID["n_neighbors"]) * len(KNN_GRID["weights"])
    assert job_page.errors == []
    job_page.screenshot(path=str(output_dir / "job-page-wide.png"), full_page=True)


def test_heat_map_prints_its_values_and_a_legend(job_page: Any) -> None:
    """Each cell's value to three figures inside it, and a colour bar from lowest to highest."""
    cells = marks(job_page, "heat-cell")
    shown = job_page.eval_on_selector_all(
        '[data-kind="heat-value"]', "els => els.map(e => e.textContent)"
    )
    assert sorted(shown) == sorted(f"{float(c['value']):.3g}" for c in cells)
    assert job_page.locator('[data-kind="heat-legend"]').count() == 1
    legend = job_page.eval_on_selector_all(
        '[data-kind="heat-legend-value"]', "els => els.map(e => e.textContent)"
    )
    values = [float(c["value"]) for c in cells]
    assert legend[0] == f"{min(values):.3g}" and legend[-1] == f"{max(values):.3g}"


def test_score_axes_stay_within_the_metric_and_cover_the_points(job_page: Any) -> None:
    """Accuracy ticks are round, never above 1 or below 0, and span every drawn point."""
    strip = job_page.eval_on_selector(
        'svg:has([data-kind="outer-score"])',
        """s => ({ticks: Array.from(s.querySelectorAll('[data-kind="x-tick"]'))
                            .map(e => +e.dataset.value),
                  dots: Array.from(s.querySelectorAll('[data-kind="outer-score"]')).length})""",
    )
    assert strip["dots"] == 3 and min(strip["ticks"]) >= 0.0 and max(strip["ticks"]) <= 1.0
    per_chart = job_page.eval_on_selector_all(
        "figure svg",
        """svgs => svgs.map(s => ({
            ticks: Array.from(s.querySelectorAll('[data-kind="y-tick"]'))
                        .map(e => +e.dataset.value),
            points: Array.from(s.querySelectorAll('[data-kind="inner-mean"]'))
                         .map(e => +e.dataset.value)}))""",
    )
    drawn = [c for c in per_chart if c["points"]]
    assert len(drawn) == 3
    for chart in drawn:
        assert min(chart["ticks"]) >= 0.0 and max(chart["ticks"]) <= 1.0
        assert min(chart["ticks"]) <= min(chart["points"])
        assert max(chart["ticks"]) >= max(chart["points"])
        assert all(len(f"{t:g}".replace("0.", "").lstrip("0")) <= 4 for t in chart["ticks"])


def test_heat_map_equals_scikit_learn_grid_search(job_page: Any) -> None:
    """The final search's cells equal GridSearchCV's mean_test_score on the same inner splits."""
    cells = marks(job_page, "heat-cell")
    # Reference: scikit-learn's own search on all rows, with the inner split plan of the request
    # (StratifiedKFold(3, shuffle=True, random_state=1)) and no preprocessing, as requested.
    X, y = load_iris(return_X_y=True, as_frame=True)
    search = GridSearchCV(
        KNeighborsClassifier(),
        KNN_GRID,
        cv=StratifiedKFold(3, shuffle=True, random_state=1),
        scoring="accuracy",
    ).fit(X, y)
    expected = sorted(search.cv_results_["mean_test_score"].tolist())
    assert np.allclose(sorted(float(c["value"]) for c in cells), expected, rtol=0, atol=1e-12)


def test_estimate_optimism_gap_and_cautions_are_shown(
    job_page: Any, server: LiveServer, owner_token: str, iris_job: str
) -> None:
    """The nested estimate, the non-nested score beside it, their gap, every caution verbatim."""
    result = server.job(owner_token, iris_job)["result"]
    text = job_page.inner_text("main")
    assert f"{result['estimate']['accuracy']['mean']:.4f}" in text
    assert f"{result['final_pick']['inner_mean']:.4f}" in text
    assert f"{result['optimism_gap']:+.4f}" in text
    for caution in result["cautions"]:
        assert caution in text
    assert "Before this model decides about people" not in text  # iris has no such column


def test_interval_is_drawn_named_and_equal_to_the_result(
    job_page: Any, server: LiveServer, owner_token: str, iris_job: str
) -> None:
    """The quick interval's bounds as in result v1, its method in words, a bracket on the strip.

    The bracket's ends must sit where the strip's own x ticks put those values (linear axis).
    """
    interval = server.job(owner_token, iris_job)["result"]["estimate"]["accuracy"]["interval"]
    assert interval["method"] == "quick" and interval["level"] == 0.9
    line = job_page.locator('[data-field="interval"]')
    assert line.locator('[data-field="lower"]').inner_text() == f"{interval['lower']:.4f}"
    assert line.locator('[data-field="upper"]').inner_text() == f"{interval['upper']:.4f}"
    text = line.inner_text()
    assert "90% interval, corrected resampled t — no extra fits" in text
    assert QUICK_COVERAGE in text
    cells = job_page.eval_on_selector_all(
        '[data-field="interval-cell"]', "els => els.map(e => e.textContent)"
    )
    assert cells[0] == f"{interval['lower']:.4f} to {interval['upper']:.4f} (90%)"
    caption = job_page.locator("caption").first.inner_text()
    assert "descriptive, not a confidence interval" in caption
    drawn = marks(job_page, "interval")
    assert len(drawn) == 1
    assert float(drawn[0]["lower"]) == interval["lower"]
    assert float(drawn[0]["upper"]) == interval["upper"]
    geometry = job_page.eval_on_selector(
        'svg:has([data-kind="interval"])',
        """s => ({d: s.querySelector('[data-kind="interval"]').getAttribute('d'),
                  stroke: s.querySelector('[data-kind="interval"]').getAttribute('stroke'),
                  spread: s.querySelector('[data-kind="spread"]').getAttribute('fill'),
                  ticks: Array.from(s.querySelectorAll('[data-kind="x-tick"]'))
                              .map(e => [+e.dataset.value, +e.getAttribute('x')])})""",
    )
    assert geometry["stroke"] != geometry["spread"]  # not the descriptive band's colour
    (v0, p0), (v1, p1) = geometry["ticks"][0], geometry["ticks"][-1]
    at = [float(n) for n in re.findall(r"[MH]([\d.]+)", geometry["d"])]
    for value, pixel in zip((interval["lower"], interval["upper"]), at, strict=True):
        assert abs(p0 + (value - v0) / (v1 - v0) * (p1 - p0) - pixel) <= 0.2


def test_a_result_from_before_intervals_says_so_and_draws_no_bracket(
    browser: Any, server: LiveServer, owner_token: str, iris_job: str
) -> None:
    """A result stored by an earlier version (no interval key) gets a sentence, not a number.

    The row is the iris job's own, written back under a new id with every interval removed, as
    results stored before intervals existed look.
    """
    with server.sessions.begin() as session:
        source = session.get_one(Job, iris_job)
        result = copy.deepcopy(source.result)
        assert result is not None
        for row in result["estimate"].values():
            del row["interval"]
        old = Job(
            id=uuid.uuid4().hex,
            dataset_hash=source.dataset_hash,
            status=source.status,
            stage=source.stage,
            request=source.request,
            result=result,
            team=source.team,
            kind=source.kind,
            finished_at=source.finished_at,
        )
        session.add(old)
        old_id = old.id
    page = browser.new_page()
    errors = watch_console(page)
    sign_in(page, server.base_url, owner_token, f"/reports/jobs/{old_id}")
    line = page.locator('[data-field="interval"]').inner_text()
    assert line.startswith("No interval: this result was computed before intervals existed")
    assert marks(page, "interval") == []
    assert len(marks(page, "outer-score")) == len(result["outer"])
    cells = page.eval_on_selector_all(
        '[data-field="interval-cell"]', "els => els.map(e => e.textContent)"
    )
    assert cells == ["not computed (earlier version)"] * len(result["estimate"])
    assert errors == []
