"""The dataset page (every job, the estimate over time) and the comparison page."""

from __future__ import annotations

import copy
import itertools
import math
import re
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from scipy import stats
from sqlalchemy import select

from service.store.models import JobCandidate

from .conftest import IRIS_JOB
from .live import LiveServer
from .pages import check_page, sign_in, watch_console


@pytest.fixture(scope="module")
def repeat_job(server: LiveServer, owner_token: str, iris_job: str) -> str:
    """The iris request again: a later job with the same candidates and metric (comparable)."""
    return server.submit_and_wait(owner_token, copy.deepcopy(IRIS_JOB))


@pytest.fixture(scope="module")
def log_range_job(server: LiveServer, owner_token: str) -> str:
    """Logistic regression with C drawn log-uniform over five decades (another candidate set)."""
    request = copy.deepcopy(IRIS_JOB)
    request["families"] = [
        {
            "estimator": "LogisticRegression",
            "fixed": {"max_iter": 2000},
            "ranges": {"C": {"low": 0.001, "high": 100.0, "log": True}},
            "draws": 5,
            "draw_seed": 3,
        }
    ]
    return server.submit_and_wait(owner_token, request)


def _candidate_set(server: LiveServer, job_id: str) -> tuple[str, ...]:
    with server.sessions() as session:
        keys = session.scalars(
            select(JobCandidate.candidate_key).where(JobCandidate.job_id == job_id)
        )
        return tuple(sorted(keys))


def test_dataset_page_names_the_table_and_draws_comparable_jobs_apart(
    browser: Any,
    server: LiveServer,
    owner_token: str,
    iris_job: str,
    second_job: str,
    repeat_job: str,
    log_range_job: str,
    output_dir: Path,
) -> None:
    """Name, target and shape by the hash; one line per candidate set and metric, in time order."""
    first = server.job(owner_token, iris_job)
    page = browser.new_page()
    errors = watch_console(page)
    sign_in(page, server.base_url, owner_token, f"/reports/datasets/{first['dataset_hash']}")
    assert page.locator("h1").inner_text() == "iris (sample shipped with scikit-learn)"
    assert page.locator('[data-field="target"]').inner_text() == "target"
    # iris as scikit-learn ships it: 150 rows, four measurements and the target
    assert page.locator('[data-field="shape"]').inner_text() == "150 rows \u00d7 5 columns"
    assert first["dataset_hash"] in page.inner_text("main")
    groups: list[list[dict[str, str]]] = page.eval_on_selector_all(
        "figure[data-group]",
        """figs => figs.map(f => Array.from(f.querySelectorAll('[data-kind="history-point"]'))
                                      .map(e => Object.assign({}, e.dataset)))""",
    )
    drawn = [p["job"] for group in groups for p in group]
    assert len(drawn) == len(set(drawn))  # each job on one line only
    for group in groups:
        ids = [p["job"] for p in group]
        jobs = [server.job(owner_token, i) for i in ids]
        assert {_candidate_set(server, i) for i in ids} == {_candidate_set(server, ids[0])}
        assert {j["result"]["pick_by"] for j in jobs} == {jobs[0]["result"]["pick_by"]}
        assert [j["created_at"] for j in jobs] == sorted(j["created_at"] for j in jobs)
        assert [float(p["value"]) for p in group] == [
            j["result"]["estimate"][j["result"]["pick_by"]]["mean"] for j in jobs
        ]
        assert all(j.get("parent_id") is None for j in jobs)  # learning-curve sizes apart
    together = next(g for g in groups if any(p["job"] == iris_job for p in g))
    assert [p["job"] for p in together][:2] == [iris_job, repeat_job]
    assert second_job not in [p["job"] for p in together]
    assert log_range_job not in [p["job"] for p in together]
    for job_id in (iris_job, second_job, repeat_job, log_range_job):
        assert page.locator(f'a[href="/reports/jobs/{job_id}"]').count() == 1
        # the jobs table shows each estimate's interval (pick_by) as result v1 holds it
        result = server.job(owner_token, job_id)["result"]
        band = result["estimate"][result["pick_by"]]["interval"]
        cell = page.locator(f'td[data-field="interval"][data-job="{job_id}"]').inner_text()
        assert cell == f"{band['lower']:.4f} to {band['upper']:.4f}"
    # time labels: a short date over the time, and no two labels of a chart overlap
    boxes = page.eval_on_selector_all(
        "figure[data-group] svg",
        """svgs => svgs.map(s => Array.from(s.querySelectorAll('text'))
            .filter(t => t.querySelectorAll('tspan').length === 2)
            .map(t => { const r = t.getBoundingClientRect();
                        return {text: t.textContent, left: r.left, right: r.right}; }))""",
    )
    assert any(boxes)
    for labels in boxes:
        for label in labels:
            assert re.fullmatch(r"[A-Z][a-z]{2} \d{2}( \d{4})?\d{2}:\d{2}\u200b*", label["text"])
        ordered = sorted(labels, key=lambda b: b["left"])
        assert all(a["right"] <= b["left"] for a, b in itertools.pairwise(ordered))
    check_page(page, "dataset", output_dir)
    assert errors == []


def test_a_log_range_is_drawn_on_a_log_axis(
    browser: Any, server: LiveServer, owner_token: str, log_range_job: str
) -> None:
    """C drawn with log: true: the curve's x ticks are powers of ten and say 'log scale'."""
    page = browser.new_page()
    sign_in(page, server.base_url, owner_token, f"/reports/jobs/{log_range_job}")
    assert page.locator('[data-kind="log-axis"]').count() == 1
    # only the log-scale chart's ticks: the fold strip above it has x ticks of its own (its axis
    # can end at 1, a power of ten, when the estimate's interval reaches it)
    ticks = page.eval_on_selector(
        'svg:has([data-kind="log-axis"])',
        """s => Array.from(s.querySelectorAll('[data-kind="x-tick"]'))
                    .map(e => +e.dataset.value)""",
    )
    curve_ticks = [t for t in ticks if t > 0 and math.log10(t) == round(math.log10(t))]
    assert curve_ticks[0] <= 0.001 and curve_ticks[-1] >= 100
    drawn = server.job(owner_token, log_range_job)["result"]["pick_frequency"]
    assert drawn  # the picks were drawn from the range
    labels = page.eval_on_selector_all('[data-kind="x-tick"]', "els => els.map(e => e.textContent)")
    assert all(len(text.replace(".", "").lstrip("0")) <= 4 for text in labels), labels


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
    # The interval on the mean difference, same source: mean -/+ t_{J-1}(0.95) * se at level 0.9
    se = math.sqrt((1 / len(d) + ratio) * d.var(ddof=1))
    half = stats.t.ppf(0.95, len(d) - 1) * se
    line = section.locator('[data-field="interval"]')
    assert line.locator('[data-field="method"]').inner_text() == (
        "90% interval, corrected resampled t — no extra fits"
    )
    assert line.locator('[data-field="lower"]').inner_text() == f"{d.mean() - half:+.4f}"
    assert line.locator('[data-field="upper"]').inner_text() == f"{d.mean() + half:+.4f}"
    band = section.locator('svg [data-kind="interval"]')
    assert band.count() == 1
    assert float(band.get_attribute("data-lower") or "nan") == pytest.approx(d.mean() - half)
    assert float(band.get_attribute("data-upper") or "nan") == pytest.approx(d.mean() + half)
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
