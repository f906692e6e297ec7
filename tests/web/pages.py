"""Browser steps the report tests share: sign in, count marks, watch the console."""

from __future__ import annotations

from typing import Any


def watch_console(page: Any) -> list[str]:
    """A list that fills with the page's console errors and uncaught exceptions."""
    errors: list[str] = []
    page.on("console", lambda msg: errors.append(msg.text) if msg.type == "error" else None)
    page.on("pageerror", lambda exc: errors.append(str(exc)))
    return errors


def sign_in(page: Any, base_url: str, token: str, target: str) -> None:
    """Open `target`, get sent to the sign-in form, paste the token and submit it."""
    page.goto(base_url + target)
    assert "/reports/sign-in" in page.url
    page.get_by_label("Token").fill(token)
    page.get_by_role("button", name="Sign in").click()
    page.wait_for_load_state()


def marks(page: Any, kind: str) -> list[dict[str, str]]:
    """Every SVG mark of a data-kind with its data attributes."""
    result: list[dict[str, str]] = page.eval_on_selector_all(
        f'svg [data-kind="{kind}"]',
        "els => els.map(e => Object.assign({}, e.dataset))",
    )
    return result
