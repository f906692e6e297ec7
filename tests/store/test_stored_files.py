"""Tables and models kept in the store by hash, and this host's bounded copies of them.

Both backends. The reference for "intact" is hashlib's sha256 of the bytes that went in, and for
a table the frame scikit-learn ships (load_breast_cancer(as_frame=True)).
"""

from __future__ import annotations

import hashlib
import multiprocessing
import os
import time
from pathlib import Path

import pandas as pd
import pytest
from sklearn.datasets import load_breast_cancer
from sqlalchemy import Engine, func, select, update

from service.config import load_settings
from service.datasets.canonical import content_hash
from service.datasets.sources import table_from_frame
from service.datasets.store import keep_table, stored_frame
from service.store import blobs
from service.store.blob_models import BlobChunk
from service.store.db import make_engine, make_session_factory
from service.store.host_cache import CopyRefused, HostCache, evict, local_copy

MB = 1024 * 1024


def _cache(folder: Path, cap: int = 10 * MB * 1024) -> HostCache:
    return HostCache({"table": folder / "datasets", "model": folder / "models"}, cap)


def _put(engine: Engine, data: bytes) -> str:
    key = hashlib.sha256(data).hexdigest()
    with make_session_factory(engine).begin() as session:
        blobs.put_bytes(session, "model", key, data)
    return key


def _leftovers(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.rglob("*.tmp"))


def test_a_table_registered_on_one_host_is_read_whole_on_another(
    engine: Engine, tmp_path: Path
) -> None:
    sessions = make_session_factory(engine)
    # reference: the frame scikit-learn ships
    shipped = load_breast_cancer(as_frame=True).frame
    table = table_from_frame(shipped, {"sample": "breast_cancer"}, field="dataset")
    api_host = load_settings({"FOLDWISE_HOME": str(tmp_path / "api"), "FOLDWISE_DATABASE_URL": "x"})
    worker_host = load_settings(
        {"FOLDWISE_HOME": str(tmp_path / "w"), "FOLDWISE_DATABASE_URL": "x"}
    )
    with sessions.begin() as session:
        keep_table(session, table.frame, table.content_hash, api_host)
    with sessions.begin() as session:  # registering again stores nothing more (idempotent)
        keep_table(session, table.frame, table.content_hash, api_host)
        assert session.scalar(select(func.count()).select_from(BlobChunk)) == 1
    with sessions() as session:
        frame = stored_frame(session, table.content_hash, worker_host)
    assert content_hash(frame) == table.content_hash
    pd.testing.assert_frame_equal(
        frame.astype("float64"), shipped.astype("float64"), check_dtype=False
    )


def test_a_file_of_several_chunks_arrives_byte_for_byte(engine: Engine, tmp_path: Path) -> None:
    data = os.urandom(2 * blobs.CHUNK_BYTES + 12345)
    key = _put(engine, data)
    with make_session_factory(engine)() as session:
        assert blobs.header(session, "model", key).chunks == 3  # type: ignore[union-attr]
        path = local_copy(session, _cache(tmp_path), "model", key)
    assert hashlib.sha256(path.read_bytes()).hexdigest() == key
    assert path.read_bytes() == data


@pytest.mark.parametrize("damage", ["changed", "short"])
def test_a_damaged_copy_in_the_store_is_refused_naming_the_hash(
    engine: Engine, tmp_path: Path, damage: str
) -> None:
    data = os.urandom(blobs.CHUNK_BYTES + 1000)
    key = _put(engine, data)
    with make_session_factory(engine).begin() as session:
        where = (BlobChunk.key == key) & (BlobChunk.seq == 1)
        if damage == "changed":
            session.execute(update(BlobChunk).where(where).values(data=b"\x00" * 1000))
        else:
            session.execute(BlobChunk.__table__.delete().where(where))
    cache = _cache(tmp_path)
    with make_session_factory(engine)() as session, pytest.raises(CopyRefused) as refused:
        local_copy(session, cache, "model", key)
    sentence = str(refused.value)
    assert key in sentence and "damaged" in sentence and "\n" not in sentence
    assert not cache.path("model", key).exists()  # nothing half-made is left to be used
    assert _leftovers(tmp_path) == []


