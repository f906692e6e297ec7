"""The arithmetic of successive halving, and the checks a halving request must pass.

The schedule is scikit-learn's HalvingGridSearchCV with resource="n_samples" and
aggressive_elimination=False (sklearn/model_selection/_search_successive_halving.py,
`_check_input_parameters` and `_run_search`), written out with the same expressions so the
same floating-point rounding gives the same rounds. The rows of a round are chosen here too
(`cut`), so the plan can check a first round before any fit. Nothing here fits a model.
"""

from __future__ import annotations

from math import ceil, floor, log

import numpy as np
from sklearn.utils import resample

from service.cv.errors import SpecError
from service.cv.scopes import round_repeat
from service.cv.spec import SearchSpec, SelectionSpec
from service.cv.splits import Fold, fold_fingerprint

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


def cut(part: np.ndarray, fraction: float, seed: int) -> np.ndarray:
    """`fraction` of a fold's part, as scikit-learn's _SubsampleMetaSplitter cuts it.

    resample draws positions, so drawing from absolute row numbers picks the very rows it picks
    from the positions of the search's own table, in the order it returns them (the order rows
    reach a fit can change its floating-point result). With one seed every cut of a part is a
    prefix of one permutation: a later, larger round keeps the rows of an earlier one.
    """
    n = int(fraction * len(part))
    return np.asarray(resample(part, replace=False, random_state=seed, n_samples=n))


def round_folds(
    search: SearchSpec,
    n_candidates: int,
    y: np.ndarray,
    rows: np.ndarray,
    folds: list[Fold],
    *,
    n_rows: int,
    versions: str,
    classification: bool,
) -> list[list[Fold]]:
    """Every round's folds of one search over `rows`: its inner `folds` cut to the round's rows.

    Fixed with the plan, before any fit, so each round's folds have fingerprints (and stored
    scores) of their own; the stored repeat of a round fold says its round (scopes.round_repeat).
    """
    classes = len(np.unique(y[rows])) if classification else None
    _, schedule = rounds_for(search, n_candidates, len(folds), len(rows), classes)
    found = []
    for index, round_rows in enumerate(schedule):
        fraction = round_rows / len(rows)
        cuts = []
        for fold in folds:
            train, test = (
                cut(fold.train, fraction, search.seed),
                cut(fold.test, fraction, search.seed),
            )
            cuts.append(
                Fold(
                    round_repeat(index, fold.repeat),
                    fold.index,
                    train,
                    test,
                    fold_fingerprint(train, test, n_rows, versions),
                )
            )
        found.append(cuts)
    return found


def check_first_rounds(
    spec: SelectionSpec,
    y: np.ndarray,
    searches: dict[str, tuple[np.ndarray, list[Fold]]],
    n_cand: int,
) -> None:
    """Refuse a first round whose cut training parts cannot be fitted (fewer than two rows, or
    one class for classification). scikit-learn would score such fits NaN and race on; the
    engine never ranks on a fit that failed, so the request must start with more rows."""
    search = spec.search
    if search.strategy != "halving":
        return
    for scope, (rows, folds) in searches.items():  # the rows each search is given
        n_rows = len(rows)
        classes = len(np.unique(y[rows])) if spec.task == "classification" else None
        first = rounds_for(search, n_cand, len(folds), n_rows, classes)[1][0]
        for fold in folds:
            train = cut(fold.train, first / n_rows, search.seed)
            one_class = spec.task == "classification" and len(np.unique(y[train])) < 2
            if len(train) < 2 or one_class:
                where = "all rows" if scope == "all" else f"outer fold {scope}"
                what = "a single class" if one_class and len(train) >= 2 else "too few rows"
                raise SpecError(
                    "search.min_rows",
                    f"the first round ({first} of {n_rows} rows) leaves inner fold "
                    f"{fold.index} of {where} {len(train)} training rows with {what}; "
                    "give a larger min_rows.",
                )


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
