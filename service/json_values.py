"""Checks on decoded JSON before anything reads, hashes or stores it.

Python's json module accepts `NaN`, `Infinity` and `-Infinity` (and turns `1e400` into
infinity), which JSON itself does not have; canonical hashing, PostgreSQL's JSON columns and
fold scores all refuse them later, so they are refused here, first, with the field named.
Nesting is bounded too: no request of ours is more than a few levels deep.
"""

from __future__ import annotations

import math
from typing import Any

from service.errors import BadInput

MAX_DEPTH = 32


def _path(parts: list[str | int]) -> str:
    out = ""
    for part in parts:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += f".{part}" if out else part
    return out or "request"


def check_json_values(value: Any, *, max_depth: int = MAX_DEPTH) -> None:
    """Raise BadInput naming the first non-finite number, NUL character, or nesting deeper
    than `max_depth`."""
    # an explicit stack: a hostile body must not be able to exhaust Python's recursion limit
    stack: list[tuple[Any, list[str | int]]] = [(value, [])]
    while stack:
        node, parts = stack.pop()
        if isinstance(node, float) and not math.isfinite(node):
            shown = "NaN" if math.isnan(node) else ("Infinity" if node > 0 else "-Infinity")
            raise BadInput(
                _path(parts),
                f"is {shown}, which JSON does not allow (numbers past 1e308 read as Infinity); "
                "give a finite number.",
            )
        if isinstance(node, str) and "\x00" in node:
            # PostgreSQL's text and JSON columns cannot hold a NUL character (SQLite can): the
            # same request must get the same answer on both stores
            raise BadInput(_path(parts), "holds a NUL character (\\u0000); remove it.")
        if isinstance(node, dict) and any("\x00" in str(k) for k in node):
            raise BadInput(_path(parts), "has a key with a NUL character (\\u0000); remove it.")
        if isinstance(node, dict | list):
            if len(parts) >= max_depth:
                raise BadInput(
                    _path(parts),
                    f"is nested more than {max_depth} levels deep; no foldwise request is.",
                )
            items = node.items() if isinstance(node, dict) else enumerate(node)
            # reversed, so the first problem in document order is the one reported
            stack.extend((child, [*parts, key]) for key, child in reversed(list(items)))
