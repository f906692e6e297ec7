"""Sign-in with a token, the signed session cookie, refusal without it, team visibility."""

from __future__ import annotations

import hashlib
import hmac
from typing import Any

import httpx

from service.web.signin import COOKIE, sign, verify

from .live import LiveServer
from .pages import sign_in, watch_console


def test_unauthenticated_visits_redirect_to_sign_in_without_data(
    server: LiveServer, iris_job: str
) -> None:
    """Every report route answers 303 to the sign-in form and carries nothing of the job."""
    for path in (f"/reports/jobs/{iris_job}", "/reports/", f"/reports/compare?jobs={iris_job},x"):
        answer = httpx.get(server.base_url + path, follow_redirects=False)
        assert answer.status_code == 303, path
        assert answer.headers["location"].startswith("/reports/sign-in?next=%2Freports%2F")
        assert iris_job not in answer.text and "<svg" not in answer.text


def test_browser_is_sent_to_sign_in_and_a_bad_token_is_refused(
    browser: Any, server: LiveServer, iris_job: str
) -> None:
    """The form comes up instead of the report; a wrong token gets one sentence naming it."""
    page = browser.new_page()
    errors = watch_console(page)
    page.goto(f"{server.base_url}/reports/jobs/{iris_job}")
    assert "/reports/sign-in" in page.url
    assert page.locator("svg").count() == 0 and "estimate" not in page.inner_text("main").lower()
    page.get_by_label("Token").fill("fw_not-a-token")
    with page.expect_response(lambda r: r.request.method == "POST") as answer:
        page.get_by_role("button", name="Sign in").click()
    assert answer.value.status == 401
    assert page.get_by_role("alert").inner_text().startswith("token:")
    assert browser.cookies() == []
    # the 401 of the refused form is the one console error a browser reports for it
    assert all("401" in e for e in errors)


def test_sign_in_sets_a_signed_http_only_strict_cookie_and_sign_out_clears_it(
    browser: Any, server: LiveServer, owner_token: str, iris_job: str
) -> None:
    """The cookie holds a token id and expiry under HMAC-SHA256, not the token; sign-out ends it."""
    page = browser.new_page()
    errors = watch_console(page)
    sign_in(page, server.base_url, owner_token, f"/reports/jobs/{iris_job}")
    assert page.url.endswith(f"/reports/jobs/{iris_job}")
    (cookie,) = browser.cookies()
    assert cookie["name"] == COOKIE and cookie["httpOnly"] and cookie["sameSite"] == "Strict"
    assert not cookie["secure"]  # plain http on the loopback; https sets Secure
    assert owner_token not in cookie["value"]
    token_id, expires, mac = cookie["value"].split(".")
    assert token_id.isdigit() and expires.isdigit() and len(mac) == 64
    assert page.evaluate("document.cookie") == ""  # HttpOnly: scripts cannot read it
    # a forged signature is refused like no cookie at all
    browser.add_cookies([{**cookie, "value": f"{token_id}.{expires}.{'0' * 64}"}])
    page.goto(f"{server.base_url}/reports/jobs/{iris_job}")
    assert "/reports/sign-in" in page.url
    sign_in(page, server.base_url, owner_token, f"/reports/jobs/{iris_job}")
    page.get_by_role("button", name="Sign out").click()
    page.wait_for_url("**/reports/sign-in")
    assert browser.cookies() == []
    page.goto(f"{server.base_url}/reports/jobs/{iris_job}")
    assert "/reports/sign-in" in page.url
    assert errors == []


def test_cookie_signature_is_hmac_sha256_over_id_and_expiry() -> None:
    """Checked against the standard library's HMAC (RFC 2104) rather than our own code."""
    key = b"k" * 32
    value = sign(key, 7, now=1_000.0)
    token_id, expires, mac = value.split(".")
    expected = hmac.new(key, f"{token_id}.{expires}".encode(), hashlib.sha256).hexdigest()
    assert (token_id, mac) == ("7", expected)
    assert verify(key, value, now=1_001.0) == 7
    assert verify(key, value, now=float(expires) + 1) is None  # expired
    assert verify(b"x" * 32, value, now=1_001.0) is None  # another server's key
    assert verify(key, f"8.{expires}.{mac}", now=1_001.0) is None  # id swapped


def test_tokens_without_read_scope_and_other_teams_see_nothing(
    browser: Any, server: LiveServer, iris_job: str
) -> None:
    """A submit-only token cannot sign in; another team's reader gets a 404 page, no scores."""
    page = browser.new_page()
    page.goto(f"{server.base_url}/reports/sign-in")
    page.get_by_label("Token").fill(server.token("owners", ("submit",)))
    page.get_by_role("button", name="Sign in").click()
    assert page.get_by_role("alert").is_visible() and browser.cookies() == []
    sign_in(page, server.base_url, server.token("strangers", ("read",)), "/reports/")
    answer = page.goto(f"{server.base_url}/reports/jobs/{iris_job}")
    assert answer is not None and answer.status == 404
    assert page.locator("svg").count() == 0 and "strangers" in page.inner_text("main")


def test_next_never_leaves_the_report_pages(
    browser: Any, server: LiveServer, owner_token: str
) -> None:
    """A crafted next= cannot turn sign-in into an open redirect."""
    page = browser.new_page()
    page.goto(f"{server.base_url}/reports/sign-in?next=https://example.invalid/")
    page.get_by_label("Token").fill(owner_token)
    page.get_by_role("button", name="Sign in").click()
    page.wait_for_load_state()
    assert page.url == f"{server.base_url}/reports/"
