"""What a dataset's history shows of a succeeded job, kept beside its result when it ends.

A year of nightly jobs on one table is a thousand result documents, each TOASTed and compressed;
reading the history from them took 38 ms at p95 on a quiet machine and 68 ms on a busy one,
however little of each it picked out (tests/benchmarks/bench_store_scale.py). The few values a
history point shows are written once, with the result, into a small column of their own
(`job.history_point`, migration 0012).
"""

from __future__ import annotations

from typing import Any

# what a point carries of the pick_by metric's outer estimate, and of the final pick
ESTIMATE_PARTS = ("mean", "se", "interval")
FINAL_PICK_PARTS = ("candidate_key", "estimator", "params")


def history_point_of(result: dict[str, Any]) -> dict[str, Any] | None:
    """The pick_by metric's mean, se and interval and the final pick; None when the result has
    no single estimate and pick (a learning curve's parent)."""
    pick_by = result.get("pick_by")
    estimate = (result.get("estimate") or {}).get(pick_by) or {}
    final_pick = result.get("final_pick") or {}
    if estimate.get("mean") is None or final_pick.get("candidate_key") is None:
        return None
    return {
        "pick_by": pick_by,
        **{part: estimate.get(part) for part in ESTIMATE_PARTS},
        "final_pick": {part: final_pick.get(part) for part in FINAL_PICK_PARTS},
    }
