"""The FastAPI application: routers, problem handlers, and the store and dispatcher it holds."""

from __future__ import annotations

import logging
import os
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager
from typing import Any

import anyio.to_thread
from fastapi import FastAPI
from fastapi.openapi.utils import get_openapi

import service
from service.api.admission import UNBOUNDED_PREFIXES, Admission, api_threads_from_env
from service.api.analysis.router import router as analysis_router
from service.api.audit.router import router as audit_router
from service.api.datasets.router import router as datasets_router
from service.api.health.router import router as health_router
from service.api.jobs.handover_routes import router as handover_router
from service.api.jobs.router import router as jobs_router
from service.api.openapi_statuses import add_shared_statuses
from service.api.problem_pages import router as problem_pages_router
from service.api.schedules.router import router as schedules_router
from service.config import Settings
from service.datasets.sql_roles import start_role_check
from service.dispatch.base import Dispatcher
from service.errors import BadInput
from service.http.limits import BodyCap, NoNulInUrl
from service.http.problems import PROBLEM_MEDIA_TYPE, install_problem_handlers, problem_type
from service.jobs.intake.request import JobRequest
from service.schedules.definitions import ScheduleRequest
from service.store.db import make_engine, make_read_session_factory, make_session_factory
from service.web.router import router as reports_router

log = logging.getLogger(__name__)
JOBS_PATH = "/v1/jobs"
UPLOAD_PATH = "/v1/datasets/upload"
SCHEDULES_PATH = "/v1/schedules"


def local_workers_from_env(env: dict[str, str] | None = None) -> int:
    """FOLDWISE_LOCAL_WORKERS: processes of the embedded server's local pool (default 2)."""
    raw = (os.environ if env is None else env).get("FOLDWISE_LOCAL_WORKERS") or "2"
    if not raw.isdigit() or int(raw) < 1:
        raise BadInput(
            "FOLDWISE_LOCAL_WORKERS", f"must be a whole number of at least 1, not {raw!r}."
        )
    return int(raw)


def _open_dispatcher(settings: Settings, local_workers: int) -> Dispatcher:
    # Imported here: the local pool starts processes and Celery is slow to import.
    if settings.broker_url:
        from service.dispatch.celery_client import CeleryDispatcher

        return CeleryDispatcher(settings)
    from service.dispatch.local import LocalPool

    return LocalPool(settings, workers=local_workers)


def _busy_response() -> dict[str, Any]:
    return {
        "description": problem_type(429)[1],
        "headers": {
            "Retry-After": {
                "description": "Seconds to wait before sending the same request again.",
                "schema": {"type": "integer"},
            }
        },
        "content": {PROBLEM_MEDIA_TYPE: {"schema": {"$ref": "#/components/schemas/Problem"}}},
    }


def _document(app: FastAPI) -> dict[str, Any]:
    """The OpenAPI document, with problem media types and the job request v1 body schema."""
    if app.openapi_schema:
        return app.openapi_schema
    doc = get_openapi(
        title=app.title,
        version=app.version,
        description=app.description,
        routes=app.routes,
    )
    schemas = doc.setdefault("components", {}).setdefault("schemas", {})
    for path in doc["paths"].values():
        for operation in path.values():
            for status, answer in operation.get("responses", {}).items():
                content = answer.get("content", {})
                if status[0] in "45" and "application/json" in content:
                    content[PROBLEM_MEDIA_TYPE] = content.pop("application/json")
    # Every route behind the admission bound may answer 429 (service/api/admission.py).
    for path, operations in doc["paths"].items():
        if not path.startswith(UNBOUNDED_PREFIXES):
            for operation in operations.values():
                operation.setdefault("responses", {}).setdefault("429", _busy_response())
    # The route takes the body as a plain object (so errors come from our own sentences); the
    # document still describes job request v1, so a generated client builds it correctly.
    # The same for schedules: required fields in the document, so `{}` is not admitted there.
    for path, model in ((JOBS_PATH, JobRequest), (SCHEDULES_PATH, ScheduleRequest)):
        request_schema = model.model_json_schema(ref_template="#/components/schemas/{model}")
        schemas.update(request_schema.pop("$defs", {}))
        schemas[model.__name__] = request_schema
        body = doc["paths"][path]["post"]["requestBody"]
        ref = {"$ref": f"#/components/schemas/{model.__name__}"}
        body["content"] = {"application/json": {"schema": ref}}
    add_shared_statuses(doc)
    app.openapi_schema = doc
    return doc


def create_app(settings: Settings, *, local_workers: int | None = None) -> FastAPI:
    """The API over the store at settings.database_url; migrations are a separate step."""
    workers = local_workers if local_workers is not None else local_workers_from_env()
    threads = api_threads_from_env()

    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        # No migrations here: uvicorn runs the lifespan once per process, and several processes
        # migrating at once is a deploy step's job (`foldwise db upgrade`).
        # One thread per admitted request and one connection per thread, with as many again
        # for sessions still committing on their exit threads (see service/api/admission.py).
        anyio.to_thread.current_default_thread_limiter().total_tokens = threads
        engine = make_engine(
            settings.database_url, pool_size=threads, max_overflow=threads, pool_timeout=10.0
        )
        app.state.sessions = make_session_factory(engine)
        app.state.read_sessions = make_read_session_factory(engine)
        app.state.dispatcher = _open_dispatcher(settings, workers)
        app.state.sql_roles = start_role_check(settings.sql_connections)
        try:
            yield
        finally:
            app.state.dispatcher.close()
            engine.dispose()

    app = FastAPI(
        title="foldwise",
        version=service.__version__,
        description=(
            "Nested cross-validation as a service: register a table, submit a selection job, "
            "read an honest estimate of how the picked model will do on data like this data. "
            "Every /v1 route needs a bearer token; errors are application/problem+json."
        ),
        lifespan=lifespan,
    )
    app.state.settings = settings
    install_problem_handlers(app)
    app.include_router(health_router)
    app.include_router(datasets_router)
    app.include_router(jobs_router)
    app.include_router(handover_router)
    app.include_router(audit_router)
    app.include_router(schedules_router)
    app.include_router(analysis_router)
    app.include_router(reports_router)
    app.include_router(problem_pages_router)
    app.add_middleware(BodyCap, exempt=(UPLOAD_PATH,))
    app.add_middleware(NoNulInUrl)
    # Outermost: a refused request costs no body read and no thread.
    app.add_middleware(Admission, slots=threads, queue=4 * threads)
    app.openapi = lambda: _document(app)  # type: ignore[method-assign]
    return app
