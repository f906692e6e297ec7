"""The job page on a job with about 5,000 stored fold scores: aggregated in SQL, quick to serve."""

from __future__ import annotations

import copy
import re
import time

import httpx
import pytest

from .conftest import IRIS_JOB
from .live import LiveServer

# 25 x 2 = 50 KNN candidates, 5 outer x 4 inner folds plus 4 final inner folds, four metrics:
# (5 * 4 + 4) * 50 * 4 = 4,800 inner scores (1,200 fits), plus the outer ones.
BIG_GRID = {"n_neighbors": list(range(1, 26)), "weights": ["uniform", "distance"]}
METRICS = ["accuracy", "balanced_accuracy", "f1_macro", "recall_macro"]
PAGE_BUDGET_MS = 1500.0  # generous for a shared 2-core machine; a per-score query would pass it


@pytest.mark.slow
def test_job_page_with_thousands_of_scores_is_served_quickly(server: LiveServer) -> None:
    """Server-Timing of the job page stays within budget; every inner score is still counted."""
    request = copy.deepcopy(IRIS_JOB)
    request["families"] = [{"estimator": "KNeighborsClassifier", "grid": BIG_GRID}]
    request["outer"] = {"method": "stratified_kfold", "k": 5, "seed": 0}
    request["inner"] = {"method": "stratified_kfold", "k": 4, "seed": 1}
    request["metrics"] = METRICS
    token = server.token("speed", ("submit", "read"))
    job_id = server.submit_and_wait(token, request, timeout=600)
    with httpx.Client(base_url=server.base_url, timeout=60) as client:
        signed = client.post("/reports/sign-in", data={"token": token, "next": "/reports/"})
        assert signed.status_code == 303
        timings = []
        for _ in range(3):  # the first request also warms the template cache
            started = time.perf_counter()
            page = client.get(f"/reports/jobs/{job_id}")
            wall = (time.perf_counter() - started) * 1000
            assert page.status_code == 200
            served = float(re.search(r"page;dur=([\d.]+)", page.headers["server-timing"])[1])
            timings.append((served, wall))
    inner = int(re.search(r"(\d+) inner and", page.text)[1])
    assert inner == 4_800
    n_marks = sum(int(n) for n in re.findall(r'data-kind="inner-mean" data-n="(\d+)"', page.text))
    # two curves (n_neighbors, weights), each holding every accuracy score once
    assert n_marks == 2 * (4_800 // len(METRICS))
    assert len(re.findall(r'data-kind="heat-cell"', page.text)) == 50
    best = min(served for served, _ in timings)
    print(f"job page, {inner} inner scores: server {best:.1f} ms; (server, wall) ms {timings}")
    assert best < PAGE_BUDGET_MS
