"""Back-pressure: a bound on requests in flight, so probes answer and excess load gets a 429.

Sync routes run on anyio's thread pool and each holds one store connection while it runs. The
three limits are chosen together (FOLDWISE_API_THREADS = T):
- at most T requests are admitted at once, so no admitted request waits for a thread;
- the PostgreSQL pool holds T connections plus T overflow, so a thread never waits for a
  connection (a request's session may still be committing on its exit thread when the next
  request starts);
- at most 4 T more wait for a slot, each for up to QUEUE_WAIT_SECONDS; past that, or with the
  queue full, the answer is 429 with Retry-After. A stall becomes a quick, honest refusal.
Probes, metrics-free pages (problem types, static files) bypass the bound: /healthz answers
without a thread or the store, /readyz reads the store on a thread limiter of its own.
"""

from __future__ import annotations

import os

import anyio
from starlette.types import ASGIApp, Receive, Scope, Send

from service.errors import BadInput
from service.http.problems import problem_response

DEFAULT_THREADS = 4
QUEUE_WAIT_SECONDS = 2.0
RETRY_AFTER_SECONDS = 1
# Paths that never queue: they touch no shared resource, or have a limiter of their own.
UNBOUNDED_PREFIXES = ("/healthz", "/readyz", "/problems/", "/reports/static/")


def api_threads_from_env(env: dict[str, str] | None = None) -> int:
    """FOLDWISE_API_THREADS: requests served at once per API process (default 4)."""
    raw = (os.environ if env is None else env).get("FOLDWISE_API_THREADS") or str(DEFAULT_THREADS)
    if not raw.isdigit() or not 1 <= int(raw) <= 256:
        raise BadInput(
            "FOLDWISE_API_THREADS", f"must be a whole number from 1 to 256, not {raw!r}."
        )
    return int(raw)


class Admission:
    """ASGI middleware: at most `slots` requests in flight, `queue` more waiting, then 429."""

    def __init__(self, app: ASGIApp, slots: int, queue: int) -> None:
        self.app, self.slots, self.queue = app, slots, queue
        self._limiter: anyio.CapacityLimiter | None = None  # made on the server's event loop
        self.waiting = 0

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http" or scope["path"].startswith(UNBOUNDED_PREFIXES):
            await self.app(scope, receive, send)
            return
        if self._limiter is None:
            self._limiter = anyio.CapacityLimiter(self.slots)
        limiter = self._limiter
        if limiter.available_tokens == 0 and self.waiting >= self.queue:
            await self._busy(scope, receive, send)
            return
        admitted = False
        self.waiting += 1
        try:
            with anyio.move_on_after(QUEUE_WAIT_SECONDS):
                await limiter.acquire()
                admitted = True
        finally:
            self.waiting -= 1
        if not admitted:
            await self._busy(scope, receive, send)
            return
        try:
            await self.app(scope, receive, send)
        finally:
            limiter.release()

    async def _busy(self, scope: Scope, receive: Receive, send: Send) -> None:
        response = problem_response(
            scope["path"],
            429,
            f"the server is serving as many requests as it can; retry in {RETRY_AFTER_SECONDS} s.",
            headers={"Retry-After": str(RETRY_AFTER_SECONDS)},
        )
        await response(scope, receive, send)
