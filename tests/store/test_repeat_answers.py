"""The answer key and the lookup behind a repeated `foldwise select`, on both stores.

What may answer a request: only a succeeded command line job with the same key, on a store at
the newest revision; anything else is a miss, and a miss never creates or changes a store.
"""

from __future__ import annotations

import os
import time
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import select, update

from service.config import load_settings
from service.jobs.intake import answer_key as answer_keys
from service.jobs.intake.answer_key import AnswerKey, keyed, unchanged_since
from service.jobs.local.driver import run_embedded
from service.store.db import make_engine, make_session_factory
from service.store.models import Job
from service.store.repeat_answers import find_answer, keep_answer

# iris ships with scikit-learn; the job is two candidates in 2 x 2 folds
REQUEST: dict[str, Any] = {
    "dataset": {"sample": "iris"},
    "target": "target",
    "features": None,
    "task": "classification",
    "families": [{"estimator": "LogisticRegression", "grid": {"C": [0.1, 1.0]}}],
    "outer": {"method": "stratified_kfold", "k": 2, "seed": 0},
    "inner": {"method": "stratified_kfold", "k": 2, "seed": 1},
    "metrics": ["accuracy"],
    "pick_by": "accuracy",
}


def _key(data: Any, base_dir: Path, roots: tuple[Path, ...] = ()) -> str | None:
    key = keyed(data, base_dir=base_dir, data_roots=roots)
    return None if key is None else key.value


def test_the_key_follows_the_request_and_the_table_bytes(tmp_path: Path) -> None:
    table = tmp_path / "t.csv"
    table.write_bytes(b"a,b\n1,2\n")
    on_file = {**REQUEST, "dataset": {"path": "t.csv"}}
    first = _key(on_file, tmp_path)
    assert first is not None and len(first) == 64
    assert _key(on_file, tmp_path) == first
    assert _key({**on_file, "metrics": ["balanced_accuracy"]}, tmp_path) != first
    table.write_bytes(b"a,b\n1,3\n")
    assert _key(on_file, tmp_path) not in (None, first)
    assert _key(REQUEST, tmp_path) is not None  # a shipped sample
    assert _key({**REQUEST, "dataset": "ab" * 32}, tmp_path) is not None  # a content hash


@pytest.mark.parametrize(
    "dataset",
    [
        {"sql": {"connection": "warehouse", "query": "SELECT 1"}},  # rows can change under it
        {"path": "missing.csv"},
        {"path": "t.csv", "sample": "iris"},
        "not-a-hash",
        None,
    ],
)
def test_no_key_where_the_rows_are_not_pinned_or_the_request_is_malformed(
    tmp_path: Path, dataset: Any
) -> None:
    (tmp_path / "t.csv").write_bytes(b"a,b\n1,2\n")
    assert _key({**REQUEST, "dataset": dataset}, tmp_path) is None


def test_no_key_for_a_file_outside_the_data_roots(tmp_path: Path) -> None:
    (tmp_path / "t.csv").write_bytes(b"a,b\n1,2\n")
    inside = tmp_path / "roots"
    inside.mkdir()
    assert _key({**REQUEST, "dataset": {"path": "t.csv"}}, tmp_path, (inside,)) is None


def test_no_key_for_values_json_cannot_carry(tmp_path: Path) -> None:
    assert _key({**REQUEST, "extra": float("nan")}, tmp_path) is None


def _aged(path: Path, seconds: float = 60) -> None:
    # as a file saved a minute ago: past the window where its stamp alone cannot be trusted
    then = time.time_ns() - int(seconds * 1e9)
    os.utime(path, ns=(then, then))


def _file_key(tmp_path: Path, name: str = "t.csv") -> AnswerKey:
    key = keyed({**REQUEST, "dataset": {"path": name}}, base_dir=tmp_path, data_roots=())
    assert key is not None and key.file is not None
    return key


def _unchanged(key: AnswerKey, tmp_path: Path) -> bool:
    return unchanged_since(key, base_dir=tmp_path, data_roots=())


