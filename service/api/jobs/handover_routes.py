"""Handing a job's outcome over: the final model (skops), its model card, out-of-fold predictions.

Visibility is the job routes': another team's job is a 404. A job that has not succeeded (or a
learning curve's parent, which has no model of its own) answers 409 with a sentence saying why.
"""

from __future__ import annotations

import base64
from pathlib import Path as FilePath
from typing import Annotated, Any

from fastapi import APIRouter, Query, Response
from fastapi.responses import FileResponse, PlainTextResponse, StreamingResponse
from pydantic import BaseModel, ConfigDict

from service.analysis import predictions
from service.api.jobs.params import JobId
from service.http.deps import ReaderDep, SessionDep, SessionsDep, SettingsDep
from service.http.json_body import StrictJsonRoute
from service.http.limits import MAX_SQL_INT
from service.http.problems import ProblemError, problem_responses
from service.http.streams import attachment
from service.jobs.execution.plans import plan_for_job
from service.jobs.handover import model_file
from service.jobs.handover.model_card import card_markdown, model_card
from service.jobs.handover.outer_predictions import NotReady, require_result
from service.jobs.handover.stored_model import model_path
from service.jobs.queries import jobs as job_queries
from service.store.host_cache import CopyRefused
from service.store.models import FinalModel, Job

router = APIRouter(prefix="/v1/jobs", tags=["handover"], route_class=StrictJsonRoute)
SHA_HEADER = "X-Model-Sha256"
UNTRUSTED_HEADER = "X-Model-Untrusted-Types"
_ANSWERS = problem_responses(401, 403, 404, 409, 422)


class ModelCard(BaseModel):
    """A model card in the sections of Mitchell et al. 2019 (jobs/handover/model_card.py)."""

    model_config = ConfigDict(extra="allow")

    model_details: dict[str, Any]
    intended_use: str
    inputs: list[dict[str, str]]
    factors: list[dict[str, Any]]
    metrics: dict[str, Any]
    evaluation_data: dict[str, Any]
    training_data: str
    quantitative_analyses: dict[str, Any]
    ethical_considerations: list[str]
    caveats_and_recommendations: list[str]


class PredictionPage(BaseModel):
    """Rows of the outer test folds; pass `next_after` as `after` for more (null: no more)."""

    columns: list[str]
    data: list[dict[str, Any]]
    next_after: int | None


def _job(session: Any, job_id: str, principal: Any, what: str) -> tuple[Job, dict[str, Any]]:
    job = job_queries.get_job(session, job_id, principal)
    try:
        return job, require_result(job, what)
    except NotReady as exc:
        raise ProblemError(409, str(exc)) from None


@router.get(
    "/{job_id}/model",
    response_class=Response,
    summary="The final pick fitted on all rows, in skops' format, its sha256 in a header",
    responses={
        200: {
            "description": "The model file; X-Model-Sha256 and Repr-Digest carry its sha256, "
            "equal to result v1's final_pick.model_sha256; X-Model-Untrusted-Types lists what "
            "skops.io.get_untrusted_types reports for it.",
            "content": {model_file.MEDIA_TYPE: {"schema": {"type": "string", "format": "binary"}}},
        },
        **_ANSWERS,
    },
)
def download_model(
    job_id: JobId, principal: ReaderDep, session: SessionDep, settings: SettingsDep
) -> Response:
    """The file the job stored, checked against its recorded sha256 before it is sent."""
    job, _ = _job(session, job_id, principal, "model")
    model = session.get_one(FinalModel, job.id)
    if FilePath(model.path).suffix != model_file.SUFFIX:
        raise ProblemError(
            409,
            f"job {job.id}'s model was saved before models were kept in skops' format; submit "
            "the job again to get a model that can be handed over.",
        )
    try:
        # this host's copy, fetched from the store on a miss and checked against the sha256:
        # a damaged file is never handed over
        path = model_path(session, model, settings)
    except CopyRefused as exc:
        raise ProblemError(500, f"job {job.id}'s model cannot be handed over: {exc}") from None
    digest = base64.b64encode(bytes.fromhex(model.sha256)).decode()
    # streamed from disk: a forest's file can be large
    return FileResponse(
        path,
        media_type=model_file.MEDIA_TYPE,
        filename=f"model-{job.id}.skops",
        headers={
            SHA_HEADER: model.sha256,
            "Repr-Digest": f"sha-256=:{digest}:",  # RFC 9530
            # what skops.io.get_untrusted_types reports for this file ("" when nothing)
            UNTRUSTED_HEADER: ", ".join(model_file.untrusted_types_of(path)),
        },
    )


