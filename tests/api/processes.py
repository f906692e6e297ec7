"""A look at process trees through /proc (Linux), to check that nothing outlives a stop."""

from __future__ import annotations

import os
from pathlib import Path


def _parent(pid: int) -> int | None:
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return None
    # the command name is in parentheses and may hold spaces: fields follow the last ")"
    return int(stat.rsplit(")", 1)[1].split()[1])


def descendants(pid: int) -> set[int]:
    """Every live process below `pid` (children, their children, ...)."""
    parents = {int(p): _parent(int(p)) for p in os.listdir("/proc") if p.isdigit()}
    found: set[int] = set()
    frontier = {pid}
    while frontier:
        frontier = {child for child, parent in parents.items() if parent in frontier} - found
        found |= frontier
    return found


def alive(pid: int) -> bool:
    """True while `pid` runs (a zombie, dead but not yet reaped, counts as gone)."""
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"
