"""A private PostgreSQL and Redis on the server host, which a test may stop and start again.

Neither is the machine's shared service: PostgreSQL is a fresh cluster (initdb) in a temporary
folder, run as the `postgres` OS user because it refuses to run as root; Redis keeps nothing on
disk (--save "" --appendonly no), so a restart loses every queued message, as a cache-only Redis
does. Both listen on every address of the server host's namespace, that is its veth links only.
"""

from __future__ import annotations

import contextlib
import glob
import shutil
import signal
import subprocess
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import psycopg
import redis
from distributed.stack import Process

from .netns import in_namespace

PG_PORT = 5432
REDIS_PORT = 6379


def postgresql_bin(program: str) -> str:
    """The newest installed PostgreSQL's `program` (Debian keeps them per major version)."""
    found = sorted(glob.glob(f"/usr/lib/postgresql/*/bin/{program}"), key=_major)
    if not found:
        raise RuntimeError(f"no /usr/lib/postgresql/*/bin/{program}; install PostgreSQL")
    return found[-1]


def _major(path: str) -> int:
    return int(Path(path).parts[4])


def as_postgres() -> list[str]:
    """Run the rest of the command as the postgres user, exec'd (the pid stays the program's)."""
    return ["setpriv", "--reuid", "postgres", "--regid", "postgres", "--init-groups", "--"]


def launch(name: str, command: list[str], log: Path) -> Process:
    """Start `command` in its own process group, its output in `log`."""
    with log.open("ab") as out:
        popen = subprocess.Popen(
            command, stdout=out, stderr=subprocess.STDOUT, start_new_session=True
        )
    return Process(name, popen, log)


def stop(process: Process, sig: int = signal.SIGTERM, timeout: float = 30) -> None:
    """Signal a server's process group and wait for it to exit; SIGKILL if it will not."""
    process.kill_group(sig)
    try:
        process.popen.wait(timeout=timeout)
    except subprocess.TimeoutExpired:
        process.kill_group(signal.SIGKILL)
        process.popen.wait(timeout=10)


def wait_for(check: Callable[[], object], what: str, timeout: float = 60) -> None:
    """Poll `check()` (which raises while not ready) until it returns."""
    deadline = time.monotonic() + timeout
    while True:
        try:
            check()
            return
        except Exception as exc:
            if time.monotonic() > deadline:
                raise AssertionError(f"{what} not ready after {timeout}s: {exc}") from exc
            time.sleep(0.2)


@dataclass
class Servers:
    """The server host's PostgreSQL and Redis, and how the test process reaches them."""

    namespace: str
    address: str  # the server host's address on the test process's link
    folder: Path
    postgresql: Process | None = None
    redis: Process | None = None

    @property
    def data(self) -> Path:
        """PostgreSQL's data directory (also its socket directory: never the shared one)."""
        return self.folder / "pgdata"

    def admin_dsn(self) -> str:
        """A libpq connection string for the superuser, from the test process."""
        return f"host={self.address} port={PG_PORT} user=postgres dbname=postgres"

    def init_postgresql(self) -> None:
        """initdb a new cluster owned by postgres, trusting connections (a private test host)."""
        self.folder.chmod(0o755)
        self.data.mkdir(mode=0o700)
        shutil.chown(self.data, "postgres", "postgres")
        subprocess.run(
            [*as_postgres(), postgresql_bin("initdb"), "-D", str(self.data), "-U", "postgres",
             "-A", "trust", "--no-sync", "--no-instructions"],
            check=True, capture_output=True,
        )  # fmt: skip
        with (self.data / "pg_hba.conf").open("a") as hba:
            # the hosts are the namespaces' links, which nothing outside this machine reaches
            hba.write("host all all 0.0.0.0/0 trust\n")

    def start_postgresql(self) -> None:
        """Start the postmaster on every address of the server host; wait until it answers."""
        self.postgresql = launch(
            "postgresql",
            [*in_namespace(self.namespace), *as_postgres(), postgresql_bin("postgres"),
             "-D", str(self.data), "-p", str(PG_PORT), "-c", "listen_addresses=*",
             "-c", f"unix_socket_directories={self.data}"],
            self.folder / "postgresql.log",
        )  # fmt: skip
        wait_for(lambda: psycopg.connect(self.admin_dsn(), connect_timeout=2).close(), "PostgreSQL")

    def stop_postgresql(self) -> None:
        """A fast shutdown (SIGINT: sessions are ended, open transactions rolled back)."""
        if self.postgresql is not None:
            stop(self.postgresql, signal.SIGINT)

    def start_redis(self) -> None:
        """Start an empty Redis with nothing on disk; wait until it answers."""
        self.redis = launch(
            "redis",
            [*in_namespace(self.namespace), "redis-server", "--port", str(REDIS_PORT),
             "--bind", "0.0.0.0", "--protected-mode", "no", "--save", "",
             "--appendonly", "no", "--dir", str(self.folder)],
            self.folder / "redis.log",
        )  # fmt: skip
        wait_for(lambda: redis.Redis(self.address, REDIS_PORT, socket_timeout=2).ping(), "Redis")

    def stop_redis(self) -> None:
        """Stop Redis; with no persistence, every queued and unacknowledged message is gone."""
        if self.redis is not None:
            stop(self.redis, signal.SIGTERM)

    def ensure_running(self) -> None:
        """Start whichever of the two is not running (a failed test may have left it down)."""
        if self.postgresql is None or self.postgresql.popen.poll() is not None:
            self.start_postgresql()
        if self.redis is None or self.redis.popen.poll() is not None:
            self.start_redis()

    def stop(self) -> None:
        """Stop both, whatever state they are in."""
        for stopping in (self.stop_redis, self.stop_postgresql):
            with contextlib.suppress(Exception):
                stopping()


def start_servers(namespace: str, address: str) -> Servers:
    """A fresh PostgreSQL cluster and an empty Redis on the server host; stopped on failure."""
    servers = Servers(namespace, address, Path(tempfile.mkdtemp(prefix="foldwise-multihost-")))
    try:
        servers.init_postgresql()
        servers.start_postgresql()
        servers.start_redis()
    except BaseException:
        remove(servers)
        raise
    return servers


def remove(servers: Servers) -> None:
    """Stop the servers and delete their folder."""
    servers.stop()
    shutil.rmtree(servers.folder, ignore_errors=True)
