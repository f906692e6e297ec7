"""Seeded subsamples of an outer training part, for selection at a fraction of the data.

A learning curve asks how the nested estimate moves as the training part grows, with the
outer test folds held fixed so that every size is scored on the same rows. The draw is:

- classification: stratified. Each class keeps ``round_half_up(fraction * rows of the class)``
  rows (at least one), so every class share is within one row of the fraction;
- regression: ``round_half_up(fraction * rows)`` rows (at least one) of a seeded permutation.

The permutation depends on the seed and the outer fold's (repeat, index) only, never on the
fraction, and a subsample takes its first rows: the part kept at a smaller fraction is inside
the part kept at a larger one, which keeps the noise between sizes low. Kept rows stay in their
original order, so the inner plan splits them as a search-CV object would split ``X[kept]``.
"""

from __future__ import annotations

import math

import numpy as np

from service.cv.splits import Fold, fold_fingerprint


def kept_count(fraction: float, n: int) -> int:
    """How many of `n` rows a subsample keeps: fraction times n rounded half up, at least one."""
    return max(1, min(n, math.floor(fraction * n + 0.5)))


def subsample_rows(
    rows: np.ndarray,
    y: np.ndarray | None,
    fraction: float,
    *,
    seed: int,
    stream: tuple[int, ...] = (),
) -> np.ndarray:
    """Keep `fraction` of `rows` (absolute indices), stratified by `y` when it is given.

    Parameters
    ----------
    rows : absolute row indices of the part to subsample.
    y : the labels of every dataset row (indexed by `rows`), or None for an unstratified draw.
    fraction : share of rows to keep, in (0, 1]; 1 returns `rows` unchanged.
    seed, stream : the draw's seed and a distinct stream per outer fold, e.g. (repeat, index).

    Returns
    -------
    The kept indices, in the order they had in `rows`.
    """
    if not 0 < fraction <= 1:
        raise ValueError(f"fraction must be in (0, 1], got {fraction}")
    rows = np.asarray(rows)
    if fraction == 1:
        return rows
    rng = np.random.default_rng([seed, *stream])
    positions: list[np.ndarray] = []
    if y is None:
        order = rng.permutation(len(rows))
        positions.append(order[: kept_count(fraction, len(rows))])
    else:
        labels = y[rows]
        # classes in sorted order and one shared generator: the same draw on every machine
        for label in np.unique(labels):
            members = np.flatnonzero(labels == label)
            order = rng.permutation(len(members))
            positions.append(members[order[: kept_count(fraction, len(members))]])
    return rows[np.sort(np.concatenate(positions))]


def subsample_outer(
    folds: list[Fold],
    y: np.ndarray | None,
    fraction: float,
    *,
    seed: int,
    n_rows: int,
    versions: str,
) -> list[Fold]:
    """The outer folds with each training part subsampled; test parts stay as they are."""
    if fraction == 1:
        return folds
    out = []
    for fold in folds:
        train = subsample_rows(fold.train, y, fraction, seed=seed, stream=(fold.repeat, fold.index))
        # the fingerprint follows the rows actually fitted on, so scores never mix across sizes
        fingerprint = fold_fingerprint(train, fold.test, n_rows, versions)
        out.append(Fold(fold.repeat, fold.index, train, fold.test, fingerprint))
    return out
