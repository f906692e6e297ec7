"""The names of the scopes work runs over: an outer fold's 'r{repeat}f{fold}', or 'all' rows.

Kept apart from the engine's heavier modules (no numpy, pandas or scikit-learn here) because the
store's schema and the report pages need these names without loading the engine.
"""

from __future__ import annotations

import re

FINAL_SCOPE = "all"  # the inner procedure run on all rows, which gives the final pick

# no leading zeros: a scope parses only if formatting its numbers gives it back
_OUTER_SCOPE = re.compile(r"r(0|[1-9]\d*)f(0|[1-9]\d*)")


def outer_scope(repeat: int, fold: int) -> str:
    """The scope of outer fold `fold` of repeat `repeat`: 'r{repeat}f{fold}'."""
    return f"r{repeat}f{fold}"


def parse_outer_scope(scope: str) -> tuple[int, int]:
    """(repeat, fold) of an outer fold's scope; ValueError for any other scope (e.g. 'all')."""
    match = _OUTER_SCOPE.fullmatch(scope)
    if match is None:
        raise ValueError(f"{scope!r} is not an outer fold scope like 'r0f2'")
    return int(match[1]), int(match[2])


# The nested interval's procedure folds (service/cv/interval_folds.py) run as outer folds of
# their own, numbered from here so they never meet a job's own outer repeats (at most
# spec.MAX_REPEATS): repeat BASE + r·K + o, fold j is repetition r's procedure fitted without
# parts o and j (j = o: without part o alone), scored on part j.
INTERVAL_REPEAT_BASE = 1000


def is_interval_repeat(repeat: int | None) -> bool:
    """True for the repeat number of a nested interval's procedure fold."""
    return repeat is not None and repeat >= INTERVAL_REPEAT_BASE


def interval_position(repeat: int, k: int) -> tuple[int, int]:
    """(repetition r, outer fold o) of a procedure fold's repeat BASE + r·K + o, as the nested
    interval numbers them (repetitions from 0, like a job's own outer repeats)."""
    if not is_interval_repeat(repeat):
        raise ValueError(f"repeat {repeat} is a job's own outer repeat, not an interval's")
    return divmod(repeat - INTERVAL_REPEAT_BASE, k)


# A halving search's round folds (service/cv/halving_schedule.py) are the scope's inner folds
# cut to the round's rows. Stored beside those inner folds, they are numbered from here: round
# t of inner repeat i is repeat BASE·(t + 1) + i, clear of inner repeats (at most
# spec.MAX_REPEATS, below BASE) and keyed apart from them in the store.
ROUND_REPEAT_BASE = 1000


def round_repeat(round_index: int, repeat: int) -> int:
    """The stored repeat of round `round_index`'s cut of an inner fold of repeat `repeat`."""
    return ROUND_REPEAT_BASE * (round_index + 1) + repeat


def round_position(repeat: int) -> tuple[int, int] | None:
    """(round, inner repeat) of a round fold's stored repeat; None for a plain inner fold."""
    if repeat < ROUND_REPEAT_BASE:
        return None
    step, inner = divmod(repeat, ROUND_REPEAT_BASE)
    return step - 1, inner
