"""The hosts and servers one test module shares, and each test's fresh deployment on them.

Namespaces and veth links need root (CI runs as root); like PostgreSQL in tests/conftest.py,
their absence fails the tests rather than skipping them, so a green run always means they ran.
"""

from __future__ import annotations

import itertools
import os
from collections.abc import Iterator
from pathlib import Path

import pytest

from .deployment import WORKERS, Deployment, Template, make_template, start_deployment
from .jobs import fault_request
from .netns import Topology
from .reference import Reference, start_reference
from .servers import Servers, remove, start_servers

# a host with no processes, the dead end of the server's misrouted broker traffic
VOID = "void"
_REDIS_DATABASES = itertools.count(1)


@pytest.fixture(scope="module")
def topology() -> Iterator[Topology]:
    """The server host, two worker hosts and the dead end, linked; deleted after the module."""
    if os.geteuid() != 0:
        pytest.fail("the multi-host tests create network namespaces: run them as root (CI does)")
    hosts = Topology(hosts=(*WORKERS, VOID))
    hosts.build()
    try:
        yield hosts
    finally:
        hosts.teardown()


@pytest.fixture(scope="module")
def servers(topology: Topology) -> Iterator[Servers]:
    """The server host's private PostgreSQL and Redis, for the module."""
    running = start_servers(topology.server, topology.server_address(None))
    try:
        yield running
    finally:
        remove(running)


@pytest.fixture(scope="module")
def reference(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Reference]:
    """The embedded run of the fault tests' request, computing in the background from now."""
    running = start_reference(fault_request(), tmp_path_factory.mktemp("embedded"))
    try:
        yield running
    finally:
        running.stop()


@pytest.fixture(scope="module")
def template(
    topology: Topology, servers: Servers, tmp_path_factory: pytest.TempPathFactory
) -> Template:
    """The migrated database, with a token, that each test's database copies."""
    folder = tmp_path_factory.mktemp("template")
    return make_template(topology, servers, folder, f"foldwise_template_{topology.run}")


@pytest.fixture
def deployment(
    topology: Topology, servers: Servers, template: Template, tmp_path: Path
) -> Iterator[Deployment]:
    """A database of its own, API and beat on the server host, a worker on each worker host."""
    servers.ensure_running()
    redis_db = next(_REDIS_DATABASES) % 16
    running = start_deployment(topology, servers, template, tmp_path, redis_db)
    try:
        yield running
    finally:
        running.stop()
