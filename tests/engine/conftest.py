"""Fixtures for the engine tests."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest
from threadpoolctl import threadpool_limits

from service.config import Settings, load_settings


@pytest.fixture
def settings(tmp_path: Path) -> Settings:
    """Settings for a fresh embedded home (SQLite store) under the test's temporary folder."""
    return load_settings({"FOLDWISE_HOME": str(tmp_path / "home")})


@pytest.fixture(autouse=True, scope="session")
def one_blas_thread() -> Iterator[None]:
    """One BLAS/OpenMP thread, as the pool children use: on two shared cores, small fits spend
    more time handing work between threads than computing. Engine and reference both run under
    it, so agreement checks compare like with like."""
    with threadpool_limits(1):
        yield
