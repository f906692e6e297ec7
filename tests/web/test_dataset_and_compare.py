"""The dataset page (every job, the estimate over time) and the comparison page."""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np
from scipy import stats

from .live import LiveServer
from .pages import marks, sign_in, watch_console


def test_dataset_page_lists_every_job_and_draws_its_history(
    browser: Any,
    server: LiveServer,
    owner_token: str,
    iris_job: str,
    second_job: str,
    output_dir: Path,
) -> None:
    """One history point per finished job on the table, each job linked, in time order."""
    first = server.job(owner_token, iris_job)
    second = server.job(owner_token, second_job)
    page = browser.new_page()
    errors = watch_console(page)
    sign_in(page, server.base_url, owner_token, f"/reports/datasets/{first['dataset_hash']}")
    points = marks(page, "history-point")
    assert len(points) == 2
    expected = [
        job["result"]["estimate"]["accuracy"]["mean"]
        for job in sorted((first, second), key=lambda j: j["created_at"])
    ]
    assert [float(p["value"]) for p in points] == expected
    for job_id in (iris_job, second_job):
        assert page.locator(f'a[href="/reports/jobs/{job_id}"]').count() == 1
    assert errors == []
    page.screenshot(path=str(output_dir / "dataset-page-wide.png"), full_page=True)


def test_comparison_page_shows_the_corrected_t_test(
    browser: Any, server: LiveServer, owner_token: str, iris_job: str, second_job: str
) -> None:
    """Same outer folds: one difference dot per fold and Nadeau & Bengio's t, computed here."""
    first = server.job(owner_token, iris_job)["result"]
    second = server.job(owner_token, second_job)["result"]
    page = browser.new_page()
    errors = watch_console(page)
    sign_in(page, server.base_url, owner_token, f"/reports/compare?jobs={iris_job},{second_job}")
    dots = page.locator('section:has(h2:text-is("accuracy")) [data-kind="fold-difference"]')
    assert dots.count() == len(first["outer"])
    # Nadeau & Bengio 2003 (Machine Learning 52:239-281), corrected resampled t:
    # t = mean(d) / sqrt((1/J + n_test/n_train) * s^2), s^2 the ddof=1 variance, df = J - 1
    d = np.array(
        [
            a["scores"]["accuracy"] - b["scores"]["accuracy"]
            for a, b in zip(first["outer"], second["outer"], strict=True)
        ]
    )
    ratio = np.mean([r["n_test"] for r in first["outer"]]) / np.mean(
        [r["n_train"] for r in first["outer"]]
    )
    section = page.locator('section:has(h2:text-is("accuracy"))')
    shown_t = section.locator('[data-field="t"]').inner_text()
    if d.var(ddof=1) > 0:
        t = d.mean() / math.sqrt((1 / len(d) + ratio) * d.var(ddof=1))
        p = 2 * stats.t.sf(abs(t), len(d) - 1)
        assert shown_t == f"{t:.4g}"
        assert section.locator('[data-field="p"]').inner_text() == f"p = {p:.4g}"
    # a job compared with itself: every difference is zero, p = 1
    page.goto(f"{server.base_url}/reports/compare?jobs={iris_job},{iris_job}")
    assert page.locator('section:has(h2:text-is("accuracy")) [data-field="p"]').inner_text() == (
        "p = 1"
    )
    assert errors == []


def test_comparison_refuses_a_bad_jobs_field_in_one_sentence(
    browser: Any, server: LiveServer, owner_token: str, iris_job: str
) -> None:
    """One id only: a 422 page whose alert names the field `jobs`."""
    page = browser.new_page()
    sign_in(page, server.base_url, owner_token, "/reports/")
    answer = page.goto(f"{server.base_url}/reports/compare?jobs={iris_job}")
    assert answer is not None and answer.status == 422
    assert page.get_by_role("alert").inner_text().startswith("jobs:")
