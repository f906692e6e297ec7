"""A distributed foldwise on one machine for tests: real Celery worker and beat processes.

Each process runs in its own session (process group), so a test can SIGKILL a worker's main
process and its prefork children together, as a machine dying would, and teardown can end
every group it started.
"""

from __future__ import annotations

import contextlib
import json
import os
import signal
import subprocess
import sys
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import redis
from sqlalchemy import func, select

from service.auth import Principal
from service.config import Settings, load_settings
from service.dispatch import UNIT_QUEUE
from service.dispatch.celery_client import CeleryDispatcher
from service.jobs.intake.start import start_submitted
from service.jobs.intake.submit import submit_job
from service.store.db import make_engine, make_session_factory
from service.store.models import FoldScore, Job, WorkUnit

REPO = Path(__file__).resolve().parents[2]
TEAM = Principal("reliability", frozenset({"submit", "read"}))
FINISHED = ("succeeded", "failed", "cancelled")


@dataclass
class Process:
    """A started process and where its output goes."""

    name: str
    popen: subprocess.Popen[bytes]
    log: Path

    def tail(self, lines: int = 40) -> str:
        """The end of its log, for failure messages."""
        text = self.log.read_text(errors="replace") if self.log.exists() else ""
        return f"--- {self.name} ({self.log}) ---\n" + "\n".join(text.splitlines()[-lines:])

    def kill_group(self, sig: int = signal.SIGKILL) -> None:
        """Signal the whole process group (the main process and its pool children)."""
        with contextlib.suppress(ProcessLookupError):
            os.killpg(self.popen.pid, sig)


@dataclass
class Stack:
    """Environment, store handles and processes of one test's deployment."""

    env: dict[str, str]
    home: Path
    processes: list[Process] = field(default_factory=list)

    def __post_init__(self) -> None:
        self.settings: Settings = load_settings(self.env)
        self.engine = make_engine(self.settings.database_url)
        self.sessions = make_session_factory(self.engine)

    # processes ---------------------------------------------------------------------------
    def start(
        self,
        name: str,
        *arguments: str,
        home: Path | None = None,
        launcher: Sequence[str] = (),
        env: Mapping[str, str] | None = None,
    ) -> Process:
        """Start `python -m service.cli.main ARGUMENTS` in its own process group.

        `home`, if given, is its own FOLDWISE_HOME (a host that shares no folder with the
        others); `launcher` goes before the command (e.g. `ip netns exec HOST`, which execs, so
        the pid and group stay the program's); `env` overrides the deployment's variables.
        """
        log = self.home / "logs" / f"{name}.log"
        log.parent.mkdir(parents=True, exist_ok=True)
        process_env = {**self.process_env(), **(env or {})}
        if home is not None:
            process_env["FOLDWISE_HOME"] = str(home)
        with log.open("wb") as out:
            popen = subprocess.Popen(
                [*launcher, sys.executable, "-m", "service.cli.main", *arguments],
                cwd=REPO,
                env=process_env,
                stdout=out,
                stderr=subprocess.STDOUT,
                start_new_session=True,
            )
        process = Process(name, popen, log)
        self.processes.append(process)
        return process

    def process_env(self) -> dict[str, str]:
        """This process's environment with the deployment's variables on top."""
        return {**os.environ, **self.env}

    def start_worker(self, name: str, home: Path | None = None) -> Process:
        """A worker with one pool process, named NAME@host (on its own `home` if given)."""
        arguments = ("worker", "--concurrency", "1", "--name", f"{name}@%h")
        return self.start(name, *arguments, home=home)

    def start_beat(self) -> Process:
        """The one beat process, ticking the reconciler every FOLDWISE_RECONCILE_SECONDS."""
        return self.start("beat", "beat")

    def wait_ready(self, process: Process, marker: str, timeout: float = 60) -> None:
        """Wait until `marker` appears in the process's log."""
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if process.popen.poll() is not None:
                raise AssertionError(f"{process.name} exited early\n{process.tail()}")
            if marker in process.log.read_text(errors="replace"):
                return
            time.sleep(0.2)
        raise AssertionError(f"{process.name} not ready after {timeout}s\n{process.tail()}")

    def logs(self) -> str:
        """Every process's log tail."""
        return "\n".join(p.tail() for p in self.processes)

    def stop(self) -> None:
        """SIGKILL every process group this stack started, and close the store handles.

        Only teardown calls this, and the database and Redis database are thrown away after it,
        so no graceful stop is owed: a Celery warm shutdown waits for the unit in hand and beat's
        for its tick, 4-6 s per test (measured), as tests/multihost/deployment.py found too.
        """
        for process in self.processes:
            process.kill_group(signal.SIGKILL)
        for process in self.processes:
            process.popen.wait(timeout=10)
        self.engine.dispose()

    # jobs --------------------------------------------------------------------------------
    def submit(self, request: dict[str, Any]) -> str:
        """Store a job and publish its units, as the API does: commit first, then publish."""
        with self.sessions.begin() as session:
            job_id = submit_job(
                session, request, principal=TEAM, settings=self.settings, base_dir=REPO
            ).job.id
        self.publish(start_submitted(self.sessions, job_id, self.settings))
        return job_id

    def publish(self, unit_ids: list[int]) -> None:
        """Send run_unit messages by task name (the dispatcher records when), as the API does."""
        dispatcher = CeleryDispatcher(self.settings)
        try:
            dispatcher.publish(unit_ids)
        finally:
            dispatcher.close()

    def token(self, team: str) -> str:
        """A new submit-and-read token for `team`, made by the command an operator runs."""
        command = ["token", "create", "--team", team, "--scopes", "submit,read"]
        created = subprocess.run(
            [sys.executable, "-m", "service.cli.main", *command],
            cwd=REPO,
            env=self.process_env(),
            check=True,
            capture_output=True,
            text=True,
        )
        return created.stdout.strip()

    # broker ------------------------------------------------------------------------------
    def redis(self) -> redis.Redis:
        """A client on this deployment's Redis database."""
        return redis.Redis.from_url(self.env["FOLDWISE_BROKER_URL"])

    def flush_broker(self) -> None:
        """Empty the broker's database, as a restart of a Redis without persistence does."""
        with self.redis() as client:
            client.flushdb()

    def broker_idle(self) -> bool:
        """No unit message is waiting or unacknowledged."""
        with self.redis() as client:
            # kombu's redis transport keeps delivered, unacknowledged messages in "unacked"
            return client.llen(UNIT_QUEUE) == 0 and client.hlen("unacked") == 0

    def job(self, job_id: str) -> Job:
        """The job row as stored now."""
        with self.sessions() as session:
            return session.get_one(Job, job_id)

    def units_done(self, job_id: str) -> int:
        """How many of the job's units are done."""
        with self.sessions() as session:
            count = session.scalar(
                select(func.count()).where(WorkUnit.job_id == job_id, WorkUnit.status == "done")
            )
            return int(count or 0)

    def wait_finished(self, job_id: str, timeout: float) -> Job:
        """Poll the store until the job ends; fail with the process logs if it does not."""
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            job = self.job(job_id)
            if job.status in FINISHED:
                assert job.status == "succeeded", f"{job.status}: {job.error}\n{self.logs()}"
                return job
            time.sleep(0.25)
        units = self.unit_states(job_id)
        raise AssertionError(f"job {job_id} unfinished after {timeout}s: {units}\n{self.logs()}")

    def unit_states(self, job_id: str) -> dict[str, int]:
        """Count of the job's units by status."""
        with self.sessions() as session:
            rows = session.execute(
                select(WorkUnit.status, func.count())
                .where(WorkUnit.job_id == job_id)
                .group_by(WorkUnit.status)
            )
            return {status: int(n) for status, n in rows}


