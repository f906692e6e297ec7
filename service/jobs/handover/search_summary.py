"""What a halving search cost beside the full grid, in the one line the report page and the
command line both print, read from result v1's `search` section (nothing recomputed)."""

from __future__ import annotations

from typing import Any


def training_share(search: dict[str, Any]) -> float | None:
    """The inner searches' training rows as a share of the full grid's; None without a grid."""
    grid = search.get("full_grid_inner_train_rows") or 0
    return search["inner_train_rows"] / grid if grid else None


def halving_summary(result: dict[str, Any]) -> str | None:
    """'N fits instead of M for the full grid; training rows X% of the grid's' for a halving
    job's result; None for a full-grid job (its result has no `search`)."""
    search = result.get("search")
    if not search or search.get("strategy") != "halving":
        return None
    line = f"{search['fits']} fits instead of {search['full_grid_fits']} for the full grid"
    share = training_share(search)
    # fits alone mislead: halving may fit more often than the grid, but on fewer rows each,
    # so the rows fitted on are what it saves
    return line if share is None else f"{line}; training rows {share:.0%} of the grid's"
