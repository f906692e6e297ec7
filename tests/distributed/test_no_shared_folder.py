"""Hosts that share no folder: tables and the final model travel through the store by hash.

The API runs on the stack's FOLDWISE_HOME; each worker has its own empty one, as a machine with
only the database and broker addresses would. The embedded run (one process, SQLite) is the
reference, as in test_rest.py.
"""

from __future__ import annotations

import hashlib
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import httpx
from sqlalchemy import select, update

from service.cli.local_server import answers_healthz, free_port
from service.store.blob_models import BlobChunk
from service.store.models import Job, WorkUnit

from .requests import small_request
from .stack import FINISHED, Stack, comparable, wait_until


def _files(folder: Path, pattern: str) -> list[str]:
    return sorted(p.name for p in folder.rglob(pattern)) if folder.exists() else []


def test_workers_without_the_api_folder_run_a_rest_job_like_the_embedded_run(
    stack: Stack, tmp_path: Path, embedded_result: Callable[[dict[str, Any]], dict[str, Any]]
) -> None:
    homes = {name: tmp_path / f"{name}-host" for name in ("w1", "w2")}
    workers = [stack.start_worker(name, home=home) for name, home in homes.items()]
    for worker in workers:
        stack.wait_ready(worker, "ready.")
    port = free_port()
    base = f"http://127.0.0.1:{port}"
    stack.start("api", "serve", "--host", "127.0.0.1", "--port", str(port))
    wait_until(lambda: answers_healthz(base), 60, "the API answering /healthz", stack)
    request = small_request()
    headers = {"Authorization": f"Bearer {stack.token('no-shared-folder')}"}

    with httpx.Client(base_url=base, headers=headers) as api:
        submitted = api.post("/v1/jobs", json=request, timeout=30)
        assert submitted.status_code == 202, submitted.text
        deadline = time.monotonic() + 120
        while True:
            job = api.get(submitted.headers["location"], timeout=30).json()
            if job["status"] not in ("queued", "running") or time.monotonic() > deadline:
                break
            time.sleep(0.5)
        assert job["status"] == "succeeded", f"{job}\n{stack.logs()}"
        # the same result as one process on SQLite, fold for fold
        assert comparable(job["result"]) == comparable(embedded_result(request))
        table = f"{job['result']['dataset_hash']}.parquet"
        fetched = [name for name, home in homes.items() if table in _files(home, "*.parquet")]
        assert fetched, "no worker fetched the table into its own folder"
        # the refit wrote the model on a worker's disk and into the store, not on the API's
        sha256 = job["result"]["final_pick"]["model_sha256"]
        assert _files(stack.home, "*.skops") == []
        model = api.get(f"/v1/jobs/{job['id']}/model", timeout=60)
        # an audit runs on a worker, which reads the table through its own folder and the store
        started = api.post(f"/v1/jobs/{job['id']}/audit", json={"fraction": 0.25}, timeout=30)
        assert started.status_code == 202, started.text
        audit = wait_until(
            lambda: (
                (a := api.get(started.headers["location"], timeout=30).json())["status"]
                in ("done", "failed")
                and a
            ),
            120,
            "the audit ending",
            stack,
        )
    assert model.status_code == 200, model.text
    assert hashlib.sha256(model.content).hexdigest() == sha256  # hashlib, not our own hashing
    assert model.headers["x-model-sha256"] == sha256
    assert _files(stack.home, "*.skops") == [f"{sha256}.skops"]  # now cached on the API host
    # recomputed scores equal the stored ones bit for bit (same splits, seeds and versions)
    assert audit["status"] == "done", audit
    assert audit["report"]["identical"] > 0 and audit["report"]["differing"] == 0, audit
    assert audit["report"]["missing"] == 0
    with stack.sessions() as session:
        runners = set(session.scalars(select(WorkUnit.worker).where(WorkUnit.job_id == job["id"])))
    assert {str(r).split("@", 1)[0] for r in runners} <= {"w1", "w2"}


def test_a_damaged_table_in_the_store_fails_the_job_with_a_sentence_naming_it(
    stack: Stack, tmp_path: Path
) -> None:
    request = {**small_request(), "dataset": {"sample": "wine"}, "metrics": ["accuracy"]}
    job_id = stack.submit(request)  # units wait in the broker: no worker runs yet
    with stack.sessions.begin() as session:
        dataset_hash = session.get_one(Job, job_id).dataset_hash
        first = (BlobChunk.kind == "table") & (BlobChunk.key == dataset_hash) & (BlobChunk.seq == 0)
        data = session.scalar(select(BlobChunk.data).where(first))
        assert data is not None
        damaged = bytes([data[0] ^ 0xFF]) + data[1:]  # one byte flipped, the length kept
        session.execute(update(BlobChunk).where(first).values(data=damaged))
    home = tmp_path / "worker-host"
    stack.wait_ready(stack.start_worker("w1", home=home), "ready.")

    job = wait_until(
        lambda: (j := stack.job(job_id)).status in FINISHED and j, 90, "the job ending", stack
    )
    assert job.status == "failed"
    assert dataset_hash in job.error and "damaged" in job.error, job.error
    with stack.sessions() as session:
        errors = [
            u.error for u in session.scalars(select(WorkUnit).where(WorkUnit.job_id == job_id))
        ]
    failed = [e for e in errors if e]
    assert failed and all("Traceback" not in e and dataset_hash in e for e in failed), failed
    # nothing damaged, nor half a file, was left for a later unit to use
    assert _files(home, "*.parquet") == [] and _files(home, "*.tmp") == []