def test_an_untouched_file_is_unchanged_without_reading_it_again(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    table = tmp_path / "t.csv"
    table.write_bytes(b"a,b\n1,2\n")
    _aged(table)
    key = _file_key(tmp_path)
    assert key.value == _key({**REQUEST, "dataset": {"path": "t.csv"}}, tmp_path)
    reads: list[Path] = []
    hash_file = answer_keys._hash_file
    monkeypatch.setattr(answer_keys, "_hash_file", lambda p: reads.append(p) or hash_file(p))
    assert _unchanged(key, tmp_path)
    assert reads == []  # the stamp alone told: the bytes were read once, for the key
    assert _unchanged(keyed(REQUEST, base_dir=tmp_path, data_roots=()), tmp_path)  # a sample


@pytest.mark.parametrize("how", ["rewritten", "same_bytes_again", "renamed_over", "relinked"])
def test_a_file_written_or_replaced_after_the_key_read_it_is_changed(
    tmp_path: Path, how: str
) -> None:
    table = tmp_path / "t.csv"
    table.write_bytes(b"a,b\n1,2\n")
    other = tmp_path / "other.csv"
    other.write_bytes(b"a,b\n1,3\n")
    link = tmp_path / "link.csv"
    link.symlink_to(table)
    for path in (table, other):
        _aged(path)
    key = _file_key(tmp_path, "link.csv")
    if how == "rewritten":  # same size, other bytes
        table.write_bytes(b"a,b\n1,3\n")
    elif how == "same_bytes_again":  # a save that changed nothing still counts: no answer kept
        table.write_bytes(b"a,b\n1,2\n")
    elif how == "renamed_over":  # an editor's atomic save: a new file under the old name
        os.replace(other, table)
    else:
        link.unlink()
        link.symlink_to(other)
    assert not _unchanged(key, tmp_path)


def test_a_file_modified_moments_before_the_key_is_hashed_again(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    # its stamp could survive a write in the same clock tick, so the bytes decide
    table = tmp_path / "t.csv"
    table.write_bytes(b"a,b\n1,2\n")
    key = _file_key(tmp_path)
    reads: list[Path] = []
    hash_file = answer_keys._hash_file
    monkeypatch.setattr(answer_keys, "_hash_file", lambda p: reads.append(p) or hash_file(p))
    assert _unchanged(key, tmp_path)
    assert reads == [table]


@pytest.fixture(params=["sqlite", "postgresql"])
def database_url(request: pytest.FixtureRequest, tmp_path: Path) -> str:
    if request.param == "sqlite":
        return f"sqlite:///{tmp_path / 'store.sqlite'}"
    url: str = request.getfixturevalue("postgresql_url")
    return url


def test_only_a_succeeded_local_job_with_the_key_answers(tmp_path: Path, database_url: str) -> None:
    settings = load_settings(
        {"FOLDWISE_HOME": str(tmp_path / "home"), "FOLDWISE_DATABASE_URL": database_url}
    )
    key = _key(REQUEST, tmp_path)
    assert key is not None
    outcome = run_embedded(REQUEST, settings=settings)
    assert find_answer(database_url, key) is None  # run_embedded alone keys nothing
    keep_answer(database_url, outcome.job_id, key)
    found = find_answer(database_url, key)
    assert found is not None
    assert (found.job_id, found.result) == (outcome.job_id, outcome.result)
    assert find_answer(database_url, "0" * 64) is None

    engine = make_engine(database_url)
    sessions = make_session_factory(engine)
    try:
        # another team's job, or a job that did not succeed, never answers the command line
        for change in ({"team": "analysts"}, {"status": "failed"}):
            with sessions.begin() as session:
                session.execute(update(Job).where(Job.id == outcome.job_id).values(**change))
            assert find_answer(database_url, key) is None, change
            with sessions.begin() as session:
                session.execute(
                    update(Job)
                    .where(Job.id == outcome.job_id)
                    .values(team="local", status="succeeded")
                )
            assert find_answer(database_url, key) is not None  # restored, it answers again
        with sessions() as session:
            assert session.scalar(select(Job.answer_key)) == key
    finally:
        engine.dispose()


def test_a_store_below_the_newest_revision_or_missing_is_a_miss_and_left_alone(
    tmp_path: Path,
) -> None:
    missing = tmp_path / "none.sqlite"
    assert find_answer(f"sqlite:///{missing}", "0" * 64) is None
    assert not missing.exists()

    settings = load_settings({"FOLDWISE_HOME": str(tmp_path / "home")})
    key = _key(REQUEST, tmp_path)
    assert key is not None
    outcome = run_embedded(REQUEST, settings=settings)
    keep_answer(settings.database_url, outcome.job_id, key)
    assert find_answer(settings.database_url, key) is not None
    engine = make_engine(settings.database_url)
    try:
        with engine.begin() as connection:
            connection.exec_driver_sql("UPDATE alembic_version SET version_num = '0013'")
    finally:
        engine.dispose()
    assert find_answer(settings.database_url, key) is None
