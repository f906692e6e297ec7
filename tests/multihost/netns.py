"""Hosts on one machine: network namespaces joined by veth pairs (`ip netns`, `ip link`).

The server host is the hub. The test process (the root namespace) and each worker host have
their own point-to-point link to it, so a worker host reaches PostgreSQL, Redis and the API only
over its link, and cutting that link (on the server's side, so the worker sees no error, only
silence) partitions it. Names carry a per-run id, so runs never meet, and `teardown` deletes
what `build` made even when a test failed half-way.
"""

from __future__ import annotations

import contextlib
import random
import subprocess
import uuid
from collections.abc import Sequence
from dataclasses import dataclass, field

SERVER = "srv"
# the route table that holds the server host's dead-end route to the broker (`misroute_broker`)
DEAD_END_TABLE = "4242"


def ip(*arguments: str, namespace: str | None = None) -> str:
    """Run `ip [-n NAMESPACE] ARGUMENTS`; its output, or CalledProcessError with its message."""
    command = ["ip", *(("-n", namespace) if namespace else ()), *arguments]
    done = subprocess.run(command, capture_output=True, text=True)
    if done.returncode != 0:
        raise subprocess.CalledProcessError(done.returncode, command, done.stdout, done.stderr)
    return done.stdout


def add_namespace(name: str) -> None:
    """A new network namespace with its loopback up."""
    ip("netns", "add", name)
    ip("link", "set", "lo", "up", namespace=name)


def delete_namespace(name: str) -> None:
    """Delete a namespace (its veth ends go with it); nothing if it is already gone."""
    with contextlib.suppress(subprocess.CalledProcessError):
        ip("netns", "del", name)


def in_namespace(namespace: str | None) -> list[str]:
    """The command prefix that runs a program inside `namespace` (None: the root namespace)."""
    return ["ip", "netns", "exec", namespace] if namespace else []


@dataclass(frozen=True)
class Link:
    """A veth pair between the server host and one other host, with an address at each end."""

    host: str | None  # the other end's namespace; None is the root namespace (the test process)
    server_device: str
    host_device: str
    server_address: str
    host_address: str


def connect(server: str, link: Link) -> None:
    """Create the veth pair of `link`, put its ends in their namespaces, address them, up."""
    ip("link", "add", link.server_device, "type", "veth", "peer", "name", link.host_device)
    ip("link", "set", link.server_device, "netns", server)
    if link.host is not None:
        ip("link", "set", link.host_device, "netns", link.host)
    for namespace, device, address in (
        (server, link.server_device, link.server_address),
        (link.host, link.host_device, link.host_address),
    ):
        ip("addr", "add", f"{address}/30", "dev", device, namespace=namespace)
        ip("link", "set", device, "up", namespace=namespace)


def set_link(server: str, link: Link, *, up: bool) -> None:
    """Take the server's end of a link down (packets vanish, nobody is told) or up again."""
    ip("link", "set", link.server_device, "up" if up else "down", namespace=server)


def free_subnet() -> int:
    """A second octet for 10.X.0.0/16 that no route of the root namespace uses."""
    used = ip("-4", "route", "show", "table", "all")
    for _ in range(100):
        octet = random.randint(100, 250)
        if f"10.{octet}." not in used:
            return octet
    raise RuntimeError("no free 10.X.0.0/16 among 10.100-10.250 in the root namespace")


@dataclass
class Topology:
    """One server host and the hosts linked to it, named uniquely for this run."""

    hosts: Sequence[str]
    run: str = field(default_factory=lambda: uuid.uuid4().hex[:6])
    octet: int = field(default_factory=free_subnet)
    links: dict[str | None, Link] = field(default_factory=dict)

    @property
    def server(self) -> str:
        """The server host's namespace."""
        return self.namespace(SERVER)

    def namespace(self, host: str) -> str:
        """The namespace name of a host of this run."""
        return f"fw-{self.run}-{host}"

    def link(self, host: str | None) -> Link:
        """The link between the server host and `host` (None: the test process)."""
        return self.links[host]

    def server_address(self, host: str | None) -> str:
        """The address at which `host` reaches the server host."""
        return self.links[host].server_address

    def build(self) -> None:
        """Create the namespaces and links; on any failure undo what was made."""
        try:
            add_namespace(self.server)
            for index, host in enumerate([None, *self.hosts]):
                namespace = None if host is None else self.namespace(host)
                if namespace is not None:
                    add_namespace(namespace)
                label = host or "t"
                self.links[host] = Link(
                    host=namespace,
                    # at most 15 characters, unique on the machine while the pair is created
                    server_device=f"fw{self.run}s{index}",
                    host_device=f"fw{self.run}{label[:5]}",
                    server_address=f"10.{self.octet}.{index}.1",
                    host_address=f"10.{self.octet}.{index}.2",
                )
                connect(self.server, self.links[host])
        except BaseException:
            self.teardown()
            raise

    def teardown(self) -> None:
        """Delete every namespace of this run, and the root end of the test process's link."""
        for host in self.hosts:
            delete_namespace(self.namespace(host))
        delete_namespace(self.server)  # takes the server ends, and so each pair, with it
        link = self.links.get(None)
        if link is not None:
            with contextlib.suppress(subprocess.CalledProcessError):
                ip("link", "del", link.host_device)


def misroute_broker(server: str, address: str, port: int, via: Link) -> None:
    """Send the server host's own traffic to `address`:`port` out of the `via` link.

    `via` leads to a host that does not forward (a new namespace never does), so they vanish:
    a connection to the broker hangs (no error), as when the broker's path is broken. Only this
    host's processes are affected; worker hosts' traffic arrives from outside, answered as ever.
    """
    ip("route", "add", f"{address}/32", "via", via.host_address, "table", DEAD_END_TABLE,
       namespace=server)  # fmt: skip
    # a rule ahead of the local table, which would otherwise deliver the packets on loopback
    ip("rule", "add", "pref", "10", "lookup", "local", namespace=server)
    with contextlib.suppress(subprocess.CalledProcessError):
        ip("rule", "del", "pref", "0", namespace=server)
    ip("rule", "add", "pref", "5", "to", address, "ipproto", "tcp", "dport", str(port),
       "lookup", DEAD_END_TABLE, namespace=server)  # fmt: skip


def route_broker_again(server: str) -> None:
    """Undo `misroute_broker`: the server host reaches its own broker again."""
    ip("rule", "del", "pref", "5", namespace=server)
    ip("route", "flush", "table", DEAD_END_TABLE, namespace=server)
