"""The arithmetic of successive halving, and the checks a halving request must pass.

The schedule is scikit-learn's HalvingGridSearchCV with resource="n_samples" and
aggressive_elimination=False (sklearn/model_selection/_search_successive_halving.py,
`_check_input_parameters` and `_run_search`), written out with the same expressions so the
same floating-point rounding gives the same rounds. Nothing here fits a model.
"""

from __future__ import annotations

from math import ceil, floor, log

from service.cv.errors import SpecError
from service.cv.spec import SearchSpec, SelectionSpec

# scikit-learn's "exhaust" and "smallest" start from inner folds x 2 (x classes for a classifier)
ROWS_PER_FOLD = 2


def smallest_start(n_splits: int, n_classes: int | None) -> int:
    """scikit-learn's starting rows before "exhaust" raises them."""
    return n_splits * ROWS_PER_FOLD * (n_classes or 1)


def rounds_for(
    search: SearchSpec, n_candidates: int, n_splits: int, n_rows: int, n_classes: int | None
) -> tuple[int, list[int]]:
    """(first round's rows, rows of every round) for one search over `n_rows` rows."""
    factor = search.factor
    first = search.min_rows if search.min_rows is not None else smallest_start(n_splits, n_classes)
    # the number of rounds after which fewer than `factor` candidates are left
    n_required = 1 + floor(log(n_candidates, factor))
    if search.min_rows is None:  # "exhaust": start as high as lets the last round use every row
        first = max(first, n_rows // factor ** (n_required - 1))
    n_possible = 1 + floor(log(n_rows // first, factor))
    n_rounds = min(n_possible, n_required)
    return first, [min(int(factor**i * first), n_rows) for i in range(n_rounds)]


def keep_count(search: SearchSpec, n_candidates: int) -> int:
    """How many candidates a round passes on: ceil(n / factor), as scikit-learn rounds it."""
    return ceil(n_candidates / search.factor)


def check_halving(
    spec: SelectionSpec,
    n_candidates: int,
    search_rows: list[int],
    n_splits: int,
    n_classes: int | None,
) -> None:
    """Refuse a halving request that cannot run; `search_rows` are the rows of each search."""
    search = spec.search
    if search.strategy != "halving":
        return
    if n_candidates < 2:
        raise SpecError(
            "search.strategy",
            "halving needs at least two candidates to race and the search has one; add grid "
            "values or use strategy 'grid'.",
        )
    smallest = min(search_rows)
    if search.min_rows is not None and search.min_rows > smallest:
        raise SpecError(
            "search.min_rows",
            f"min_rows={search.min_rows} is more than the {smallest} rows the smallest inner "
            "search is given (an outer training part); lower min_rows.",
        )
    start = smallest_start(n_splits, n_classes)
    if search.min_rows is None and start > smallest:
        raise SpecError(
            "search.min_rows",
            f"the default first round needs {start} rows (inner folds x 2"
            f"{' x classes' if n_classes else ''}) but the smallest inner search has "
            f"{smallest}; give a smaller min_rows.",
        )


def refuse_as_units(spec: SelectionSpec) -> None:
    """The service's refusal: halving is not split into stored work units yet.

    build_plan calls it unless told the plan runs in-process, so a job that asks for halving is
    refused where its plan is built; SpecError on `search.strategy`.
    """
    if spec.search.strategy == "halving":
        raise SpecError(
            "search.strategy",
            "'halving' runs only in-process for now (the one-process engine), not as stored "
            "work units; leave search out or use strategy 'grid' for a job.",
        )
