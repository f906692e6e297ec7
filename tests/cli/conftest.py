"""Fixtures for the CLI tests: a fresh store, a small valid job, the real console script."""

from __future__ import annotations

import shutil
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest

from .runner import DATA_NAME, base_request, run_foldwise, table_csv


@pytest.fixture(scope="session")
def shared_csv(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """The shared small CSV, written once per session."""
    path = tmp_path_factory.mktemp("table") / DATA_NAME
    path.write_text(table_csv(), encoding="utf-8")
    return path


@pytest.fixture
def workdir(tmp_path: Path, shared_csv: Path) -> Path:
    """A working directory holding data.csv, the cwd of every run in the test."""
    shutil.copy(shared_csv, tmp_path / DATA_NAME)
    return tmp_path


@pytest.fixture
def foldwise_home(workdir: Path) -> Path:
    """A fresh FOLDWISE_HOME (not created yet: the CLI must create it)."""
    return workdir / "home"


@pytest.fixture
def valid_request() -> dict[str, Any]:
    """The small valid base request on data.csv."""
    return base_request()


@pytest.fixture
def foldwise(workdir: Path, foldwise_home: Path) -> Callable[..., tuple[int, str, str]]:
    """Run the console script in `workdir` with the fresh home; returns (code, stdout, stderr)."""

    def run(*args: str) -> tuple[int, str, str]:
        out = run_foldwise(*args, cwd=workdir, home=foldwise_home)
        return out.code, out.stdout, out.stderr

    return run
