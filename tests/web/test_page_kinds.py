"""Every kind of report page through axe-core in Chromium, with screenshots at 1280 and 375 px.

The job states (queued, running, failed, cancelled), the dataset page and the learning curve are
checked the same way in their own test files; check_page fails on any serious or critical
axe-core violation and on sideways scrolling at 375 px.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

from .live import LiveServer
from .pages import check_page, sign_in, watch_console


def test_sign_in_page_passes_axe(browser: Any, server: LiveServer, output_dir: Path) -> None:
    """The form a visitor without a session sees, and the same form after a wrong token."""
    page = browser.new_page()
    errors = watch_console(page)
    page.goto(f"{server.base_url}/reports/")
    assert "/reports/sign-in" in page.url
    check_page(page, "sign-in", output_dir)
    assert errors == []
    page.get_by_label("Token").fill("not-a-token")
    page.get_by_role("button", name="Sign in").click()
    assert page.get_by_role("alert").count() == 1
    check_page(page, "sign-in-refused", output_dir)
    # the refused sign-in answers 401, which Chromium logs as a failed load; nothing else
    assert all("status of 401" in e for e in errors), errors


def test_signed_in_pages_pass_axe(
    browser: Any,
    server: LiveServer,
    owner_token: str,
    iris_job: str,
    second_job: str,
    output_dir: Path,
) -> None:
    """Jobs list, a finished job, a comparison, a refused comparison and a missing page."""
    page = browser.new_page()
    errors = watch_console(page)
    sign_in(page, server.base_url, owner_token, "/reports/")
    check_page(page, "home", output_dir)
    for name, path, status in (
        ("job", f"/reports/jobs/{iris_job}", 200),
        ("compare", f"/reports/compare?jobs={iris_job},{second_job}", 200),
        ("compare-blank", "/reports/compare", 200),
        ("compare-refused", f"/reports/compare?jobs={iris_job}", 422),
        ("missing", "/reports/jobs/0123456789abcdef0123456789abcdef", 404),
    ):
        answer = page.goto(server.base_url + path)
        assert answer is not None and answer.status == status, (name, answer)
        check_page(page, name, output_dir)
    # the refused comparison and the missing page answer 422 and 404 on purpose; Chromium logs
    # each as a failed load, and there must be nothing else
    assert len(errors) == 2 and all("status of 4" in e for e in errors), errors
