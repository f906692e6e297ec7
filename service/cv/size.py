"""How much work a spec asks for, computed from its numbers alone (nothing is built to count).

A job fits every candidate on every inner fold of every outer fold, refits each outer fold's
pick, runs the same inner search on all rows for the final pick and refits that pick once:

    fits = outer folds x (inner folds x candidates + 1) + (inner folds x candidates + 1)

(a halving search counts each round's candidates in place of `candidates`: `raced_fits`).

A learning curve runs one such selection per size. The count is checked before a single fold
or candidate is built, so a request that would take days is refused in milliseconds.
"""

from __future__ import annotations

import math

from service.cv.errors import SpecError
from service.cv.spec import DEFAULT_INTERVAL_REPETITIONS, FamilySpec, SelectionSpec, SplitSpec

# A job fans out to outer k x inner k x candidates fits; past this many candidates a request is
# almost surely a mistake (or a denial of service) and is refused before anything is stored.
MAX_CANDIDATES = 2000

# The default cap on one job's fits (an operator may move it: FOLDWISE_MAX_JOB_FITS). At a
# typical 10-50 ms per fit on a small table this is one to three hours of one core.
DEFAULT_MAX_JOB_FITS = 200_000


def family_size(family: FamilySpec) -> int:
    """How many points a family expands to, computed without expanding it."""
    size = math.prod(len(v) for v in family.grid.values())
    return size * (family.draws or 1)


def search_space_size(spec: SelectionSpec) -> int:
    """Candidates of the whole search space before duplicates are dropped."""
    return sum(family_size(f) for f in spec.families)


def check_search_space(spec: SelectionSpec) -> int:
    """The search space's size; SpecError on `families` past MAX_CANDIDATES."""
    total = search_space_size(spec)
    if total > MAX_CANDIDATES:
        raise SpecError(
            "families",
            f"the search space has {total:,} candidates, more than the limit of "
            f"{MAX_CANDIDATES:,}; use fewer grid values or draws.",
        )
    return total


def fold_count(plan: SplitSpec) -> int:
    """Folds a split plan makes: k per repeat (group and time plans have one repeat)."""
    return plan.k * plan.repeats


def raced_fits(spec: SelectionSpec, candidates: int) -> int:
    """Candidate fits per inner fold of one search: all candidates for the full grid; for
    halving, at most every round's candidates (scikit-learn's rounds until fewer than `factor`
    are left; a search on few rows stops earlier, so this is an upper bound)."""
    if spec.search.strategy != "halving":
        return candidates
    factor = spec.search.factor
    total, racing = 0, candidates
    for _ in range(1 + math.floor(math.log(candidates, factor)) if candidates > 1 else 1):
        total += racing
        racing = math.ceil(racing / factor)
    return total


def job_fits(spec: SelectionSpec, candidates: int) -> int:
    """Fits of one selection with `candidates` candidates (see the module docstring)."""
    search = fold_count(spec.inner) * raced_fits(spec, candidates) + 1
    return fold_count(spec.outer) * search + search + interval_fits(spec, candidates)


def interval_fits(spec: SelectionSpec, candidates: int) -> int:
    """A `nested` interval's fits: R · K · K whole selections (service/cv/interval_folds.py)."""
    if spec.interval.method != "nested":
        return 0
    repetitions = spec.interval.repetitions or DEFAULT_INTERVAL_REPETITIONS
    search = fold_count(spec.inner) * candidates + 1
    return repetitions * spec.outer.k * spec.outer.k * search


def _largest_factor(spec: SelectionSpec, candidates: int) -> str:
    """The field to name: the biggest of outer folds, inner folds and candidates."""
    factors = {
        "outer": fold_count(spec.outer),
        "inner": fold_count(spec.inner),
        "families": candidates,
    }
    name = max(factors, key=lambda key: factors[key])
    if name == "families":
        return name
    plan = spec.outer if name == "outer" else spec.inner
    return f"{name}.repeats" if plan.repeats > 1 else f"{name}.k"


def check_job_size(spec: SelectionSpec, *, max_fits: int, sizes: int = 1) -> int:
    """The fits a job needs (`sizes` selections of `spec`); SpecError past `max_fits`."""
    candidates = check_search_space(spec)
    fits = job_fits(spec, candidates) * sizes
    if fits > max_fits:
        field = _largest_factor(spec, candidates)
        if 2 * interval_fits(spec, candidates) > fits:  # the interval is most of the work
            field = "interval.repetitions"
        per_size = f" ({sizes} sizes of a learning curve)" if sizes > 1 else ""
        what = (
            "the search space (fewer grid values or draws) or the folds"
            if field == "families"
            else f"{field} or the search space"
        )
        if field == "interval.repetitions":
            what = "interval.repetitions, or use the quick interval"
        raise SpecError(
            field,
            f"this request needs {fits:,} fits{per_size}; a job may have at most "
            f"{max_fits:,}; reduce {what}.",
        )
    return fits
