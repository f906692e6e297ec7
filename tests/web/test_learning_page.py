"""A learning-curve job's report: one mark per training size, its error as the store holds it."""

from __future__ import annotations

import copy
from pathlib import Path
from typing import Any

from .conftest import IRIS_JOB
from .live import LiveServer
from .pages import check_page, marks, sign_in, watch_console


def test_learning_curve_page_draws_one_point_per_size(
    browser: Any, server: LiveServer, owner_token: str, output_dir: Path
) -> None:
    """Error against training size, in size order, each point linked to the selection behind it."""
    request = copy.deepcopy(IRIS_JOB)
    request["families"] = [IRIS_JOB["families"][1]]  # logistic regression alone: quick
    request.update(kind="learning_curve", sizes=[0.25, 0.5, 1.0])
    job_id = server.submit_and_wait(owner_token, request)
    result = server.job(owner_token, job_id)["result"]
    page = browser.new_page()
    errors = watch_console(page)
    sign_in(page, server.base_url, owner_token, f"/reports/jobs/{job_id}")
    points = marks(page, "curve-point")
    expected = [p["error"]["mean"] for p in sorted(result["points"], key=lambda p: p["size"])]
    assert [float(p["value"]) for p in points] == expected
    for point in result["points"]:
        assert page.locator(f'a[href="/reports/jobs/{point["job_id"]}"]').count() == 1
    # an error is never below zero: the band stops at zero and so does the axis
    band = marks(page, "spread")
    assert float(band[0]["low"]) >= 0.0
    ticks = [float(t["value"]) for t in marks(page, "y-tick")]
    assert min(ticks) >= 0.0
    lows = [p["error"]["mean"] - p["error"]["std"] for p in result["points"]]
    assert float(band[0]["low"]) == max(0.0, min(lows))
    # each size's interval on the error, as the curve's result holds it (its bounds mapped from
    # the score's by 1 - accuracy: tests/curves/test_curve_job.py checks that by hand)
    shown = page.eval_on_selector_all(
        '[data-field="error-interval"]', "els => els.map(e => e.textContent)"
    )
    ordered = sorted(result["points"], key=lambda p: p["size"])
    assert shown == [
        f"{p['error']['interval']['lower']:.4f} to {p['error']['interval']['upper']:.4f}"
        for p in ordered
    ]
    assert "90% interval, corrected resampled t — no extra fits" in page.inner_text("main")
    check_page(page, "learning-curve", output_dir)
    assert errors == []
