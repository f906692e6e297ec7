"""Fixtures for the report pages: one live server, a finished job on iris, one Chromium."""

from __future__ import annotations

import copy
import os
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest

from .live import CHROMIUM, CHROMIUM_ARGS, OUTPUT, LiveServer, live_server

# iris ships with scikit-learn (Fisher 1936). Two families: KNN over two grid keys (so the page
# draws a heat map) and logistic regression over one; 3 outer x 3 inner stratified folds.
KNN_GRID = {"n_neighbors": [1, 5, 9, 15, 25], "weights": ["uniform", "distance"]}
IRIS_JOB: dict[str, Any] = {
    "dataset": {"sample": "iris"},
    "target": "target",
    "features": None,
    "task": "classification",
    "families": [
        {"estimator": "KNeighborsClassifier", "grid": KNN_GRID},
        {"estimator": "LogisticRegression", "fixed": {"max_iter": 2000}, "grid": {"C": [0.1, 1.0]}},
    ],
    "preprocess": "none",
    "outer": {"method": "stratified_kfold", "k": 3, "seed": 0},
    "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
    "metrics": ["accuracy", "balanced_accuracy"],
    "pick_by": "accuracy",
}


@pytest.fixture(scope="session")
def server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[LiveServer]:
    """The embedded server (SQLite, local pool of two processes) in a subprocess."""
    home = tmp_path_factory.mktemp("web-home")
    with live_server(home, home.parent / "web-server.log") as live:
        yield live


@pytest.fixture(scope="session")
def owner_token(server: LiveServer) -> str:
    """A submit+read token of team 'owners'."""
    return server.token("owners")


@pytest.fixture(scope="session")
def iris_job(server: LiveServer, owner_token: str) -> str:
    """The id of the iris job, submitted over HTTP by team 'owners' and finished."""
    return server.submit_and_wait(owner_token, copy.deepcopy(IRIS_JOB))


@pytest.fixture(scope="session")
def second_job(server: LiveServer, owner_token: str, iris_job: str) -> str:
    """A second job on iris with the same outer folds but only logistic regression."""
    request = copy.deepcopy(IRIS_JOB)
    request["families"] = [IRIS_JOB["families"][1]]
    return server.submit_and_wait(owner_token, request)


@pytest.fixture(scope="session")
def output_dir() -> Path:
    """Where screenshots go (gitignored)."""
    OUTPUT.mkdir(parents=True, exist_ok=True)
    return OUTPUT


@pytest.fixture(scope="package")
def chromium() -> Iterator[Any]:
    """One headless Debian Chromium for the folder's tests, driven by Playwright (never downloaded).

    Starting the browser takes seconds on a busy machine, and one per module started it a dozen
    times; each test still gets a context of its own (`browser`), which shares no cookies,
    storage or cache with any other.
    """
    if not os.path.exists(CHROMIUM):
        pytest.fail(f"{CHROMIUM} is missing: `make test` installs Debian's chromium package")
    from playwright.sync_api import sync_playwright

    with sync_playwright() as driver:
        launched = driver.chromium.launch(
            executable_path=CHROMIUM, args=CHROMIUM_ARGS, headless=True
        )
        try:
            yield launched
        finally:
            launched.close()


@pytest.fixture
def browser(chromium: Any) -> Iterator[Any]:
    """A fresh browser context: no cookies, no storage, nothing cached from another test."""
    context = chromium.new_context()
    try:
        yield context
    finally:
        context.close()
