"""Dataset routes: register a source, upload a file, get one by content hash, list."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Body, Path, Query, Request, Response
from sqlalchemy.orm import Session
from starlette.concurrency import run_in_threadpool
from starlette.convertors import StringConvertor, register_url_convertor

from service.api.datasets import registration
from service.api.datasets.schemas import (
    ColumnPublic,
    DatasetCreate,
    DatasetList,
    DatasetPublic,
    DatasetSummary,
)
from service.api.datasets.upload import UPLOAD_FIELD, SpooledUpload, spool_upload
from service.auth import Principal
from service.config import Settings
from service.datasets.files import read_dataset_file
from service.datasets.sources import table_from_frame
from service.errors import BadInput
from service.http.deps import ReaderDep, SessionDep, SettingsDep, SubmitterDep
from service.http.json_body import StrictJsonRoute
from service.http.limits import MAX_SQL_INT
from service.http.problems import problem_responses
from service.store.models import Dataset, DatasetRegistration

router = APIRouter(prefix="/v1/datasets", tags=["datasets"], route_class=StrictJsonRoute)


class NotUploadConvertor(StringConvertor):
    """A path segment other than `upload`, so `GET /v1/datasets/upload` is a 405, not a 422.

    Other non-hashes still reach the route and get its 422 naming `content_hash`.
    """

    regex = "(?!upload$)[^/]+"


register_url_convertor("not_upload", NotUploadConvertor())

ContentHash = Annotated[
    str, Path(pattern=r"^[0-9a-f]{64}$", description="sha256 hex of the canonical table.")
]


def _summary(dataset: Dataset, copy: DatasetRegistration | None) -> DatasetSummary:
    # origin and time of the caller's team's own copy (the same bytes may have come from
    # another team first, under another name)
    origin = (copy.origin if copy is not None else None) or {}
    return DatasetSummary(
        content_hash=dataset.content_hash,
        n_rows=dataset.n_rows,
        n_columns=dataset.n_columns,
        origin={str(k): str(v) for k, v in origin.items()},
        created_at=copy.created_at if copy is not None else dataset.created_at,
    )


def _public(
    session: Session, dataset: Dataset, principal: Principal, settings: Settings
) -> DatasetPublic:
    copy = registration.team_copies(session, principal, [dataset.content_hash]).get(
        dataset.content_hash
    )
    columns = [
        ColumnPublic.model_validate(c)
        for c in registration.column_summaries(session, dataset, settings)
    ]
    return DatasetPublic(**_summary(dataset, copy).model_dump(), columns=columns)


def _answer(
    session: Session,
    content_hash: str,
    created: bool,
    principal: Principal,
    settings: Settings,
    response: Response,
) -> DatasetPublic:
    response.status_code = 201 if created else 200
    response.headers["Location"] = f"/v1/datasets/{content_hash}"
    return _public(session, registration.stored_dataset(session, content_hash), principal, settings)


@router.post(
    "",
    response_model=DatasetPublic,
    status_code=201,
    summary="Register a table from a file under a data root or a bundled sample",
    description=(
        "201 when the table is new to the caller's team, 200 with the same content hash when "
        "the team had registered it already. Path sources are read only under "
        "FOLDWISE_DATA_ROOTS; relative paths start at the first root."
    ),
    responses={
        200: {"model": DatasetPublic, "description": "The team had registered this table."},
        **problem_responses(400, 401, 403, 413, 422),
    },
)
def register_dataset(
    source: Annotated[DatasetCreate, Body()],
    principal: SubmitterDep,
    session: SessionDep,
    settings: SettingsDep,
    response: Response,
) -> DatasetPublic:
    """Load, check and store the table, and register it for the caller's team."""
    # Loaded before the session is first used, so no transaction is open while a file is read.
    table = registration.load_source(source, settings, team=principal.team)
    created = registration.store_table(session, table, team=principal.team, settings=settings)
    return _answer(session, table.content_hash, created, principal, settings, response)


def _register_upload(
    spooled: SpooledUpload,
    session: Session,
    principal: Principal,
    settings: Settings,
    response: Response,
) -> DatasetPublic:
    try:
        raw, fmt = read_dataset_file(spooled.path, field=UPLOAD_FIELD)
    except BadInput as exc:
        # The reader names the spool file; the caller knows the file by the name it sent.
        raise BadInput(
            exc.field, exc.message.replace(str(spooled.path), spooled.filename)
        ) from None
    registration.check_shape(raw, settings, field=UPLOAD_FIELD)
    table = table_from_frame(raw, {"upload": spooled.filename, "format": fmt}, field=UPLOAD_FIELD)
    created = registration.store_table(session, table, team=principal.team, settings=settings)
    return _answer(session, table.content_hash, created, principal, settings, response)


@router.post(
    "/upload",
    response_model=DatasetPublic,
    status_code=201,
    summary="Upload a CSV or Parquet file and register it",
    description=(
        "multipart/form-data with the table in field `file` (.csv, .parquet or .pq). The size "
        "is capped by FOLDWISE_MAX_UPLOAD_MB, rows and columns by FOLDWISE_MAX_ROWS and "
        "FOLDWISE_MAX_COLUMNS. 201 when new to the team, 200 when registered already."
    ),
    responses={
        200: {"model": DatasetPublic, "description": "The team had registered this table."},
        **problem_responses(400, 401, 403, 413, 422),
    },
    openapi_extra={
        "requestBody": {
            "required": True,
            "content": {
                "multipart/form-data": {
                    "schema": {
                        "type": "object",
                        "required": [UPLOAD_FIELD],
                        "properties": {UPLOAD_FIELD: {"type": "string", "format": "binary"}},
                    }
                }
            },
        }
    },
)
async def upload_dataset(
    request: Request,
    principal: SubmitterDep,
    session: SessionDep,
    settings: SettingsDep,
    response: Response,
) -> DatasetPublic:
    """Stream the file to the spool, check and store it, and always remove the spooled copy."""
    spooled = await spool_upload(
        request, spool_dir=settings.upload_dir, limit=settings.max_upload_bytes
    )
    try:
        return await run_in_threadpool(
            _register_upload, spooled, session, principal, settings, response
        )
    finally:
        spooled.path.unlink(missing_ok=True)


@router.get(
    "/{content_hash:not_upload}",
    response_model=DatasetPublic,
    summary="Get a registered table by its content hash",
    responses=problem_responses(401, 403, 404, 422),
)
def get_dataset(
    content_hash: ContentHash, principal: ReaderDep, session: SessionDep, settings: SettingsDep
) -> DatasetPublic:
    """The table's shape, columns and origin, if the caller's team registered it."""
    dataset = registration.get_dataset(session, content_hash, principal)
    return _public(session, dataset, principal, settings)


@router.get(
    "",
    response_model=DatasetList,
    summary="List the tables the caller's team registered (analysts: every team's)",
    responses=problem_responses(401, 403, 422),
)
def list_datasets(
    principal: ReaderDep,
    session: SessionDep,
    limit: Annotated[int, Query(ge=1, le=200)] = 50,
    offset: Annotated[int, Query(ge=0, le=MAX_SQL_INT)] = 0,
) -> DatasetList:
    """Newest first, with the total count."""
    rows, count = registration.list_datasets(session, principal, limit=limit, offset=offset)
    copies = registration.team_copies(session, principal, [d.content_hash for d in rows])
    return DatasetList(data=[_summary(d, copies.get(d.content_hash)) for d in rows], count=count)