def comparable(result: dict[str, Any]) -> dict[str, Any]:
    """The parts of result v1 that must not depend on where or how often units ran."""
    keys = ("outer", "estimate", "final_pick", "pick_frequency", "optimism_gap", "dataset_hash")
    # through JSON, as both stores hand it back
    return json.loads(json.dumps({k: result[k] for k in keys}, allow_nan=False))


def duplicated_keys(stack: Stack, job_id: str | None = None) -> list[Any]:
    """Fold-score keys stored more than once, of one job or of all (there must be none)."""
    query = select(FoldScore.fold_fingerprint, FoldScore.candidate_key, FoldScore.metric)
    if job_id is not None:
        query = query.where(FoldScore.job_id == job_id)
    with stack.sessions() as session:
        return list(
            session.execute(
                query.group_by(
                    FoldScore.fold_fingerprint, FoldScore.candidate_key, FoldScore.metric
                ).having(func.count() > 1)
            )
        )


def running_units(stack: Stack, job_id: str) -> list[WorkUnit]:
    """The job's units some worker holds right now."""
    with stack.sessions() as session:
        return list(
            session.scalars(
                select(WorkUnit).where(WorkUnit.job_id == job_id, WorkUnit.status == "running")
            )
        )


def wait_until(condition: Any, timeout: float, what: str, stack: Stack) -> Any:
    """Poll `condition()` until it returns something truthy."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        value = condition()
        if value:
            return value
        time.sleep(0.1)
    raise AssertionError(f"not within {timeout}s: {what}\n{stack.logs()}")


def deploy(env: dict[str, str], home: Path) -> Stack:
    """The deploy step, exactly as an operator runs it (`db upgrade`), then the stack's handle."""
    subprocess.run(
        [sys.executable, "-m", "service.cli.main", "db", "upgrade"],
        cwd=REPO,
        env={**os.environ, **env},
        check=True,
        capture_output=True,
    )
    return Stack(env, home)


def start_workers_and_beat(stack: Stack) -> Stack:
    """Two workers (one pool process each) and one beat, started and waited for until ready."""
    workers = [stack.start_worker("w1"), stack.start_worker("w2")]
    beat = stack.start_beat()
    for worker in workers:
        stack.wait_ready(worker, "ready.")
    stack.wait_ready(beat, "beat: Starting the reconcile")
    return stack
