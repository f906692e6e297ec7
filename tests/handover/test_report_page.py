"""The job page's prediction sections in Debian's Chromium, checked against scikit-learn.

References: scikit-learn's confusion_matrix and precision_recall_fscore_support on the exported
outer predictions of breast_cancer and diabetes (both shipped with scikit-learn).
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from sklearn.metrics import confusion_matrix, precision_recall_fscore_support
from web.live import CHROMIUM, CHROMIUM_ARGS  # tests/web/live.py: the browser the pages use
from web.pages import marks, sign_in, watch_console

from .conftest import Handover
from .test_predictions import all_rows


@pytest.fixture
def browser(tmp_path: Path) -> Iterator[Any]:
    """A headless Debian Chromium with a fresh profile, driven by Playwright (never downloaded)."""
    if not os.path.exists(CHROMIUM):
        pytest.fail(f"{CHROMIUM} is missing: `make test` installs Debian's chromium package")
    from playwright.sync_api import sync_playwright

    with sync_playwright() as driver:
        context = driver.chromium.launch_persistent_context(
            str(tmp_path / "profile"), executable_path=CHROMIUM, args=CHROMIUM_ARGS, headless=True
        )
        try:
            yield context
        finally:
            context.close()


def _cells(page: Any, selector: str) -> list[list[str]]:
    rows: list[list[str]] = page.eval_on_selector_all(
        f"{selector} tbody tr",
        "rows => rows.map(r => Array.from(r.children).map(c => c.textContent.trim()))",
    )
    return rows


def test_classification_page_shows_scikit_learns_per_class_figures(
    handover: Handover, browser: Any
) -> None:
    job = handover.jobs["proba"]
    with handover.server.client(handover.token) as client:
        _, rows = all_rows(client, job["id"], limit=5000)
    y = [r["actual"] for r in rows]
    predicted = [r["predicted"] for r in rows]
    page = browser.new_page()
    errors = watch_console(page)
    sign_in(page, handover.server.base_url, handover.token, f"/reports/jobs/{job['id']}")
    assert page.get_by_role("heading", name="Out-of-fold predictions").is_visible()
    expected = confusion_matrix(y, predicted, labels=[0, 1])
    assert _cells(page, "#confusion") == [
        [str(label), *[str(v) for v in row]] for label, row in zip((0, 1), expected, strict=True)
    ]
    precision, recall, f1, support = precision_recall_fscore_support(y, predicted, labels=[0, 1])
    shown = _cells(page, "#per-class")
    for i, row in enumerate(shown):
        assert row == [
            str(i),
            f"{precision[i]:.4f}",
            f"{recall[i]:.4f}",
            f"{f1[i]:.4f}",
            str(support[i]),
        ]
    # logistic regression gives probabilities: a reliability diagram with up to 10 bins
    assert 1 <= len(marks(page, "reliability-bin")) <= 10
    # the job sliced by the target: one row per class in the groups table
    assert len(_cells(page, "table.slice")) == 2
    assert errors == []


def test_regression_page_draws_every_prediction_and_the_slices(
    handover: Handover, browser: Any
) -> None:
    job = handover.jobs["regression"]
    page = browser.new_page()
    errors = watch_console(page)
    sign_in(page, handover.server.base_url, handover.token, f"/reports/jobs/{job['id']}")
    n_rows = job["result"]["n_rows"]  # one repeat: each row predicted once
    assert len(marks(page, "prediction")) == n_rows
    assert len(marks(page, "residual")) == n_rows
    slices = _cells(page, "table.slice")
    groups = job["result"]["slices"][0]["groups"]
    assert [row[0] for row in slices] == [g["value"] for g in groups]
    assert [row[1] for row in slices] == [str(g["n_rows"]) for g in groups]
    assert [row[6] for row in slices] == ["differs" if g["flagged"] else "" for g in groups]
    assert errors == []
