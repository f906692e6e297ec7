"""foldwise deployed across the namespaces: API and beat on the server host, one worker per host.

Every test gets a fresh database on the private PostgreSQL and its own Redis database number, so
a fault in one test leaves nothing behind for the next; the servers and namespaces are shared.
Worker hosts get only the two addresses (database and broker) and a FOLDWISE_HOME of their own,
as on a machine with no shared folder. Every setting is at its default.
"""

from __future__ import annotations

import contextlib
import signal
import uuid
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import httpx
import psycopg
import redis
from distributed.stack import Process, Stack, deploy, wait_until

from service.cli.local_server import answers_healthz

from .netns import Topology, in_namespace
from .servers import PG_PORT, REDIS_PORT, Servers

API_PORT = 8000
WORKERS = ("w1", "w2")


def addresses(address: str, database: str, redis_db: int) -> dict[str, str]:
    """The two addresses a host needs, as seen from a host reaching the server at `address`."""
    return {
        "FOLDWISE_DATABASE_URL": f"postgresql+psycopg://postgres@{address}:{PG_PORT}/{database}",
        "FOLDWISE_BROKER_URL": f"redis://{address}:{REDIS_PORT}/{redis_db}",
    }


def create_database(servers: Servers, name: str, template: str | None = None) -> None:
    """An empty database on the private PostgreSQL, or a copy of `template`."""
    copy = f' TEMPLATE "{template}"' if template else ""
    with psycopg.connect(servers.admin_dsn(), autocommit=True) as admin:
        admin.execute(f'CREATE DATABASE "{name}"{copy}')


@dataclass(frozen=True)
class Template:
    """A database migrated once (`foldwise db upgrade`) with a token made in it (`token create`):
    each test's database is a copy, so no test pays for the two commands again."""

    database: str
    token: str


def make_template(topology: Topology, servers: Servers, folder: Path, name: str) -> Template:
    """Create, migrate and stock the template database, then close every connection to it."""
    create_database(servers, name)
    env = {"FOLDWISE_HOME": str(folder), **addresses(topology.server_address(None), name, 0)}
    stack = deploy(env, folder)
    try:
        return Template(name, stack.token("multihost"))
    finally:
        stack.engine.dispose()  # PostgreSQL copies a template only while nobody is connected


@dataclass
class Deployment:
    """One test's foldwise processes on the shared hosts, and the test process's handles."""

    topology: Topology
    servers: Servers
    stack: Stack  # the server host's environment; the test process reaches the same addresses
    folder: Path
    database: str
    redis_db: int
    token: str = ""

    @property
    def api(self) -> str:
        """The API's base URL from the test process."""
        return f"http://{self.topology.server_address(None)}:{API_PORT}"

    def client(self, timeout: float = 30) -> httpx.Client:
        """An HTTP client with this deployment's bearer token."""
        headers = {"Authorization": f"Bearer {self.token}"}
        return httpx.Client(base_url=self.api, headers=headers, timeout=timeout)

    def worker_homes(self) -> dict[str, Path]:
        """Each worker host's FOLDWISE_HOME: its own folder, shared with no other host."""
        return {host: self.folder / f"{host}-home" for host in WORKERS}

    def worker_env(self, host: str) -> dict[str, str]:
        """A worker host's whole configuration: its own home and the server's addresses."""
        home = self.worker_homes()[host]
        address = self.topology.server_address(host)
        return {"FOLDWISE_HOME": str(home), **addresses(address, self.database, self.redis_db)}

    def start_worker(self, host: str, name: str | None = None) -> Process:
        """`foldwise worker --concurrency 1` on worker host `host`, node name HOST@machine."""
        return self.stack.start(
            name or host,
            "worker", "--concurrency", "1", "--name", f"{host}@%h",
            launcher=in_namespace(self.topology.namespace(host)),
            env=self.worker_env(host),
        )  # fmt: skip

    def start_api(self, name: str = "api") -> Process:
        """`foldwise serve` on the server host, on all its addresses; waits until it answers."""
        process = self.stack.start(
            name, "serve", "--host", "0.0.0.0", "--port", str(API_PORT),
            launcher=in_namespace(self.topology.server),
        )  # fmt: skip
        wait_until(lambda: answers_healthz(self.api), 60, "the API answering /healthz", self.stack)
        return process

    def process(self, name: str) -> Process:
        """The last process started under `name`."""
        return [p for p in self.stack.processes if p.name == name][-1]

    def stop(self) -> None:
        """SIGKILL every process of this deployment: its database is thrown away, so no
        graceful stop is owed (a Celery warm shutdown would cost seconds per test)."""
        for process in self.stack.processes:
            process.kill_group(signal.SIGKILL)
        for process in self.stack.processes:
            process.popen.wait(timeout=10)
        self.stack.engine.dispose()

    def kill(self, name: str) -> None:
        """SIGKILL a process's whole group (as a machine or container dying) and reap it."""
        process = self.process(name)
        process.kill_group(signal.SIGKILL)
        process.popen.wait(timeout=10)


def start_deployment(
    topology: Topology, servers: Servers, template: Template, folder: Path, redis_db: int
) -> Deployment:
    """A copy of the template database; beat, the API and both workers started and ready."""
    database = f"foldwise_{uuid.uuid4().hex[:12]}"
    create_database(servers, database, template.database)
    with servers_redis(servers, redis_db) as client:
        client.flushdb()
    env = {
        "FOLDWISE_HOME": str(folder / "server-home"),
        **addresses(topology.server_address(None), database, redis_db),
    }
    stack = Stack(env, folder / "server-home")
    deployment = Deployment(topology, servers, stack, folder, database, redis_db, template.token)
    try:
        workers = [deployment.start_worker(host) for host in WORKERS]
        beat = stack.start("beat", "beat", launcher=in_namespace(topology.server))
        deployment.start_api()
        for worker in workers:
            stack.wait_ready(worker, "ready.")
        stack.wait_ready(beat, "beat: Starting the reconcile")
    except BaseException:
        deployment.stop()
        raise
    return deployment


@contextlib.contextmanager
def servers_redis(servers: Servers, number: int) -> Iterator[redis.Redis]:
    """A client on one database of the private Redis, closed after."""
    client = redis.Redis(servers.address, REDIS_PORT, db=number, socket_timeout=5)
    try:
        yield client
    finally:
        client.close()
