"""The caution about people follows what the request declares, not a guess from column names."""

from __future__ import annotations

import io
from typing import Any

import httpx
import numpy as np
import pandas as pd

from service.cv.cautions import PEOPLE_HINT_PREFIX, PEOPLE_PREFIX, people_caution

from .live import LiveServer
from .pages import sign_in, watch_console

BANNER = "Before this model decides about people"


def _csv(frame: pd.DataFrame) -> bytes:
    out = io.StringIO()
    frame.to_csv(out, index=False)
    return out.getvalue().encode()


def _penguin_like() -> bytes:
    # invented rows about animals (a behaviour check, not a reference value): a `sex` column
    # that describes birds, not people
    rng = np.random.default_rng(1)
    species = rng.choice(["adelie", "gentoo"], 90)
    return _csv(
        pd.DataFrame(
            {
                "bill_length_mm": np.where(species == "gentoo", 47.5, 38.8)
                + rng.normal(0, 2.5, 90),
                "flipper_length_mm": np.where(species == "gentoo", 217, 190) + rng.normal(0, 6, 90),
                "sex": rng.choice(["female", "male"], 90),
                "species": species,
            }
        )
    )


def _applicants() -> bytes:
    # invented rows about credit applicants; the label is noise
    rng = np.random.default_rng(0)
    return _csv(
        pd.DataFrame(
            {
                "monthly_payment": rng.normal(900, 200, 90).round(0),
                "years_at_address": rng.integers(0, 30, 90),
                "approved": rng.integers(0, 2, 90),
            }
        )
    )


def _job(server: LiveServer, token: str, table: bytes, target: str, **extra: Any) -> str:
    headers = {"Authorization": f"Bearer {token}"}
    files = {"file": ("table.csv", table, "text/csv")}
    upload = httpx.post(
        f"{server.base_url}/v1/datasets/upload", headers=headers, files=files, timeout=60
    )
    assert upload.status_code == 201, upload.text
    request = {
        "dataset": upload.json()["content_hash"],
        "target": target,
        "task": "classification",
        "families": [{"estimator": "LogisticRegression", "fixed": {"max_iter": 2000}}],
        "outer": {"method": "stratified_kfold", "k": 3, "seed": 0},
        "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
        "metrics": ["accuracy"],
        **extra,
    }
    return server.submit_and_wait(token, request)


def test_an_animal_table_with_a_sex_column_gets_a_soft_line_and_no_banner(
    browser: Any, server: LiveServer
) -> None:
    """No declared context: the column is only named in a plain line among the cautions."""
    token = server.token("zoologists")
    job_id = _job(server, token, _penguin_like(), "species")
    cautions = server.job(token, job_id)["result"]["cautions"]
    assert not any(c.startswith(PEOPLE_PREFIX) for c in cautions)
    hints = [c for c in cautions if c.startswith(PEOPLE_HINT_PREFIX)]
    assert len(hints) == 1 and hints[0].startswith(f"{PEOPLE_HINT_PREFIX} sex.")
    page = browser.new_page()
    errors = watch_console(page)
    sign_in(page, server.base_url, token, f"/reports/jobs/{job_id}")
    assert page.get_by_role("complementary", name="Decisions about people").count() == 0
    assert BANNER not in page.inner_text("main")
    assert hints[0] in page.locator("ul.cautions").inner_text()
    assert errors == []


def test_a_declared_credit_context_gets_the_caution_in_its_own_box(
    browser: Any, server: LiveServer
) -> None:
    """context.decides_about_people with domain credit: the banner, verbatim, about groups."""
    token = server.token("lenders")
    context = {"decides_about_people": True, "domain": "credit"}
    job_id = _job(server, token, _applicants(), "approved", context=context)
    cautions = server.job(token, job_id)["result"]["cautions"]
    expected = people_caution("credit")
    assert expected in cautions and "errors across groups" in expected
    assert not any(c.startswith(PEOPLE_HINT_PREFIX) for c in cautions)
    page = browser.new_page()
    errors = watch_console(page)
    sign_in(page, server.base_url, token, f"/reports/jobs/{job_id}")
    box = page.get_by_role("complementary", name="Decisions about people")
    assert box.inner_text().endswith(expected)
    assert "(credit)" in box.inner_text()
    assert errors == []


def test_a_bad_context_is_refused_naming_the_field(server: LiveServer) -> None:
    """A context that is not an object of the two fields: 422 naming context's field."""
    token = server.token("lenders")
    request = {
        "dataset": {"sample": "iris"},
        "target": "target",
        "task": "classification",
        "families": [{"estimator": "LogisticRegression"}],
        "outer": {"method": "stratified_kfold", "k": 3},
        "inner": {"method": "stratified_kfold", "k": 3},
        "metrics": ["accuracy"],
        "context": {"decides_about_people": "maybe"},
    }
    answer = httpx.post(
        f"{server.base_url}/v1/jobs",
        json=request,
        headers={"Authorization": f"Bearer {token}"},
        timeout=60,
    )
    assert answer.status_code == 422
    assert answer.json()["field"] == "context.decides_about_people"
