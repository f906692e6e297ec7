"""Dependencies every router shares: settings, a session per request, the caller, the dispatcher."""

from __future__ import annotations

from collections.abc import Callable, Iterator
from typing import Annotated

from fastapi import Depends, Request
from fastapi.security import HTTPAuthorizationCredentials, HTTPBearer
from sqlalchemy.orm import Session, sessionmaker

from service.auth import Action, Principal, authenticate, authorize
from service.config import Settings
from service.dispatch.base import Dispatcher
from service.errors import MissingScope
from service.http.problems import ProblemError

# auto_error=False: a missing header must become our 401 problem, not FastAPI's plain error.
_bearer = HTTPBearer(auto_error=False, description="A token from `foldwise token create`.")


def get_settings(request: Request) -> Settings:
    """The settings the app was created with."""
    settings: Settings = request.app.state.settings
    return settings


# Methods that only read: their sessions begin deferred on SQLite and take no write lock.
READ_METHODS = frozenset({"GET", "HEAD"})


def get_sessions(request: Request) -> sessionmaker[Session]:
    """The session factory for this request: reading ones for GET and HEAD, writing ones else."""
    state = request.app.state
    reads = request.method in READ_METHODS and hasattr(state, "read_sessions")
    sessions: sessionmaker[Session] = state.read_sessions if reads else state.sessions
    return sessions


def get_dispatcher(request: Request) -> Dispatcher:
    """Celery or the local pool, whichever the lifespan started."""
    dispatcher: Dispatcher = request.app.state.dispatcher
    return dispatcher


SettingsDep = Annotated[Settings, Depends(get_settings)]
SessionsDep = Annotated[sessionmaker[Session], Depends(get_sessions)]
DispatcherDep = Annotated[Dispatcher, Depends(get_dispatcher)]


def get_session(sessions: SessionsDep) -> Iterator[Session]:
    """One session per request: committed if the handler returns, rolled back if it raises."""
    with sessions() as session:
        try:
            yield session
            session.commit()
        except BaseException:
            session.rollback()
            raise


# scope="function": the commit runs before the response is sent, so a failed commit is a 500
# rather than a success the store never kept (the default scope exits after sending).
SessionDep = Annotated[Session, Depends(get_session, scope="function")]

_CHALLENGE = {"WWW-Authenticate": "Bearer"}


def get_principal(
    request: Request,
    credentials: Annotated[HTTPAuthorizationCredentials | None, Depends(_bearer)],
) -> Principal:
    """The caller behind the bearer token; a 401 problem without one or with a bad one."""
    if credentials is None:
        raise ProblemError(
            401,
            "send an Authorization: Bearer <token> header; `foldwise token create` makes one.",
            headers=_CHALLENGE,
        )
    # A short session of its own, reading only (it begins deferred on SQLite whatever the method),
    # so checking a token never waits for the write lock.
    with request.app.state.read_sessions() as session:
        principal = authenticate(session, credentials.credentials)
    if principal is None:
        raise ProblemError(
            401,
            "the bearer token is unknown, expired or revoked; ask for a new one.",
            headers={"WWW-Authenticate": 'Bearer error="invalid_token"'},
        )
    return principal


PrincipalDep = Annotated[Principal, Depends(get_principal)]


def allowed(action: Action) -> Callable[[Principal], Principal]:
    """A dependency that passes the caller through if its token may do `action` at all.

    The object's team is checked where the object is loaded (service.auth.authorize again, with
    the owner), so an object the caller may not act on answers 404 like a missing one.
    """

    def check(principal: PrincipalDep) -> Principal:
        try:
            authorize(principal, action)
        except MissingScope as exc:
            raise ProblemError(403, str(exc)) from None
        return principal

    return check


ReaderDep = Annotated[Principal, Depends(allowed(Action.READ))]
SubmitterDep = Annotated[Principal, Depends(allowed(Action.SUBMIT))]
CancellerDep = Annotated[Principal, Depends(allowed(Action.CANCEL))]
AuditorDep = Annotated[Principal, Depends(allowed(Action.AUDIT))]
SchedulerDep = Annotated[Principal, Depends(allowed(Action.SCHEDULE))]
