"""A page for every state a job can be in: queued, running, failed and cancelled."""

from __future__ import annotations

import copy
import time
from pathlib import Path
from typing import Any

import httpx
import pytest

from .conftest import IRIS_JOB
from .live import LiveServer
from .pages import check_page, sign_in, watch_console

# forests big enough that the job is still running while the page is read, and that a second
# job submitted behind it waits for the pool's two processes (the pool takes units in id order)
SLOW_FAMILY = {
    "estimator": "RandomForestClassifier",
    "fixed": {"n_estimators": 400, "random_state": 0},
    "grid": {"max_depth": [2, 4, None], "min_samples_leaf": [1, 3]},
}


def _submit(server: LiveServer, token: str, request: dict[str, Any]) -> str:
    answer = httpx.post(
        f"{server.base_url}/v1/jobs",
        json=request,
        headers={"Authorization": f"Bearer {token}"},
        timeout=60,
    )
    assert answer.status_code == 202, answer.text
    return str(answer.json()["id"])


def _cancel(server: LiveServer, token: str, job_id: str) -> None:
    answer = httpx.post(
        f"{server.base_url}/v1/jobs/{job_id}/cancel",
        headers={"Authorization": f"Bearer {token}"},
        timeout=60,
    )
    assert answer.status_code == 200 and answer.json()["status"] == "cancelled", answer.text


def _wait_for(server: LiveServer, token: str, job_id: str, status: str) -> dict[str, Any]:
    deadline = time.monotonic() + 120
    while True:
        job = server.job(token, job_id)
        if job["status"] == status:
            return job
        assert job["status"] in ("queued", "running"), job
        assert time.monotonic() < deadline, f"job {job_id} still {job['status']}"
        time.sleep(0.2)


@pytest.fixture(scope="module")
def busy(server: LiveServer) -> dict[str, Any]:
    """A slow job that keeps the pool busy and a quick one queued behind it (both cancelled)."""
    token = server.token("waiters")
    slow = copy.deepcopy(IRIS_JOB)
    slow["families"] = [SLOW_FAMILY]
    slow["outer"]["seed"] = 11  # folds no other test uses, so nothing is reused
    slow_id = _submit(server, token, slow)
    quick = copy.deepcopy(IRIS_JOB)
    quick["outer"]["seed"] = 12
    quick_id = _submit(server, token, quick)
    yield {"token": token, "slow": slow_id, "quick": quick_id}
    for job_id in (slow_id, quick_id):
        if server.job(token, job_id)["status"] in ("queued", "running"):
            _cancel(server, token, job_id)


def test_a_queued_job_says_it_waits_and_reloads_itself(
    browser: Any, server: LiveServer, busy: dict[str, Any], output_dir: Path
) -> None:
    """Behind a busy pool: 'Waiting for a worker', 0 of N units, a Refresh header, a still link."""
    job = server.job(busy["token"], busy["quick"])
    assert job["status"] == "queued", job["status"]  # the slow job's units hold the pool
    page = browser.new_page()
    errors = watch_console(page)
    sign_in(page, server.base_url, busy["token"], "/reports/")
    answer = page.goto(f"{server.base_url}/reports/jobs/{busy['quick']}")
    assert answer is not None and answer.headers.get("refresh") == "10"
    assert page.get_by_role("heading", name="Waiting for a worker").count() == 1
    progress = page.locator('[data-field="progress"]').inner_text()
    # units whose scores an earlier job of this module stored count as done at creation
    done, total = job["progress"]["units_done"], job["progress"]["units_total"]
    assert done < total
    assert progress.startswith(f"{done} of {total} work units done")
    check_page(page, "job-queued", output_dir)
    still = page.goto(f"{server.base_url}/reports/jobs/{busy['quick']}?still=1")
    assert still is not None and "refresh" not in still.headers
    assert page.locator('[data-field="refresh"]').count() == 0
    assert errors == []


def test_a_running_job_shows_its_progress_and_reloads_without_a_script(
    browser: Any, server: LiveServer, busy: dict[str, Any], output_dir: Path
) -> None:
    """Units done of units total, the stage in words, and the browser reloads the page itself."""
    job = _wait_for(server, busy["token"], busy["slow"], "running")
    page = browser.new_page()
    errors = watch_console(page)
    sign_in(page, server.base_url, busy["token"], f"/reports/jobs/{busy['slow']}")
    assert page.get_by_role("heading", name="Running").count() == 1
    text = page.locator('[data-field="progress"]').inner_text()
    assert f"of {job['progress']['units_total']} work units done" in text
    assert "scoring candidates on the inner folds" in text or "refitting" in text
    assert page.locator("progress").count() == 1
    assert page.locator("script").count() == 0
    check_page(page, "job-running", output_dir)
    # the Refresh header makes Chromium load the page again by itself within ~10 s
    with page.expect_event("load", timeout=30_000):
        pass
    assert page.url.endswith(f"/reports/jobs/{busy['slow']}")
    assert errors == []


def test_a_cancelled_job_says_so(
    browser: Any, server: LiveServer, busy: dict[str, Any], output_dir: Path
) -> None:
    """After a cancel: a heading that says so, the units done before it, no estimate."""
    _cancel(server, busy["token"], busy["slow"])
    page = browser.new_page()
    errors = watch_console(page)
    answer = None
    sign_in(page, server.base_url, busy["token"], f"/reports/jobs/{busy['slow']}")
    answer = page.goto(f"{server.base_url}/reports/jobs/{busy['slow']}")
    assert answer is not None and "refresh" not in answer.headers
    assert page.get_by_role("heading", name="This job was cancelled").count() == 1
    assert "cancelled on request" in page.locator('[data-field="cancelled"]').inner_text()
    assert page.get_by_role("heading", name="Estimate on unseen data").count() == 0
    check_page(page, "job-cancelled", output_dir)
    assert errors == []


def test_a_failed_job_shows_its_error_and_what_to_do(
    browser: Any, server: LiveServer, output_dir: Path
) -> None:
    """More neighbours than training rows: the error line, the candidate, advice, the full text."""
    token = server.token("failers")
    request = copy.deepcopy(IRIS_JOB)
    request["families"] = [{"estimator": "KNeighborsClassifier", "fixed": {"n_neighbors": 500}}]
    job_id = _submit(server, token, request)
    job = _wait_for(server, token, job_id, "failed")
    page = browser.new_page()
    errors = watch_console(page)
    sign_in(page, server.base_url, token, f"/reports/jobs/{job_id}")
    assert page.get_by_role("heading", name="This job failed").count() == 1
    shown = page.locator('[data-field="error"]').inner_text()
    assert shown == job["error"].strip().splitlines()[-1]
    assert "n_neighbors" in shown
    advice = page.locator('[data-field="advice"]').inner_text()
    assert "submit it again" in advice
    assert "KNeighborsClassifier(n_neighbors=500)" in page.inner_text("main")
    assert "no result yet" not in page.inner_text("main")
    assert "drawn below" not in page.inner_text("main")
    page.get_by_text("Full error text").click()
    assert "Traceback" in page.locator("pre.error-text").inner_text()
    check_page(page, "job-failed", output_dir)
    assert errors == []
