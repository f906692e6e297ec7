"""Keyboard and narrow-screen use of the report pages in headless Chromium."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from .live import LiveServer
from .pages import sign_in, watch_console

_FOCUS = """() => { const e = document.activeElement; const s = getComputedStyle(e);
  const r = e.getBoundingClientRect();
  return {tag: e.tagName, href: e.getAttribute('href'), text: e.textContent.trim(),
          outline: s.outlineStyle, width: parseFloat(s.outlineWidth),
          visible: r.width > 0 && r.height > 0 && r.top >= 0 && r.left >= 0}; }"""


def test_tab_reaches_the_main_links_with_a_visible_focus(
    browser: Any, server: LiveServer, owner_token: str, iris_job: str
) -> None:
    """The skip link comes first and moves focus to the report; Tab then walks the links."""
    page = browser.new_page()
    errors = watch_console(page)
    sign_in(page, server.base_url, owner_token, f"/reports/jobs/{iris_job}")
    seen = []
    for _ in range(5):  # skip link, brand, sign-out button, then the two breadcrumb links
        page.keyboard.press("Tab")
        focus = page.evaluate(_FOCUS)
        seen.append(focus)
        assert focus["visible"] and focus["outline"] != "none" and focus["width"] >= 2, focus
    assert seen[0]["href"] == "#main"
    hrefs = [f["href"] for f in seen]
    assert "/reports/" in hrefs  # the jobs list
    assert any(h and h.startswith("/reports/datasets/") for h in hrefs)  # the job's dataset
    assert any(f["tag"] == "BUTTON" and f["text"] == "Sign out" for f in seen)
    page.goto(f"{server.base_url}/reports/jobs/{iris_job}")
    page.keyboard.press("Tab")
    page.keyboard.press("Enter")  # the skip link moves focus past the header to the report
    assert page.evaluate("document.activeElement.id") == "main"
    assert errors == []


def test_narrow_screen_has_no_horizontal_scroll(
    browser: Any,
    server: LiveServer,
    owner_token: str,
    iris_job: str,
    second_job: str,
    output_dir: Path,
) -> None:
    """At 375 px wide (a small phone) nothing overflows sideways; tables scroll in their box."""
    page = browser.new_page()
    page.set_viewport_size({"width": 375, "height": 800})
    errors = watch_console(page)
    sign_in(page, server.base_url, owner_token, f"/reports/jobs/{iris_job}")
    dataset = page.get_by_role("link", name="dataset").first.get_attribute("href")
    for name, path in (
        ("job", f"/reports/jobs/{iris_job}"),
        ("dataset", dataset),
        ("compare", f"/reports/compare?jobs={iris_job},{second_job}"),
    ):
        page.goto(server.base_url + path)
        width = page.evaluate("[document.documentElement.scrollWidth, window.innerWidth]")
        assert width[0] <= width[1], (name, width)
        page.screenshot(path=str(output_dir / f"{name}-page-narrow.png"), full_page=True)
    page.goto(f"{server.base_url}/reports/sign-in")
    assert errors == []
