"""Browser steps the report tests share: sign in, count marks, watch the console."""

from __future__ import annotations

from pathlib import Path
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


# axe-core's impact levels that fail a page; "minor" and "moderate" findings are reported only
FAILING_IMPACTS = ("serious", "critical")


def axe_violations(page: Any) -> list[str]:
    """axe-core run inside the page: its serious and critical violations, one line each."""
    from axe_playwright_python.sync_playwright import Axe

    results = Axe().run(page)
    return [
        f"{v['id']} ({v['impact']}): {v['help']} at {[n['target'] for n in v['nodes']][:3]}"
        for v in results.response["violations"]
        if v["impact"] in FAILING_IMPACTS
    ]


def check_page(page: Any, name: str, output: Path) -> None:
    """axe-core finds nothing serious; screenshots at 1280 and 375 px; nothing overflows at 375."""
    problems = axe_violations(page)
    assert problems == [], (name, problems)
    width = page.viewport_size["width"] if page.viewport_size else 1280
    try:
        page.set_viewport_size({"width": 1280, "height": 900})
        page.screenshot(path=str(output / f"{name}-1280.png"), full_page=True)
        page.set_viewport_size({"width": 375, "height": 800})
        page.screenshot(path=str(output / f"{name}-375.png"), full_page=True)
        scroll, inner = page.evaluate("[document.documentElement.scrollWidth, innerWidth]")
        assert scroll <= inner, (name, scroll, inner)
    finally:
        page.set_viewport_size({"width": width, "height": 900})
