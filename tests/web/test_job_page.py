"""The job report in a real headless Chromium: its charts against the store and scikit-learn."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pytest
from sklearn.datasets import load_iris
from sklearn.model_selection import GridSearchCV, StratifiedKFold
from sklearn.neighbors import KNeighborsClassifier
from sqlalchemy import func, select

from service.store.models import FoldScore, JobCandidate, JobFold

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
    job_page: Any, server: LiveServer, iris_job: str, output_dir: Path
) -> None:
    """One dot per outer fold, one bar per candidate, curve points that hold every inner score."""
    outer, candidates = _store_counts(server, iris_job)
    assert outer == 3 and candidates == 12
    assert len(marks(job_page, "outer-score")) == outer
    bars = marks(job_page, "pick-count")
    assert len(bars) == candidates
    assert sum(int(b["count"]) for b in bars) == outer  # every outer fold picked exactly one
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
