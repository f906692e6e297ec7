"""Job routes: submit (idempotent), get, list, cancel, and fold scores as JSON pages or CSV."""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Annotated, Any

from fastapi import APIRouter, Body, Header, Query, Response
from fastapi.responses import StreamingResponse
from sqlalchemy.orm import Session

from service.api.datasets.registration import confine_path_source, server_base_dir
from service.api.jobs import export
from service.api.jobs.params import AllMetrics, JobId
from service.api.jobs.schemas import (
    FoldScorePage,
    JobLinks,
    JobList,
    JobPublic,
    JobStatus,
    job_summary,
)
from service.auth import Action, Principal
from service.dispatch.base import publish_after_commit
from service.errors import BadInput, NotFound
from service.http.deps import (
    CancellerDep,
    DispatcherDep,
    ReaderDep,
    SessionDep,
    SessionsDep,
    SettingsDep,
    SubmitterDep,
)
from service.http.json_body import StrictJsonRoute
from service.http.limits import MAX_SQL_INT
from service.http.problems import problem_responses
from service.http.streams import attachment
from service.jobs import lifecycle
from service.jobs.handover.fold_rows import fold_context
from service.jobs.intake import submit as intake
from service.jobs.intake.start import start_submitted
from service.jobs.queries import jobs as job_queries
from service.store.models import Job

router = APIRouter(prefix="/v1/jobs", tags=["jobs"], route_class=StrictJsonRoute)

IdempotencyKey = Annotated[
    str | None,
    Header(
        alias="Idempotency-Key",
        max_length=200,
        description="Repeat a submission safely: the same key and body name the same job.",
    ),
]
_UNSEEN_DATASET = (
    "no dataset with this content hash is visible to your team; upload or register "
    "the table first (POST /v1/datasets/upload) and pass the hash it returns."
)
_ROOTS_HINT = (
    "register the table first (POST /v1/datasets/upload or POST /v1/datasets) "
    "and pass its content_hash as dataset."
)


def _public(job: Job, session: Session, principal: Principal) -> JobPublic:
    base = f"/v1/jobs/{job.id}"
    return JobPublic(
        **job_summary(job).model_dump(),
        error=job.error,
        result=job_queries.result_for(session, principal, job),
        links=JobLinks(
            job=base,
            cancel=f"{base}/cancel",
            fold_scores=f"{base}/fold-scores",
            fold_scores_csv=f"{base}/fold-scores.csv",
            dataset=f"/v1/datasets/{job.dataset_hash}",
        ),
    )


@router.post(
    "",
    response_model=JobPublic,
    status_code=202,
    summary="Submit a selection job (job request v1)",
    description=(
        "202 with `Location` once the job and its units are stored; repeating the call with "
        "the same `Idempotency-Key` and body answers 200 with the same job, another body under "
        "that key is a 409. Path sources are confined to FOLDWISE_DATA_ROOTS."
    ),
    responses={
        200: {"model": JobPublic, "description": "The job an earlier call with this key made."},
        **problem_responses(400, 401, 403, 404, 409, 413, 422),
    },
)
def submit_job(
    body: Annotated[dict[str, Any], Body(description="Job request v1.")],
    principal: SubmitterDep,
    session: SessionDep,
    sessions: SessionsDep,
    settings: SettingsDep,
    dispatcher: DispatcherDep,
    response: Response,
    idempotency_key: IdempotencyKey = None,
) -> JobPublic:
    """Validate and store the job, commit, then hand its first units to the workers."""
    # Taken as a plain object so every field error comes from parse_job_request's sentences.
    confine_path_source(body.get("dataset"), settings, field="dataset", hint=_ROOTS_HINT)
    try:
        submitted = intake.submit_committed(
            session,
            body,
            principal=principal,
            settings=settings,
            idempotency_key=idempotency_key,
            base_dir=server_base_dir(settings),
        )
    except NotFound:
        # The same answer whether the hash is unknown or another team's: nothing leaks.
        raise BadInput("dataset", _UNSEEN_DATASET) from None
    job = submitted.job
    if submitted.created:
        publish_after_commit(dispatcher, start_submitted(sessions, job.id, settings), job.id)
        session.refresh(job)
    response.status_code = 202 if submitted.created else 200
    response.headers["Location"] = f"/v1/jobs/{job.id}"
    return _public(job, session, principal)