@router.get(
    "/{job_id}/model-card",
    response_model=ModelCard,
    summary="The final pick's model card as JSON (Mitchell et al. 2019 sections)",
    responses=_ANSWERS,
)
def get_model_card(
    job_id: JobId, principal: ReaderDep, session: SessionDep, settings: SettingsDep
) -> ModelCard:
    """Dataset, target, task, the pick, the nested estimate, gap, pick frequency, cautions."""
    job, _ = _job(session, job_id, principal, "model card")
    return ModelCard.model_validate(model_card(session, job, settings))


@router.get(
    "/{job_id}/model-card.md",
    response_class=Response,
    summary="The final pick's model card as Markdown",
    responses={
        200: {
            "description": "The card in Markdown.",
            "content": {"text/markdown": {"schema": {"type": "string"}}},
        },
        **_ANSWERS,
    },
)
def get_model_card_markdown(
    job_id: JobId, principal: ReaderDep, session: SessionDep, settings: SettingsDep
) -> PlainTextResponse:
    """The same card as Markdown."""
    job, _ = _job(session, job_id, principal, "model card")
    return PlainTextResponse(
        card_markdown(model_card(session, job, settings)),
        media_type="text/markdown; charset=utf-8",
    )


def _table(session: Any, job_id: str, principal: Any, settings: Any) -> predictions.PredictionTable:
    job, result = _job(session, job_id, principal, "set of predictions")
    loaded = plan_for_job(session, job.id, settings)
    try:
        return predictions.prediction_table(session, loaded, result)
    except NotReady as exc:
        raise ProblemError(409, str(exc)) from None


@router.get(
    "/{job_id}/predictions",
    response_model=PredictionPage,
    summary="Out-of-fold predictions of the outer test folds, in pages",
    responses=_ANSWERS,
)
def list_predictions(
    job_id: JobId,
    principal: ReaderDep,
    session: SessionDep,
    settings: SettingsDep,
    after: Annotated[
        int, Query(ge=0, le=MAX_SQL_INT, description="Rows already read (0 to start).")
    ] = 0,
    limit: Annotated[int, Query(ge=1, le=predictions.MAX_PAGE)] = 1000,
) -> PredictionPage:
    """Per outer test row: row index, repeat, fold, pick, actual, predicted, probabilities."""
    table = _table(session, job_id, principal, settings)
    try:
        rows, next_after = predictions.json_page(session, table, after=after, limit=limit)
    except NotReady as exc:
        raise ProblemError(409, str(exc)) from None
    return PredictionPage(columns=table.columns, data=rows, next_after=next_after)


@router.get(
    "/{job_id}/predictions.csv",
    response_class=StreamingResponse,
    response_model=None,
    summary="Out-of-fold predictions as CSV, streamed fold by fold",
    responses={200: {"content": {"text/csv": {"schema": {"type": "string"}}}}, **_ANSWERS},
)
def export_predictions_csv(
    job_id: JobId,
    principal: ReaderDep,
    session: SessionDep,
    sessions: SessionsDep,
    settings: SettingsDep,
) -> StreamingResponse:
    """The JSON pages' columns, one line per outer test row."""
    table = _table(session, job_id, principal, settings)
    return attachment(
        predictions.csv_chunks(sessions, table),
        "text/csv; charset=utf-8",
        f"predictions-{job_id}.csv",
    )


@router.get(
    "/{job_id}/predictions.parquet",
    response_class=StreamingResponse,
    response_model=None,
    summary="Out-of-fold predictions as Parquet, one row group per page",
    responses={
        200: {"content": {"application/vnd.apache.parquet": {"schema": {"type": "string"}}}},
        **_ANSWERS,
    },
)
def export_predictions_parquet(
    job_id: JobId,
    principal: ReaderDep,
    session: SessionDep,
    sessions: SessionsDep,
    settings: SettingsDep,
) -> StreamingResponse:
    """Labels keep the target's type; probabilities and decision values are float64."""
    table = _table(session, job_id, principal, settings)
    return attachment(
        predictions.parquet_chunks(sessions, table),
        "application/vnd.apache.parquet",
        f"predictions-{job_id}.parquet",
    )
