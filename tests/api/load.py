"""A bounded load generator on loopback: concurrent readers of one finished job, and a prober.

Each reader asks in turn for GET /v1/jobs/{id} and a page of its fold scores
(GET /v1/jobs/{id}/fold-scores?limit=100), as fast as answers come, until the time is up. A 429
with Retry-After is back-pressure, not an error: the reader waits the seconds it names and asks
again, and the 429 is counted apart. Anything else but a 200 (another status, a transport error,
no answer within REQUEST_TIMEOUT) is an error. A prober asks /healthz every PROBE_EVERY seconds
throughout, from a process of its own; an answer later than a second counts as a missed probe.
"""

from __future__ import annotations

import asyncio
import multiprocessing
import statistics
import time
from dataclasses import dataclass, field
from typing import Any

import httpx

REQUEST_TIMEOUT = 10.0
PROBE_EVERY = 0.25
PROBE_DEADLINE = 1.0


@dataclass
class LoadReport:
    """What one load run measured."""

    readers: int
    seconds: float
    latencies: list[float] = field(default_factory=list)
    errors: list[str] = field(default_factory=list)
    throttled: int = 0
    throttled_without_retry_after: int = 0
    probes: list[float] = field(default_factory=list)
    missed_probes: int = 0
    recovery_seconds: float = float("nan")

    def quantile(self, q: float) -> float:
        """The q-quantile of answered requests' latency, in seconds."""
        if len(self.latencies) < 2:
            return self.latencies[0] if self.latencies else float("nan")
        return statistics.quantiles(self.latencies, n=100, method="inclusive")[round(q * 100) - 1]

    def line(self, label: str) -> str:
        """One printable line of figures."""
        probe_max = max(self.probes) if self.probes else float("nan")
        return (
            f"{label}: {self.readers} readers {self.seconds:.0f} s: "
            f"{len(self.latencies) / self.seconds:.0f} req/s, "
            f"p50 {self.quantile(0.50) * 1000:.0f} ms, p99 {self.quantile(0.99) * 1000:.0f} ms, "
            f"errors {len(self.errors)}, 429s {self.throttled}, "
            f"/healthz {len(self.probes)} probes max {probe_max * 1000:.0f} ms "
            f"missed {self.missed_probes}, recovery {self.recovery_seconds * 1000:.0f} ms"
        )


async def _reader(
    client: httpx.AsyncClient, paths: tuple[str, ...], stop_at: float, report: LoadReport
) -> None:
    turn = 0
    while time.monotonic() < stop_at:
        path = paths[turn % len(paths)]
        started = time.monotonic()
        try:
            answer = await client.get(path)
        except httpx.HTTPError as exc:
            report.errors.append(f"{path}: {type(exc).__name__}")
            continue
        elapsed = time.monotonic() - started
        if answer.status_code == 429:
            report.throttled += 1
            wait = answer.headers.get("retry-after", "")
            if not wait.isdigit():
                report.throttled_without_retry_after += 1
                report.errors.append(f"{path}: 429 without Retry-After")
            await asyncio.sleep(float(wait or 1))
            continue
        if answer.status_code != 200:
            report.errors.append(f"{path}: {answer.status_code} {answer.text[:200]}")
            continue
        report.latencies.append(elapsed)
        turn += 1


def _probe_loop(base_url: str, seconds: float, answers: Any) -> None:
    """Ask /healthz every PROBE_EVERY s for `seconds`; send back (latency, ok) pairs."""
    stop_at = time.monotonic() + seconds
    found: list[tuple[float, bool]] = []
    with httpx.Client(base_url=base_url, timeout=PROBE_DEADLINE) as client:
        while time.monotonic() < stop_at:
            started = time.monotonic()
            try:
                ok = client.get("/healthz").status_code == 200
            except httpx.HTTPError:
                ok = False
            elapsed = time.monotonic() - started
            found.append((elapsed, ok))
            time.sleep(max(0.0, PROBE_EVERY - elapsed))
    answers.put(found)


async def _recovery(base_url: str, token: str, path: str, limit: float = 60.0) -> float:
    """Seconds from the end of the load until one request and a probe both answer at once."""
    started = time.monotonic()
    headers = {"Authorization": f"Bearer {token}"}
    async with httpx.AsyncClient(base_url=base_url, timeout=REQUEST_TIMEOUT) as client:
        while time.monotonic() - started < limit:
            try:
                read = await client.get(path, headers=headers)
                probe = await client.get("/healthz")
                if read.status_code == 200 and probe.status_code == 200:
                    return time.monotonic() - started
            except httpx.HTTPError:
                pass
            await asyncio.sleep(0.05)
    return float("inf")


async def _run(base_url: str, token: str, job_id: str, readers: int, seconds: float) -> LoadReport:
    report = LoadReport(readers=readers, seconds=seconds)
    paths = (f"/v1/jobs/{job_id}", f"/v1/jobs/{job_id}/fold-scores?limit=100")
    limits = httpx.Limits(max_connections=readers, max_keepalive_connections=readers)
    stop_at = time.monotonic() + seconds
    # The prober is a process of its own: the readers' event loop is busy, and a probe timed
    # on it would measure the load generator's own delay, not the server's.
    answers: Any = multiprocessing.Queue()
    prober = multiprocessing.Process(target=_probe_loop, args=(base_url, seconds, answers))
    prober.start()
    async with httpx.AsyncClient(
        base_url=base_url,
        headers={"Authorization": f"Bearer {token}"},
        timeout=REQUEST_TIMEOUT,
        limits=limits,
    ) as client:
        await asyncio.gather(*(_reader(client, paths, stop_at, report) for _ in range(readers)))
    found = answers.get(timeout=REQUEST_TIMEOUT + seconds)
    prober.join(timeout=REQUEST_TIMEOUT)
    report.probes = [elapsed for elapsed, _ in found]
    report.missed_probes = sum(1 for e, ok in found if not ok or e > PROBE_DEADLINE)
    report.recovery_seconds = await _recovery(base_url, token, paths[0])
    return report


def run_readers(
    base_url: str, token: str, job_id: str, *, readers: int, seconds: float
) -> LoadReport:
    """Run `readers` concurrent readers for `seconds` (each stops by itself); then recovery."""
    return asyncio.run(_run(base_url, token, job_id, readers, seconds))