@router.get(
    "/{job_id}",
    response_model=JobPublic,
    summary="Get a job: status, progress and, once succeeded, result v1",
    responses=problem_responses(401, 403, 404, 422),
)
def get_job(job_id: JobId, principal: ReaderDep, session: SessionDep) -> JobPublic:
    """Another team's job is a 404, as if it did not exist."""
    return _public(job_queries.get_job(session, job_id, principal), session, principal)


def _aware(moment: datetime | None) -> datetime | None:
    # The store refuses naive datetimes; a query without an offset is read as UTC.
    if moment is not None and moment.tzinfo is None:
        return moment.replace(tzinfo=UTC)
    return moment


@router.get(
    "",
    response_model=JobList,
    summary="List jobs, newest first, by dataset hash, status, creation time, family, schedule",
    responses=problem_responses(401, 403, 422),
)
def list_jobs(
    principal: ReaderDep,
    session: SessionDep,
    dataset_hash: Annotated[str | None, Query(max_length=64)] = None,
    status: Annotated[JobStatus | None, Query()] = None,
    created_after: Annotated[datetime | None, Query(description="Inclusive.")] = None,
    created_before: Annotated[datetime | None, Query(description="Exclusive.")] = None,
    estimator: Annotated[
        str | None, Query(max_length=100, description="A family among the job's candidates.")
    ] = None,
    schedule_id: Annotated[str | None, Query(max_length=32)] = None,
    limit: Annotated[int, Query(ge=1, le=200)] = 50,
    offset: Annotated[int, Query(ge=0, le=MAX_SQL_INT)] = 0,
) -> JobList:
    """The caller's team's jobs (an analyst's: every team's) with the total count."""
    jobs, count = job_queries.list_jobs(
        session,
        principal,
        limit=limit,
        offset=offset,
        dataset_hash=dataset_hash,
        status=status,
        created_after=_aware(created_after),
        created_before=_aware(created_before),
        estimator=estimator,
        schedule_id=schedule_id,
    )
    return JobList(data=[job_summary(j) for j in jobs], count=count)


@router.post(
    "/{job_id}/cancel",
    response_model=JobPublic,
    summary="Cancel a queued or running job (finished jobs are left as they are)",
    responses=problem_responses(401, 403, 404, 422),
)
def cancel_job(job_id: JobId, principal: CancellerDep, session: SessionDep) -> JobPublic:
    """Units stop between fits; queued units never start.

    Needs the `submit` scope and a job of the token's own team: another team's job answers 404,
    as a missing one does, analyst tokens included.
    """
    job = lifecycle.cancel_job(
        session, job_queries.get_job(session, job_id, principal, Action.CANCEL)
    )
    session.commit()
    return _public(job, session, principal)


@router.get(
    "/{job_id}/fold-scores",
    response_model=FoldScorePage,
    summary="The job's fold scores in id order, keyset paginated",
    responses=problem_responses(401, 403, 404, 422),
)
def list_fold_scores(
    job_id: JobId,
    principal: ReaderDep,
    session: SessionDep,
    after: Annotated[
        int, Query(ge=0, le=MAX_SQL_INT, description="Return scores with id greater than this.")
    ] = 0,
    limit: Annotated[int, Query(ge=1, le=1000)] = 100,
    all_metrics: AllMetrics = False,
) -> FoldScorePage:
    """Scores of the job's candidates on its folds, whichever job computed them."""
    job = job_queries.get_job(session, job_id, principal)
    rows = job_queries.fold_scores_page(
        session, job, after_id=after, limit=limit, all_metrics=all_metrics
    )
    data = export.public_scores(session, principal, rows, fold_context(session, job.id))
    return FoldScorePage(data=data, next_after=data[-1].id if len(data) == limit else None)


@router.get(
    "/{job_id}/fold-scores.csv",
    response_class=StreamingResponse,
    response_model=None,
    summary="The job's fold scores as CSV (the JSON listing's columns)",
    responses={
        200: {
            "description": "CSV with a header row, in id order.",
            "content": {"text/csv": {"schema": {"type": "string"}}},
        },
        **problem_responses(401, 403, 404, 422),
    },
)
def export_fold_scores(
    job_id: JobId,
    principal: ReaderDep,
    session: SessionDep,
    sessions: SessionsDep,
    all_metrics: AllMetrics = False,
) -> StreamingResponse:
    """Streamed page by page, each page read in its own short session."""
    job = job_queries.get_job(session, job_id, principal)
    return attachment(
        export.fold_score_lines(sessions, job.id, principal, all_metrics=all_metrics),
        "text/csv; charset=utf-8",
        f"fold-scores-{job.id}.csv",
    )
