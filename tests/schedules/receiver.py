"""A webhook receiver for tests: http.server on 127.0.0.1, a free port, every request kept."""

from __future__ import annotations

import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer


@dataclass
class Received:
    """One request as the receiver saw it."""

    path: str
    headers: dict[str, str]
    body: bytes


@dataclass
class Receiver:
    """Answers each request with the next status of `answers` (then 200), and keeps them all."""

    url: str
    answers: list[int] = field(default_factory=list)
    got: list[Received] = field(default_factory=list)
    lock: threading.Lock = field(default_factory=threading.Lock)

    def wait_for(self, count: int, timeout: float = 60.0) -> list[Received]:
        """Block until `count` requests arrived; fail the test past the timeout."""
        deadline = time.monotonic() + timeout
        while True:
            with self.lock:
                if len(self.got) >= count:
                    return list(self.got)
            assert time.monotonic() < deadline, f"only {len(self.got)} of {count} webhooks came"
            time.sleep(0.1)


@contextmanager
def receiving(answers: list[int] | None = None) -> Iterator[Receiver]:
    """Run a receiver until the block ends."""
    receiver = Receiver(url="", answers=list(answers or []))

    class Handler(BaseHTTPRequestHandler):
        def do_POST(self) -> None:
            length = int(self.headers.get("Content-Length") or 0)
            body = self.rfile.read(length)
            with receiver.lock:
                receiver.got.append(Received(self.path, dict(self.headers.items()), body))
                status = receiver.answers.pop(0) if receiver.answers else 200
            self.send_response(status)
            if 300 <= status < 400:
                self.send_header("Location", receiver.url + "redirected")
            self.send_header("Content-Length", "0")
            self.end_headers()

        def log_message(self, *args: object) -> None:
            pass

    server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
    receiver.url = f"http://127.0.0.1:{server.server_address[1]}/"
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        yield receiver
    finally:
        server.shutdown()
        server.server_close()
