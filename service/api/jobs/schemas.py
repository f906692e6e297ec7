"""What the job routes send (the request body is job request v1, service.jobs.intake.request)."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from pydantic import BaseModel, ConfigDict, Field

from service.api.jobs.curve_schemas import CurveResult
from service.store.models import Job
from service.store.statuses import JobStatus


class _Open(BaseModel):
    # Result v1 may gain fields; a client generated from this document must not lose them.
    model_config = ConfigDict(extra="allow")


class CandidatePublic(_Open):
    """One concrete (estimator, hyperparameters) point."""

    candidate_key: str
    estimator: str
    params: dict[str, Any]


class OuterFoldResult(_Open):
    """One outer fold: the inner loop's pick and its scores on the held-out rows."""

    repeat: int
    fold: int
    n_train: int
    n_test: int
    pick: CandidatePublic
    inner_mean: float = Field(description="The pick's inner mean of pick_by.")
    scores: dict[str, float]


class MetricEstimate(_Open):
    """A metric over the outer folds."""

    mean: float
    std: float
    se: float
    values: list[float]


class FinalPick(CandidatePublic):
    """The inner procedure run on all rows, refit on all rows."""

    inner_mean: float
    model_sha256: str


class PickCount(CandidatePublic):
    """How many outer folds picked a candidate."""

    count: int


class WorkSummary(_Open):
    """How much work the job took."""

    units_total: int
    units_computed: int
    units_reused: int
    fits: int
    seconds: float


class ResultV1(_Open):
    """Result v1 of a succeeded job."""

    dataset_hash: str
    task: str
    n_rows: int
    metrics: list[str]
    pick_by: str
    outer: list[OuterFoldResult]
    estimate: dict[str, MetricEstimate]
    final_pick: FinalPick
    pick_frequency: list[PickCount]
    optimism_gap: float = Field(description="Final pick's inner mean minus the outer mean.")
    work: WorkSummary
    versions: dict[str, str]
    cautions: list[str]
    candidates: list[CandidatePublic] = Field(
        default_factory=list,
        description="Every candidate evaluated, in request order; drawn values as drawn.",
    )
    slices: list[dict[str, Any]] | None = Field(
        default=None,
        description="Per slice column named in the request: the estimate per value, with counts "
        "and a flag where a group differs from the rest by more than the fold-to-fold noise.",
    )


class JobProgress(BaseModel):
    """Units finished out of the units the job has so far (the total grows by stage)."""

    units_done: int
    units_total: int
    fraction: float = Field(ge=0, le=1)


class JobLinks(BaseModel):
    """Where to go next."""

    job: str
    cancel: str
    fold_scores: str
    fold_scores_csv: str
    dataset: str


class JobSummary(BaseModel):
    """A job without its result (what listings carry)."""

    id: str
    status: JobStatus
    kind: str = Field(default="selection", description="selection, or learning_curve.")
    parent_id: str | None = Field(
        default=None, description="The learning curve this job is one size of."
    )
    dataset_hash: str
    team: str
    created_at: datetime
    started_at: datetime | None
    finished_at: datetime | None
    progress: JobProgress


class JobPublic(JobSummary):
    """A job with its error or, once succeeded, its result v1."""

    error: str | None
    result: ResultV1 | CurveResult | None = Field(
        description="Result v1 (a learning curve: its curve) when succeeded, else null."
    )
    links: JobLinks


class JobList(BaseModel):
    """A page of jobs and how many match in all."""

    data: list[JobSummary]
    count: int


class FoldScorePublic(BaseModel):
    """One stored score with its provenance; `job_id` is the job whose unit computed it."""

    id: int
    fold_fingerprint: str
    candidate_key: str
    metric: str
    value: float
    fit_seconds: float
    score_seconds: float
    n_train: int
    n_test: int
    seed: int | None
    versions: dict[str, str]
    worker: str
    job_id: str | None = Field(
        description="The job whose unit computed the score; null when it was another team's "
        "job (scores are shared by content: same table, fold and candidate)."
    )
    created_at: datetime
    # where the fold sits in this job's plan, and the candidate behind the key (fold_rows.py)
    role: str | None = Field(
        default=None,
        description="outer, inner or final_inner; a nested interval's procedure folds and their "
        "searches' folds are interval_outer and interval_inner (never in the estimate's mean); "
        "a halving search's round folds (an inner fold cut to the round's rows) are "
        "halving_inner (an outer fold's search) and halving_final_inner (the search on all "
        "rows).",
    )
    repeat: int | None = Field(
        default=None,
        description="The outer repeat (inner: its parent's; interval rows: the interval's "
        "repetition, from 0).",
    )
    fold: int | None = Field(
        default=None,
        description="The outer fold (inner: its parent's; interval rows: the outer fold the "
        "procedure leaves out).",
    )
    inner_repeat: int | None = Field(
        default=None,
        description="The inner fold's repeat (halving rows: the repeat of the inner fold the "
        "round cuts).",
    )
    inner_fold: int | None = None
    estimator: str | None = None
    params: dict[str, Any] | None = None
    interval_part: int | None = Field(
        default=None,
        description="Interval rows only: the part the procedure is scored on (equal to `fold` "
        "for the procedure that leaves out that fold alone); null otherwise.",
    )
    halving_round: int | None = Field(
        default=None,
        description="Halving rows only: the round of the search (from 0) whose rows the fold "
        "holds, a share of the inner fold's that grows each round; null otherwise.",
    )


class FoldScorePage(BaseModel):
    """Scores in id order; pass `next_after` as `after` for the next page (null: no more)."""

    data: list[FoldScorePublic]
    next_after: int | None


def job_summary(job: Job) -> JobSummary:
    """The listing shape of a job, shared by every route that lists jobs."""
    total = job.units_total
    return JobSummary(
        id=job.id,
        status=JobStatus(job.status),
        kind=job.kind,
        parent_id=job.parent_id,
        dataset_hash=job.dataset_hash,
        team=job.team,
        created_at=job.created_at,
        started_at=job.started_at,
        finished_at=job.finished_at,
        progress=JobProgress(
            units_done=job.units_done,
            units_total=total,
            fraction=min(1.0, job.units_done / total) if total else 0.0,
        ),
    )
