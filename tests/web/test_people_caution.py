"""A table whose columns suggest decisions about people: the report puts that caution first."""

from __future__ import annotations

import io
from typing import Any

import httpx
import numpy as np
import pandas as pd

from service.cv.cautions import PEOPLE

from .live import LiveServer
from .pages import sign_in, watch_console


def _applicants() -> bytes:
    # invented rows: an income column is what the cautions look for, the label is noise
    rng = np.random.default_rng(0)
    frame = pd.DataFrame(
        {
            "applicant_income": rng.normal(50_000, 12_000, 90).round(0),
            "years_at_address": rng.integers(0, 30, 90),
            "approved": rng.integers(0, 2, 90),
        }
    )
    out = io.StringIO()
    frame.to_csv(out, index=False)
    return out.getvalue().encode()


def test_people_caution_is_shown_verbatim_and_apart(browser: Any, server: LiveServer) -> None:
    """The result's caution about people appears in its own labelled box, word for word."""
    token = server.token("lenders")
    headers = {"Authorization": f"Bearer {token}"}
    files = {"file": ("applicants.csv", _applicants(), "text/csv")}
    upload = httpx.post(
        f"{server.base_url}/v1/datasets/upload", headers=headers, files=files, timeout=60
    )
    assert upload.status_code == 201, upload.text
    job_id = server.submit_and_wait(
        token,
        {
            "dataset": upload.json()["content_hash"],
            "target": "approved",
            "task": "classification",
            "families": [{"estimator": "LogisticRegression"}],
            "outer": {"method": "stratified_kfold", "k": 3, "seed": 0},
            "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
            "metrics": ["accuracy"],
            "pick_by": "accuracy",
        },
    )
    assert PEOPLE in server.job(token, job_id)["result"]["cautions"]
    page = browser.new_page()
    errors = watch_console(page)
    sign_in(page, server.base_url, token, f"/reports/jobs/{job_id}")
    box = page.get_by_role("complementary", name="Decisions about people")
    assert box.inner_text().endswith(PEOPLE)
    assert errors == []
