"""The nested cross-validation interval's arithmetic (Bates, Hastie & Tibshirani 2024, Algorithm 1).

Bates, Hastie & Tibshirani, "Cross-validation: what does it estimate and how well does it do it?",
JASA 119:1434-1445. For a loss that is a mean over rows and a K-fold partition drawn afresh in each
of R repetitions, every (repetition, outer fold k) contributes
- e_in(k): the mean held-out per-row loss of a cross-validation over the other K - 1 folds (each
  held out in turn, the procedure fitted on the remaining K - 2);
- e_out(k): fold k's per-row losses under the procedure fitted on all folds but k.
From those: a_k = (e_in(k) - mean e_out(k))^2, b_k = var(e_out(k)) / |fold k|,
MSE = mean(a) - mean(b), SE = sqrt(max(0, K/(K-1) * MSE)) clipped to [SE_naive, sqrt(K) * SE_naive]
with SE_naive = sd(plain CV per-row losses) / sqrt(n); the point is Err_NCV - bias with
bias = (1 + (K-2)/K) * (Err_NCV - Err_CV), Err_NCV the mean of the e_in, Err_CV the plain CV error.
The formulas are the paper's Algorithm 1 as docs/references.md restates it; that variances use
ddof=1 (R's var and sd, which the published code calls) is from memory.

This module is arithmetic only: which fits produce the losses is the caller's business (for a
selection job, the "procedure" is the whole inner search, pick and refit).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt
from scipy import stats

# metrics whose score is a mean of per-row losses (score = -loss, or 1 - loss for accuracy), the
# only ones the nested interval can serve; others (roc_auc, f1, r2, rmse...) are not row means
PER_ROW_LOSS_METRICS = {
    "accuracy": "zero-one loss",
    "neg_log_loss": "log loss",
    "neg_brier_score": "squared probability error",
    "neg_mean_squared_error": "squared error",
    "neg_mean_absolute_error": "absolute error",
}


@dataclass(frozen=True)
class OuterFoldLosses:
    """One (repetition, outer fold) of the nested scheme."""

    inner_error: float  # e_in(k): the CV error over the other K - 1 folds
    losses: npt.NDArray[np.float64]  # e_out(k): fold k's per-row losses


@dataclass(frozen=True)
class NestedInterval:
    """The interval and every quantity it was built from, so a reader can check it."""

    err_ncv: float  # mean of the inner errors e_in over all repetitions and folds
    err_cv: float  # the plain CV error: mean of its per-row losses
    mse: float  # mean(a) - mean(b), the estimated MSE of Err_CV (may be negative)
    se_unclipped: float  # sqrt(max(0, K/(K-1) * MSE))
    se_naive: float  # sd(plain CV per-row losses) / sqrt(n)
    se: float  # se_unclipped clipped to [se_naive, sqrt(K) * se_naive]
    bias: float  # (1 + (K-2)/K) * (Err_NCV - Err_CV)
    point: float  # Err_NCV - bias
    lower: float
    upper: float
    level: float
    repetitions: int


def nested_interval(
    repetitions: Sequence[Sequence[OuterFoldLosses]],
    cv_losses: Sequence[float] | npt.NDArray[np.float64],
    level: float,
    n_rows: int | None = None,
) -> NestedInterval:
    """The level interval for the error of the procedure (a loss: lower is better).

    `repetitions[r][k]` is outer fold k of repetition r (every repetition has the same K >= 3);
    `cv_losses` are the per-row losses of the plain K-fold CV: one per row, or every outer loss
    of every repetition pooled, with `n_rows` (the table's rows) for the naive standard error.
    """
    folds = len(repetitions[0]) if repetitions else 0
    if folds < 3 or any(len(rep) != folds for rep in repetitions):
        raise ValueError("every repetition needs the same number K >= 3 of outer folds")
    a_terms, b_terms, inner = [], [], []
    for rep in repetitions:
        for fold in rep:
            losses = np.asarray(fold.losses, dtype="float64")
            if len(losses) < 2:
                raise ValueError("every outer fold needs at least two rows for its variance")
            a_terms.append((fold.inner_error - float(losses.mean())) ** 2)
            b_terms.append(float(losses.var(ddof=1)) / len(losses))
            inner.append(fold.inner_error)
    plain = np.asarray(cv_losses, dtype="float64")
    mse = float(np.mean(a_terms) - np.mean(b_terms))
    se_unclipped = math.sqrt(max(0.0, folds / (folds - 1) * mse))
    se_naive = float(plain.std(ddof=1)) / math.sqrt(n_rows or len(plain))
    se = min(max(se_unclipped, se_naive), math.sqrt(folds) * se_naive)
    err_ncv = float(np.mean(inner))
    err_cv = float(plain.mean())
    bias = (1.0 + (folds - 2) / folds) * (err_ncv - err_cv)
    point = err_ncv - bias
    z = float(stats.norm.ppf(0.5 + level / 2.0))
    return NestedInterval(
        err_ncv=err_ncv,
        err_cv=err_cv,
        mse=mse,
        se_unclipped=se_unclipped,
        se_naive=se_naive,
        se=se,
        bias=bias,
        point=point,
        lower=point - z * se,
        upper=point + z * se,
        level=level,
        repetitions=len(repetitions),
    )