def test_the_folders_stay_under_their_cap_least_recently_used_first(
    engine: Engine, tmp_path: Path
) -> None:
    cache = _cache(tmp_path, cap=3 * MB + MB // 2 + 100)  # three copies and the only copy
    keys = [_put(engine, os.urandom(MB)) for _ in range(5)]
    # a copy the store lacks is the only one there is: never evicted, though it is the oldest
    only_copy = cache.path("model", "f" * 64)
    only_copy.parent.mkdir(parents=True)
    only_copy.write_bytes(os.urandom(MB // 2))
    os.utime(only_copy, (1, 1))
    sessions = make_session_factory(engine)
    start = time.time() - 1000
    for number, key in enumerate(keys):
        with sessions() as session:
            path = local_copy(session, cache, "model", key)
        os.utime(path, (start + number, start + number))  # used in this order
        if number == 2:  # the first one used again: more recent than the second and third
            os.utime(cache.path("model", keys[0]), (start + 2.5, start + 2.5))
        held = sum(p.stat().st_size for p in cache.directories["model"].iterdir() if p.is_file())
        assert held <= cache.cap_bytes, f"{held} bytes held after fetch {number}"
    present = {n for n, key in enumerate(keys) if cache.path("model", key).exists()}
    assert present == {0, 3, 4}, "1 and 2 were the least recently used"
    assert only_copy.exists()
    with sessions() as session:  # a second sweep finds nothing more to do
        assert evict(session, cache) == []


def _fetch_in_a_process(url: str, folder: str, key: str, start: float) -> tuple[int, str]:
    engine = make_engine(url)
    try:
        time.sleep(max(0.0, start - time.time()))  # all processes ask at the same moment
        with make_session_factory(engine)() as session:
            path = local_copy(session, _cache(Path(folder)), "model", key)
        return path.stat().st_ino, hashlib.sha256(path.read_bytes()).hexdigest()
    finally:
        engine.dispose()


def test_concurrent_fetches_of_one_hash_on_one_host_make_one_good_file(
    engine: Engine, db_url: str, tmp_path: Path
) -> None:
    key = _put(engine, os.urandom(3 * blobs.CHUNK_BYTES))
    start = time.time() + 4  # after the spawned interpreters have imported everything
    with multiprocessing.get_context("spawn").Pool(4) as pool:
        seen = pool.starmap(
            _fetch_in_a_process, [(db_url, str(tmp_path), key, start) for _ in range(4)]
        )
    assert {digest for _, digest in seen} == {key}
    # one inode: the file was renamed into place once, so it was downloaded once
    assert len({inode for inode, _ in seen}) == 1
    assert _leftovers(tmp_path) == []


def test_a_copy_already_in_a_shared_folder_is_used_without_a_transfer(
    engine: Engine, tmp_path: Path
) -> None:
    data = os.urandom(blobs.CHUNK_BYTES + 10)
    key = _put(engine, data)
    shared = _cache(tmp_path / "shared")
    shared.path("model", key).parent.mkdir(parents=True)
    shared.path("model", key).write_bytes(data)  # another host put it there
    with make_session_factory(engine).begin() as session:  # a transfer now would be refused
        session.execute(update(BlobChunk).where(BlobChunk.key == key).values(data=b"x"))
    with make_session_factory(engine)() as session:
        path = local_copy(session, shared, "model", key)
    assert hashlib.sha256(path.read_bytes()).hexdigest() == key


def test_a_damaged_copy_on_this_host_is_replaced_from_the_store(
    engine: Engine, tmp_path: Path
) -> None:
    data = os.urandom(blobs.CHUNK_BYTES + 10)
    key = _put(engine, data)
    cache = _cache(tmp_path)
    cache.path("model", key).parent.mkdir(parents=True)
    cache.path("model", key).write_bytes(data[:-1])  # a short file left by a full disk
    with make_session_factory(engine)() as session:
        path = local_copy(session, cache, "model", key)
    assert hashlib.sha256(path.read_bytes()).hexdigest() == key
