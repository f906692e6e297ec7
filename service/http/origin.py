"""Cross-site form posts are refused: the report pages' forms sign people in and out (login CSRF).

A browser says where a POST comes from: `Sec-Fetch-Site` (Fetch Metadata) and `Origin`, which
every current browser sends on a form POST. A POST is refused when either says another site or
another origin (an `Origin` of `null`, as sandboxed or privacy-redirected documents send, too).
A request with neither header does not come from a browser page, so it cannot carry a victim's
browser along, and is let through (a script with the token needs no forged form).
"""

from __future__ import annotations

from urllib.parse import urlsplit

from fastapi import Request

# "none": the user typed or bookmarked the address; "same-origin": our own page's form
_OWN = frozenset({"same-origin", "none"})


def cross_site_reason(request: Request) -> str | None:
    """Why this POST must be refused as cross-site, or None when it comes from our own pages."""
    fetch_site = request.headers.get("sec-fetch-site")
    if fetch_site is not None and fetch_site.lower() not in _OWN:
        return f"the browser says this form came from another site ({fetch_site})"
    origin = request.headers.get("origin")
    if origin is None:
        return None
    parts = urlsplit(origin)
    # compared with the Host the browser sent to us (what a proxy passes on), not our socket
    host = request.headers.get("host", "")
    if origin == "null" or parts.scheme not in ("http", "https") or parts.netloc != host:
        return f"the form was sent from {origin}, not from this server ({host})"
    return None
