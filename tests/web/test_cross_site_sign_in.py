"""Login CSRF: another site cannot sign a visitor's browser in (or out) through our forms.

Checked with the headers a browser sends (httpx against the live server) and with a real Chromium
posting a form from a page on another site (http://localhost:PORT is another site than
http://127.0.0.1:PORT; both are the loopback, nothing leaves the machine).
"""

from __future__ import annotations

import threading
from collections.abc import Iterator
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from typing import Any

import httpx
import pytest

from service.cli.local_server import free_port
from service.web.signin import COOKIE

from .live import LiveServer


def _post(server: LiveServer, token: str, headers: dict[str, str]) -> httpx.Response:
    return httpx.post(
        f"{server.base_url}/reports/sign-in",
        data={"token": token, "next": "/reports/"},
        headers=headers,
        follow_redirects=False,
        timeout=60,
    )


def _own_origin(server: LiveServer) -> str:
    return server.base_url  # http://127.0.0.1:PORT, what the browser sends from our own page


@pytest.mark.parametrize(
    "headers",
    [
        {"Origin": "http://attacker.invalid", "Sec-Fetch-Site": "cross-site"},
        {"Origin": "http://attacker.invalid"},  # an older browser without Fetch Metadata
        {"Sec-Fetch-Site": "cross-site"},  # Origin stripped by a privacy setting
        {"Origin": "null", "Sec-Fetch-Site": "cross-site"},  # a sandboxed frame
        {"Origin": "http://127.0.0.1:1", "Sec-Fetch-Site": "same-site"},  # another port
        {"Origin": "https://127.0.0.1", "Sec-Fetch-Site": "same-site"},
    ],
)
def test_a_cross_site_sign_in_is_refused_without_a_cookie(
    server: LiveServer, owner_token: str, headers: dict[str, str]
) -> None:
    answer = _post(server, owner_token, headers)
    assert answer.status_code == 403
    assert "set-cookie" not in answer.headers
    assert "sign in from this server" in answer.text
    assert owner_token not in answer.text


def test_a_same_origin_sign_in_works(server: LiveServer, owner_token: str) -> None:
    headers = {"Origin": _own_origin(server), "Sec-Fetch-Site": "same-origin"}
    answer = _post(server, owner_token, headers)
    assert answer.status_code == 303 and answer.headers["location"] == "/reports/"
    assert f"{COOKIE}=" in answer.headers["set-cookie"]


def test_a_cross_site_sign_out_is_refused_and_the_session_stays(
    server: LiveServer, owner_token: str
) -> None:
    same = {"Origin": _own_origin(server), "Sec-Fetch-Site": "same-origin"}
    with httpx.Client(base_url=server.base_url, timeout=60) as browser:
        assert browser.post("/reports/sign-in", data={"token": owner_token}, headers=same)
        assert COOKIE in browser.cookies
        refused = browser.post(
            "/reports/sign-out",
            headers={"Origin": "http://attacker.invalid", "Sec-Fetch-Site": "cross-site"},
        )
        assert refused.status_code == 403 and "set-cookie" not in refused.headers
        assert browser.get("/reports/", follow_redirects=False).status_code == 200
        done = browser.post("/reports/sign-out", headers=same, follow_redirects=False)
        assert done.status_code == 303 and f'{COOKIE}=""' in done.headers["set-cookie"]


@pytest.fixture
def other_site(server: LiveServer, owner_token: str) -> Iterator[str]:
    """A page on http://localhost:PORT whose form posts a token to our sign-in."""
    page = (
        "<!doctype html><title>elsewhere</title>"
        f'<form method="post" action="{server.base_url}/reports/sign-in">'
        f'<input type="hidden" name="token" value="{owner_token}">'
        '<input type="hidden" name="next" value="/reports/">'
        "<button>Win a prize</button></form>"
    ).encode()

    class Handler(BaseHTTPRequestHandler):
        def do_GET(self) -> None:
            self.send_response(200)
            self.send_header("Content-Type", "text/html; charset=utf-8")
            self.send_header("Content-Length", str(len(page)))
            self.end_headers()
            self.wfile.write(page)

        def log_message(self, *args: Any) -> None:
            pass

    port = free_port()
    host = ThreadingHTTPServer(("127.0.0.1", port), Handler)
    thread = threading.Thread(target=host.serve_forever, daemon=True)
    thread.start()
    try:
        yield f"http://localhost:{port}/"
    finally:
        host.shutdown()
        host.server_close()


def test_a_browser_form_on_another_site_cannot_sign_the_visitor_in(
    browser: Any, server: LiveServer, other_site: str
) -> None:
    page = browser.new_page()
    page.goto(other_site)
    with page.expect_response(lambda r: r.request.method == "POST") as posted:
        page.get_by_role("button", name="Win a prize").click()
    answer = posted.value
    assert answer.status == 403
    sent = answer.request.headers
    # what Chromium really sent, so the refusal is tested against a browser's own headers
    assert sent.get("origin", "").startswith("http://localhost:")
    assert browser.cookies() == []
    visit = page.goto(f"{server.base_url}/reports/")
    assert visit is not None and "/reports/sign-in" in page.url
