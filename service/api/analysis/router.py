"""Analysis routes: a dataset's jobs, fold scores and history; exports; two jobs compared."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Path, Query
from fastapi.responses import StreamingResponse
from sqlalchemy.orm import Session

from service.analysis import export, queries
from service.analysis.history import dataset_history
from service.api.analysis.schemas import (
    ComparisonPublic,
    HistoryPublic,
    comparison_public,
    history_public,
)
from service.api.jobs.export import public_scores
from service.api.jobs.params import AllMetrics
from service.api.jobs.schemas import FoldScorePage, JobList, job_summary
from service.auth import Principal
from service.errors import BadInput
from service.http.deps import ReaderDep, SessionDep, SessionsDep
from service.http.json_body import StrictJsonRoute
from service.http.limits import MAX_SQL_INT
from service.http.problems import problem_responses
from service.http.streams import attachment
from service.jobs.handover.fold_rows import fold_context
from service.jobs.queries import datasets as dataset_access
from service.jobs.queries import jobs as job_queries
from service.store.models import FoldScore, Job

router = APIRouter(tags=["analysis"], route_class=StrictJsonRoute)

ContentHash = Annotated[
    str, Path(pattern=r"^[0-9a-f]{64}$", description="sha256 hex of the canonical table.")
]
JobId = Annotated[str, Path(max_length=64, description="The job's id.")]
CandidateFilter = Annotated[str | None, Query(max_length=64, description="One candidate_key.")]
MetricFilter = Annotated[str | None, Query(max_length=64, description="One metric name.")]
RoleFilter = Annotated[
    queries.FoldRole | None,
    Query(
        description="The fold's role in a job's plan: outer, inner or final_inner, a nested "
        "interval's interval_outer or interval_inner, or a halving search's round folds, "
        "halving_inner or halving_final_inner."
    ),
]
_CSV = {"text/csv": {"schema": {"type": "string"}}}
_PARQUET = {"application/vnd.apache.parquet": {"schema": {"type": "string", "format": "binary"}}}


@router.get(
    "/v1/datasets/{content_hash}/jobs",
    response_model=JobList,
    summary="The jobs run on one dataset, newest first",
    responses=problem_responses(401, 403, 404, 422),
)
def list_dataset_jobs(
    content_hash: ContentHash,
    principal: ReaderDep,
    session: SessionDep,
    limit: Annotated[int, Query(ge=1, le=200)] = 50,
    offset: Annotated[int, Query(ge=0, le=MAX_SQL_INT)] = 0,
) -> JobList:
    """The caller's team's jobs on the table (an analyst's: every team's) with the count."""
    jobs, count = queries.dataset_jobs(session, principal, content_hash, limit=limit, offset=offset)
    return JobList(data=[job_summary(j) for j in jobs], count=count)


@router.get(
    "/v1/datasets/{content_hash}/fold-scores",
    response_model=FoldScorePage,
    summary="Every stored fold score of a dataset across its jobs, keyset paginated",
    responses=problem_responses(401, 403, 404, 422),
)
def list_dataset_fold_scores(
    content_hash: ContentHash,
    principal: ReaderDep,
    session: SessionDep,
    candidate_key: CandidateFilter = None,
    metric: MetricFilter = None,
    role: RoleFilter = None,
    after: Annotated[
        int, Query(ge=0, le=MAX_SQL_INT, description="Return scores with id greater than this.")
    ] = 0,
    limit: Annotated[int, Query(ge=1, le=queries.MAX_PAGE)] = 100,
) -> FoldScorePage:
    """Scores on the folds and candidates of the visible jobs on the table, in id order."""
    dataset_access.visible_dataset(session, content_hash, principal)
    rows = queries.dataset_fold_scores_page(
        session,
        principal,
        content_hash,
        after_id=after,
        limit=limit,
        candidate_key=candidate_key,
        metric=metric,
        role=role,
    )
    data = public_scores(session, principal, rows)
    return FoldScorePage(data=data, next_after=data[-1].id if len(data) == limit else None)


def _dataset_fetcher(principal: Principal, content_hash: str, **filters: Any) -> export.PageFetcher:
    def fetch(session: Session, after: int, limit: int) -> list[FoldScore]:
        return queries.dataset_fold_scores_page(
            session, principal, content_hash, after_id=after, limit=limit, **filters
        )

    return fetch


@router.get(
    "/v1/datasets/{content_hash}/fold-scores.csv",
    response_class=StreamingResponse,
    response_model=None,
    summary="A dataset's fold scores across jobs as CSV (the JSON listing's columns)",
    responses={
        200: {"description": "CSV, id order.", "content": _CSV},
        **problem_responses(401, 403, 404, 422),
    },
)
def export_dataset_csv(
    content_hash: ContentHash,
    principal: ReaderDep,
    session: SessionDep,
    sessions: SessionsDep,
    candidate_key: CandidateFilter = None,
    metric: MetricFilter = None,
    role: RoleFilter = None,
) -> StreamingResponse:
    """Streamed page by page from the store, each page in its own short session."""
    dataset_access.visible_dataset(session, content_hash, principal)
    fetch = _dataset_fetcher(
        principal, content_hash, candidate_key=candidate_key, metric=metric, role=role
    )
    return attachment(
        export.csv_chunks(sessions, fetch, principal),
        "text/csv; charset=utf-8",
        f"fold-scores-{content_hash[:12]}.csv",
    )


@router.get(
    "/v1/datasets/{content_hash}/fold-scores.parquet",
    response_class=StreamingResponse,
    response_model=None,
    summary="A dataset's fold scores across jobs as Parquet",
    responses={
        200: {"description": "One row group per page.", "content": _PARQUET},
        **problem_responses(401, 403, 404, 422),
    },
)
def export_dataset_parquet(
    content_hash: ContentHash,
    principal: ReaderDep,
    session: SessionDep,
    sessions: SessionsDep,
    candidate_key: CandidateFilter = None,
    metric: MetricFilter = None,
    role: RoleFilter = None,
) -> StreamingResponse:
    """Streamed as it is written: one row group per keyset page, then the footer."""
    dataset_access.visible_dataset(session, content_hash, principal)
    fetch = _dataset_fetcher(
        principal, content_hash, candidate_key=candidate_key, metric=metric, role=role
    )
    return attachment(
        export.parquet_chunks(sessions, fetch, principal),
        "application/vnd.apache.parquet",
        f"fold-scores-{content_hash[:12]}.parquet",
    )


@router.get(
    "/v1/jobs/{job_id}/fold-scores.parquet",
    response_class=StreamingResponse,
    response_model=None,
    summary="The job's fold scores as Parquet (the JSON listing's columns)",
    responses={
        200: {"description": "One row group per page.", "content": _PARQUET},
        **problem_responses(401, 403, 404, 422),
    },
)
def export_job_parquet(
    job_id: JobId,
    principal: ReaderDep,
    session: SessionDep,
    sessions: SessionsDep,
    all_metrics: AllMetrics = False,
) -> StreamingResponse:
    """The same scores as GET /v1/jobs/{id}/fold-scores, streamed as Parquet."""
    job = job_queries.get_job(session, job_id, principal)
    found = job.id

    def fetch(page_session: Session, after: int, limit: int) -> list[FoldScore]:
        stored = page_session.get_one(Job, found)
        return job_queries.fold_scores_page(
            page_session, stored, after_id=after, limit=limit, all_metrics=all_metrics
        )

    return attachment(
        export.parquet_chunks(sessions, fetch, principal, fold_context(session, found)),
        "application/vnd.apache.parquet",
        f"fold-scores-{found}.parquet",
    )


@router.get(
    "/v1/datasets/{content_hash}/history",
    response_model=HistoryPublic,
    summary="A dataset's jobs over time with their estimates and final picks, and refreshes",
    responses=problem_responses(401, 403, 404, 422),
)
def get_dataset_history(
    content_hash: ContentHash, principal: ReaderDep, session: SessionDep
) -> HistoryPublic:
    """Oldest first, so the estimate and the pick can be read as they moved."""
    return history_public(dataset_history(session, principal, content_hash))


def _two_jobs(text: str) -> tuple[str, str]:
    ids = [part.strip() for part in text.split(",")]
    if len(ids) != 2 or not all(ids):
        raise BadInput("jobs", "give exactly two job ids separated by a comma, as jobs=A,B.")
    return ids[0], ids[1]


@router.get(
    "/v1/compare",
    response_model=ComparisonPublic,
    summary="Compare two jobs on one dataset: per-fold differences and a corrected t-test",
    responses=problem_responses(401, 403, 422),
)
def compare(
    principal: ReaderDep,
    session: SessionDep,
    jobs: Annotated[str, Query(max_length=200, description="Two job ids: A,B.")],
) -> ComparisonPublic:
    """Same outer folds: the corrected resampled t-test; different folds: a weaker Welch test."""
    left, right = _two_jobs(jobs)
    return comparison_public(queries.compare_jobs(session, principal, left, right))
