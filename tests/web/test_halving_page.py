"""A finished halving job on its report page in a real Chromium: the "Halving rounds" section.

The job is the small halving request of tests/engine/test_halving.py on load_wine (ships with
scikit-learn; that file checks it against HalvingGridSearchCV), submitted over HTTP. The table
must list result v1's rounds search by search (outer folds, then all rows), its fits must be the
stored scores of the round folds, the one-line summary must give result v1's fits and training
rows against the full grid, and a grid job's page must have no such section.
"""

from __future__ import annotations

import copy
from pathlib import Path
from typing import Any

import pytest
from engine.test_halving import CASES  # tests/engine: the halving requests checked against sklearn
from sqlalchemy import func, select

from service.cv.scopes import FINAL_SCOPE, ROUND_REPEAT_BASE
from service.store.models import FoldScore, Job, JobCandidate, JobFold
from service.web.queries import inner_cells

from .live import LiveServer
from .pages import check_page, sign_in, watch_console

CASE = CASES["wine-small"]  # 4 candidates, factor 2, 3 outer folds, 3 inner: two rounds or more
HALVING_JOB = CASE.request()
# the table as the page draws it: each search's body, its label, and its rounds' numbers
READ_TABLE = """() => Array.from(document.querySelectorAll('#halving-rounds tbody')).map(b => ({
    scope: b.dataset.scope,
    label: b.querySelector('th[scope="rowgroup"]').textContent,
    rounds: Array.from(b.querySelectorAll('tr')).map(tr => Object.fromEntries(
        Array.from(tr.querySelectorAll('td')).map(td => [td.dataset.field, +td.textContent])))
}))"""
COLUMNS = ("round", "candidates", "rows", "fits", "kept")


@pytest.fixture(scope="module")
def halving_job(server: LiveServer, owner_token: str) -> str:
    """The id of the halving job, submitted over HTTP by team 'owners' and finished."""
    return server.submit_and_wait(owner_token, copy.deepcopy(HALVING_JOB))


def _round_scores(server: LiveServer, job_id: str, metric: str | None) -> int:
    # a plain count over the store's rows: scores on the job's round folds (stored repeats
    # from the base up), independent of the page's queries
    with server.sessions() as session:
        keys = select(JobCandidate.candidate_key).where(JobCandidate.job_id == job_id)
        query = (
            select(func.count())
            .select_from(JobFold)
            .join(FoldScore, FoldScore.fold_fingerprint == JobFold.fingerprint)
            .where(
                JobFold.job_id == job_id,
                JobFold.role.in_(("inner", "final_inner")),
                JobFold.repeat >= ROUND_REPEAT_BASE,
                FoldScore.candidate_key.in_(keys),
            )
        )
        if metric is not None:
            query = query.where(FoldScore.metric == metric)
        return int(session.scalar(query) or 0)


def test_halving_rounds_are_tabled_and_summed_up(
    browser: Any, server: LiveServer, owner_token: str, halving_job: str, output_dir: Path
) -> None:
    result = server.job(owner_token, halving_job)["result"]
    search = result["search"]
    page = browser.new_page()
    errors = watch_console(page)
    sign_in(page, server.base_url, owner_token, f"/reports/jobs/{halving_job}")
    assert page.get_by_role("heading", name="Halving rounds").count() == 1

    drawn = page.evaluate(READ_TABLE)
    # outer folds in (repeat, fold) order, then the search on all rows
    scopes = [f"r{o['repeat']}f{o['fold']}" for o in result["outer"]] + [FINAL_SCOPE]
    assert [body["scope"] for body in drawn] == scopes
    assert [body["label"] for body in drawn] == [
        *(f"outer fold {o['fold']}" for o in result["outer"]),
        "all rows (final search)",
    ]
    for body in drawn:
        expected = [r for r in search["rounds"] if r["scope"] == body["scope"]]
        assert body["rounds"] == [{c: r[c] for c in COLUMNS} for r in expected]
        # each round races the candidates the one before kept
        for before, after in zip(body["rounds"], body["rounds"][1:], strict=False):
            assert after["candidates"] == before["kept"] < before["candidates"]
    # each fit scored the ranking metric once on its round's fold
    tabled_fits = sum(r["fits"] for body in drawn for r in body["rounds"])
    assert tabled_fits == _round_scores(server, halving_job, result["pick_by"])

    # the summary: result v1's counts, the searches' fits plus one refit per search
    summary = page.locator('[data-field="halving-summary"]').inner_text()
    assert search["fits"] == tabled_fits + len(scopes)
    assert f"{search['fits']} fits instead of {search['full_grid_fits']} for the full grid" in (
        summary
    )
    share = search["inner_train_rows"] / search["full_grid_inner_train_rows"]
    assert 0 < share < 1
    assert f"; training rows {share * 100:.0f}% of the grid's" in summary
    assert f"factor {search['factor']}" in summary

    # the round folds' scores are counted with the inner scores in the page's opening line
    meta = page.locator("p.meta").inner_text()
    assert f" {_round_scores(server, halving_job, None)} inner and " in meta

    # the curves say which scores they pool: the first round's
    curves = page.locator("section[aria-labelledby='curves-h']").inner_text()
    assert "With halving, the first round's scores" in curves

    check_page(page, "job-halving", output_dir)
    assert errors == []


def test_the_inner_score_curves_pool_the_first_round_only(
    server: LiveServer, owner_token: str, halving_job: str
) -> None:
    # later rounds fit fewer candidates on more rows: pooled with the first, a kept candidate's
    # mean would mix row counts. The first round fits every candidate on every inner fold.
    result = server.job(owner_token, halving_job)["result"]
    with server.sessions() as session:
        job = session.get_one(Job, halving_job)
        cells = inner_cells(session, job, result["pick_by"])
    scopes = {f"r{o['repeat']}f{o['fold']}" for o in result["outer"]} | {FINAL_SCOPE}
    assert {cell.scope for cell in cells} == scopes
    assert len(cells) == len(scopes) * len(result["candidates"])
    assert {cell.n for cell in cells} == {CASE.inner}


def test_a_grid_jobs_page_has_no_halving_section(
    browser: Any, server: LiveServer, owner_token: str, iris_job: str
) -> None:
    assert "search" not in server.job(owner_token, iris_job)["result"]
    page = browser.new_page()
    sign_in(page, server.base_url, owner_token, f"/reports/jobs/{iris_job}")
    assert page.get_by_role("heading", name="Outer folds and their picks").count() == 1
    assert page.get_by_role("heading", name="Halving rounds").count() == 0
    assert page.locator("#halving-rounds, [data-field='halving-summary']").count() == 0
