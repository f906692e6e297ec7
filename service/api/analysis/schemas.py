"""What the analysis routes send: a comparison of two jobs and a dataset's history."""

from __future__ import annotations

import math
from dataclasses import asdict
from datetime import datetime
from typing import Any

from pydantic import BaseModel, Field

from service.analysis.compare import Comparison, PairedTest


class TestPublic(BaseModel):
    """The test behind one metric's comparison."""

    test: str = Field(description="corrected_resampled_t (same folds) or welch_t (different).")
    mean_difference: float = Field(description="First job minus second job.")
    t: float | None = Field(description="Null when it is infinite (differences do not vary).")
    df: float | None
    p_value: float = Field(description="Two-sided; approximate (see caveats).")
    n_folds: int | None = Field(description="J = repeats x k, for the paired test.")
    variance: float | None = Field(description="ddof=1 variance of the per-fold differences.")
    test_train_ratio: float | None = Field(description="n_test / n_train, the correction term.")


class IntervalPublic(BaseModel):
    """An interval on the mean difference, in the shape of result v1's estimate interval."""

    method: str = Field(
        description="quick (corrected resampled t over the paired folds) or welch (different "
        "folds)."
    )
    level: float
    lower: float
    upper: float
    se: float
    df: float
    source: str


class MetricComparisonPublic(BaseModel):
    """Both jobs' outer values for one metric, their per-fold differences and the test."""

    metric: str
    left: list[float]
    right: list[float]
    left_mean: float
    right_mean: float
    differences: list[float] | None = Field(description="Per fold; null when the folds differ.")
    interval: IntervalPublic | None = Field(
        description="On the mean difference, first job minus second; null when neither job's "
        "values vary across different folds."
    )
    test: TestPublic


class ComparisonPublic(BaseModel):
    """Two jobs on one dataset compared on every metric they share."""

    jobs: list[str]
    dataset_hash: str
    same_folds: bool
    fingerprints: list[str] | None = Field(description="The shared outer folds, in order.")
    metrics: list[MetricComparisonPublic]
    statement: str
    caveats: list[str]


def _finite(value: float) -> float | None:
    # JSON has no infinity or NaN, and the store's JSON rules refuse them too
    return value if math.isfinite(value) else None


def comparison_public(comparison: Comparison) -> ComparisonPublic:
    """The API form of a comparison."""
    metrics = []
    for item in comparison.metrics:
        test = item.test
        n_folds = variance = ratio = None
        if isinstance(test, PairedTest):
            n_folds, variance, ratio = test.n_folds, test.variance, test.test_train_ratio
        metrics.append(
            MetricComparisonPublic(
                metric=item.metric,
                left=item.left,
                right=item.right,
                left_mean=item.left_mean,
                right_mean=item.right_mean,
                differences=item.differences,
                interval=IntervalPublic(**test.interval) if test.interval else None,
                test=TestPublic(
                    test=test.test,
                    mean_difference=test.mean_difference,
                    t=_finite(test.t),
                    df=_finite(float(test.df)),
                    p_value=test.p_value,
                    n_folds=n_folds,
                    variance=variance,
                    test_train_ratio=ratio,
                ),
            )
        )
    return ComparisonPublic(
        jobs=[comparison.left_job, comparison.right_job],
        dataset_hash=comparison.dataset_hash,
        same_folds=comparison.same_folds,
        fingerprints=comparison.fingerprints,
        metrics=metrics,
        statement=comparison.statement,
        caveats=comparison.caveats,
    )


class HistoryJob(BaseModel):
    """One job on the dataset, with its pick_by estimate and final pick once it succeeded."""

    job_id: str
    status: str
    kind: str
    schedule_id: str | None
    created_at: datetime
    finished_at: datetime | None
    pick_by: str | None
    mean: float | None = Field(description="Outer estimate of pick_by: mean over outer folds.")
    se: float | None = Field(description="Its standard error (descriptive; see the caveats).")
    interval: dict[str, Any] | None = Field(
        default=None,
        description="The estimate's interval, as estimate[pick_by].interval in result v1 (null "
        "when it has none).",
    )
    final_pick: dict[str, Any] | None


class HistoryRefresh(BaseModel):
    """One firing of a schedule on the dataset."""

    id: int
    schedule_id: str
    due_at: datetime
    status: str
    job_id: str | None
    previous_job_id: str | None
    finished_at: datetime | None


class HistoryPublic(BaseModel):
    """A dataset's jobs and refreshes, oldest first."""

    dataset_hash: str
    jobs: list[HistoryJob]
    refreshes: list[HistoryRefresh]


def history_public(history: Any) -> HistoryPublic:
    """The API form of service.analysis.history.DatasetHistory."""
    return HistoryPublic.model_validate(asdict(history))
