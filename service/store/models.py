"""The SQL schema: every table foldwise keeps, in SQLAlchemy 2 declarative form.

Statuses and roles are short strings guarded by named CHECK constraints rather than database
enums: adding a value is then one `ALTER TABLE` on PostgreSQL and one batch copy on SQLite, and the
values read the same in both.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any, ClassVar

from sqlalchemy import (
    BigInteger,
    Boolean,
    CheckConstraint,
    Double,
    ForeignKey,
    Index,
    LargeBinary,
    MetaData,
    String,
    UniqueConstraint,
    false,
)
from sqlalchemy.orm import DeclarativeBase, Mapped, mapped_column

from service.cv.scopes import FINAL_SCOPE
from service.store.statuses import JobStatus, UnitStatus
from service.store.types import (
    CreatedAt,
    Hash64,
    JsonDoc,
    JsonList,
    JSONType,
    LongText,
    Short,
    UtcDateTime,
)

JOB_STATUSES = tuple(JobStatus)
JOB_STAGES = ("inner", "outer", "aggregating", "done")
FOLD_ROLES = ("outer", "inner", "final_inner")
UNIT_KINDS = ("inner", "outer_refit", "final_refit")
UNIT_STATUSES = tuple(UnitStatus)


def one_of(column: str, values: tuple[str, ...]) -> str:
    # repr of the plain string: an enum member's own repr is not SQL (the text must not change,
    # or the stored constraints would differ from the models without a migration)
    return f"{column} IN ({', '.join(repr(str(v)) for v in values)})"


def _scope_matches(repeat: str, fold: str) -> str:
    # scope is the key the unique constraints use (NULLs never collide in a UNIQUE, so the
    # nullable outer coordinates cannot be part of the key); this keeps the two in step. The
    # IS NOT NULL terms matter: 'r' || NULL is NULL, and a CHECK that yields NULL passes.
    return (
        f"(scope = '{FINAL_SCOPE}' AND {repeat} IS NULL AND {fold} IS NULL) OR "
        f"({repeat} IS NOT NULL AND {fold} IS NOT NULL AND "
        f"scope = 'r' || CAST({repeat} AS VARCHAR) || 'f' || CAST({fold} AS VARCHAR))"
    )


class Base(DeclarativeBase):
    """Declarative base; constraint names follow one convention so migrations can name them."""

    metadata = MetaData(
        naming_convention={
            "ix": "ix_%(table_name)s_%(column_0_N_name)s",
            "uq": "uq_%(table_name)s_%(column_0_N_name)s",
            "ck": "ck_%(table_name)s_%(constraint_name)s",
            "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
            "pk": "pk_%(table_name)s",
        }
    )
    type_annotation_map: ClassVar[dict[Any, Any]] = {
        datetime: UtcDateTime(),
        float: Double(),
        bytes: LargeBinary(),
        JsonDoc: JSONType,
        JsonList: JSONType,
    }


class Dataset(Base):
    """A registered table, known by the hash of its canonical serialisation."""

    __tablename__ = "dataset"

    id: Mapped[int] = mapped_column(primary_key=True)
    content_hash: Mapped[Hash64] = mapped_column(unique=True)
    n_rows: Mapped[int]
    n_columns: Mapped[int]
    columns: Mapped[JsonList]  # [{"name": ..., "kind": ...}] in table order
    origin: Mapped[JsonDoc]
    created_at: Mapped[CreatedAt]


class Job(Base):
    """One selection job: the request, its progress and, once finished, its result."""

    __tablename__ = "job"
    __table_args__ = (
        # A dataset's jobs newest first (its job list and history), without sorting them all.
        Index("ix_job_dataset_created", "dataset_hash", "created_at"),
        CheckConstraint(one_of("status", JOB_STATUSES), name="status"),
        CheckConstraint(one_of("stage", JOB_STAGES), name="stage"),
        # keys are per team: another team's key neither clashes nor names their job
        UniqueConstraint("team", "idempotency_key"),
    )

    id: Mapped[str] = mapped_column(String(32), primary_key=True)  # uuid4 hex, made by the caller
    dataset_hash: Mapped[Hash64] = mapped_column(ForeignKey("dataset.content_hash"), index=True)
    status: Mapped[Short] = mapped_column(index=True)
    # Fan-in elections move the stage with a conditional UPDATE, so exactly one worker wins.
    stage: Mapped[Short] = mapped_column(default="inner", server_default="inner")
    request: Mapped[JsonDoc]
    result: Mapped[JsonDoc | None]
    # the few values of the result a dataset's history shows (service/jobs/history_point.py)
    history_point: Mapped[JsonDoc | None]
    error: Mapped[LongText | None]
    units_total: Mapped[int] = mapped_column(default=0, server_default="0")
    units_done: Mapped[int] = mapped_column(default=0, server_default="0")
    cancel_requested: Mapped[bool] = mapped_column(Boolean, default=False, server_default=false())
    idempotency_key: Mapped[str | None] = mapped_column(String(200))
    # sha256 of the canonical request body: the same Idempotency-Key with another body is refused
    request_hash: Mapped[Hash64 | None]
    # sha256 of the request, the bytes of its table, our source and the library versions, set
    # once a command line job succeeded: the same again is answered by this job at once
    # (service/jobs/intake/answer_key.py, service/store/repeat_answers.py)
    answer_key: Mapped[Hash64 | None] = mapped_column(index=True)
    # jobs belong to the team of the token that submitted them (the command line uses "local")
    team: Mapped[str] = mapped_column(
        String(100), default="local", server_default="local", index=True
    )
    # "selection" (nested CV) or "learning_curve" (a parent whose children select at sizes)
    kind: Mapped[str] = mapped_column(String(32), default="selection", server_default="selection")
    # plain indexed ids, not foreign keys: SQLite adds such columns without copying the table
    parent_id: Mapped[str | None] = mapped_column(String(32), index=True)
    schedule_id: Mapped[str | None] = mapped_column(String(32), index=True)
    webhook_url: Mapped[str | None] = mapped_column(String(2000))
    created_at: Mapped[CreatedAt]
    started_at: Mapped[datetime | None]
    finished_at: Mapped[datetime | None]


class Candidate(Base):
    """One concrete (estimator, hyperparameters, preprocessing) point, shared across jobs."""

    __tablename__ = "candidate"

    candidate_key: Mapped[Hash64] = mapped_column(primary_key=True)
    estimator: Mapped[str] = mapped_column(String(100))
    params: Mapped[JsonDoc]
    preprocess: Mapped[Short]
    created_at: Mapped[CreatedAt]


class JobCandidate(Base):
    """A job's candidates in request order; the order breaks ties in the inner mean."""

    __tablename__ = "job_candidate"

    job_id: Mapped[str] = mapped_column(ForeignKey("job.id"), primary_key=True)
    position: Mapped[int] = mapped_column(primary_key=True)
    candidate_key: Mapped[Hash64] = mapped_column(ForeignKey("candidate.candidate_key"))


class Fold(Base):
    """One train/test division of a dataset's rows, stored as packed membership masks."""

    __tablename__ = "fold"

    fingerprint: Mapped[Hash64] = mapped_column(primary_key=True)
    dataset_hash: Mapped[Hash64] = mapped_column(index=True)
    n_train: Mapped[int]
    n_test: Mapped[int]
    train_mask: Mapped[bytes]  # numpy.packbits of the boolean train membership, row order
    test_mask: Mapped[bytes]
    versions: Mapped[JsonDoc]
    created_at: Mapped[CreatedAt]


class JobFold(Base):
    """Where a fold sits in a job's plan: outer, inner within an outer fold, or final inner."""

    __tablename__ = "job_fold"
    __table_args__ = (
        CheckConstraint(one_of("role", FOLD_ROLES), name="role"),
        # Inner folds split one outer training set; outer and final inner folds split all rows.
        CheckConstraint(
            f"(role = 'inner' AND scope <> '{FINAL_SCOPE}') OR "
            f"(role <> 'inner' AND scope = '{FINAL_SCOPE}')",
            name="role_scope",
        ),
        CheckConstraint(_scope_matches("parent_repeat", "parent_fold"), name="scope_parent"),
    )

    job_id: Mapped[str] = mapped_column(ForeignKey("job.id"), primary_key=True)
    role: Mapped[Short] = mapped_column(primary_key=True)
    scope: Mapped[Short] = mapped_column(primary_key=True)
    repeat: Mapped[int] = mapped_column(primary_key=True)
    fold_index: Mapped[int] = mapped_column(primary_key=True)
    fingerprint: Mapped[Hash64] = mapped_column(ForeignKey("fold.fingerprint"), index=True)
    parent_repeat: Mapped[int | None]
    parent_fold: Mapped[int | None]


class WorkUnit(Base):
    """The grain of distribution: one candidate over all inner folds of one scope, or a refit."""

    __tablename__ = "work_unit"
    __table_args__ = (
        CheckConstraint(one_of("kind", UNIT_KINDS), name="kind"),
        CheckConstraint(one_of("status", UNIT_STATUSES), name="status"),
        CheckConstraint(_scope_matches("outer_repeat", "outer_fold"), name="scope_outer"),
        CheckConstraint(
            f"(kind <> 'outer_refit' OR scope <> '{FINAL_SCOPE}') AND "
            f"(kind <> 'final_refit' OR scope = '{FINAL_SCOPE}')",
            name="kind_scope",
        ),
        # A redelivered "create units" step cannot make a twin unit.
        UniqueConstraint("job_id", "kind", "scope", "candidate_key", "halving_round"),
        # The reconciler and progress queries ask "units of job J in status S"; the leading
        # job_id also serves lookups by job alone, so no separate job_id index.
        Index(None, "job_id", "status"),
    )

    id: Mapped[int] = mapped_column(primary_key=True, autoincrement=True)
    job_id: Mapped[str] = mapped_column(ForeignKey("job.id"))
    kind: Mapped[Short]
    scope: Mapped[Short]
    outer_repeat: Mapped[int | None]
    outer_fold: Mapped[int | None]
    candidate_key: Mapped[Hash64] = mapped_column(ForeignKey("candidate.candidate_key"))
    # a halving search's round (service/cv/halving_race.py); 0 for the full grid and refits
    halving_round: Mapped[int] = mapped_column(default=0, server_default="0")
    status: Mapped[Short] = mapped_column(
        default=UnitStatus.QUEUED, server_default=str(UnitStatus.QUEUED)
    )
    attempts: Mapped[int] = mapped_column(default=0, server_default="0")
    lease_until: Mapped[datetime | None]
    worker: Mapped[str | None] = mapped_column(String(200))
    # a fresh random token per claim: renewals and the final record are conditional on it, so a
    # copy whose claim lapsed and was taken over can neither extend nor record (fencing)
    claim_token: Mapped[str | None] = mapped_column(String(32))
    error: Mapped[LongText | None]
    fits: Mapped[int] = mapped_column(default=0, server_default="0")
    seconds: Mapped[float | None]
    # when the unit was last handed to a broker; the reconciler re-publishes stale ones
    published_at: Mapped[datetime | None]
    # a unit whose every score was already stored is not fitted again: it is marked done with
    # reused=True and the job that computed the scores (the scores themselves say so too)
    reused: Mapped[bool] = mapped_column(Boolean, default=False, server_default=false())
    source_job_id: Mapped[str | None] = mapped_column(String(32))
    created_at: Mapped[CreatedAt]
    started_at: Mapped[datetime | None]
    finished_at: Mapped[datetime | None]


class FoldScore(Base):
    """One number with its provenance. Written once with ON CONFLICT DO NOTHING, never updated."""

    __tablename__ = "fold_score"
    __table_args__ = (
        # Named by hand: the conventional name (all four columns) passes PostgreSQL's 63-byte
        # limit and would be truncated with a hash suffix on PostgreSQL only.
        UniqueConstraint(
            "dataset_hash", "fold_fingerprint", "candidate_key", "metric", name="uq_fold_score_key"
        ),
        # An analyst's page of one dataset's scores by candidate and metric, in id order: a
        # range scan instead of walking every score of the store (tests/benchmarks/
        # bench_store_scale.py). Named by hand for the same 63-byte reason.
        Index("ix_fold_score_analyst_page", "dataset_hash", "candidate_key", "metric", "id"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    dataset_hash: Mapped[Hash64]
    fold_fingerprint: Mapped[Hash64] = mapped_column(ForeignKey("fold.fingerprint"))
    candidate_key: Mapped[Hash64] = mapped_column(ForeignKey("candidate.candidate_key"))
    metric: Mapped[str] = mapped_column(String(64))
    value: Mapped[float]
    fit_seconds: Mapped[float]
    score_seconds: Mapped[float]
    n_train: Mapped[int]
    n_test: Mapped[int]
    seed: Mapped[int | None]
    versions: Mapped[JsonDoc]
    worker: Mapped[str] = mapped_column(String(200))
    job_id: Mapped[str] = mapped_column(ForeignKey("job.id"), index=True)
    unit_id: Mapped[int | None] = mapped_column(ForeignKey("work_unit.id"))
    created_at: Mapped[CreatedAt]


class Pick(Base):
    """The candidate the inner loop chose for one outer fold."""

    __tablename__ = "pick"

    job_id: Mapped[str] = mapped_column(ForeignKey("job.id"), primary_key=True)
    outer_repeat: Mapped[int] = mapped_column(primary_key=True)
    outer_fold: Mapped[int] = mapped_column(primary_key=True)
    candidate_key: Mapped[Hash64] = mapped_column(ForeignKey("candidate.candidate_key"))
    inner_mean: Mapped[float]


class FinalModel(Base):
    """The final pick refit on all rows, stored on disk under its sha256."""

    __tablename__ = "final_model"

    job_id: Mapped[str] = mapped_column(ForeignKey("job.id"), primary_key=True)
    candidate_key: Mapped[Hash64] = mapped_column(ForeignKey("candidate.candidate_key"))
    sha256: Mapped[Hash64]
    path: Mapped[str] = mapped_column(String(1024))
    size_bytes: Mapped[int] = mapped_column(BigInteger)  # a forest can pass 2 GiB
    inner_mean: Mapped[float]
    created_at: Mapped[CreatedAt]


class DatasetRegistration(Base):
    """Which team registered which table: a token sees only its team's datasets."""

    __tablename__ = "dataset_registration"

    team: Mapped[str] = mapped_column(String(100), primary_key=True)
    content_hash: Mapped[Hash64] = mapped_column(
        ForeignKey("dataset.content_hash"), primary_key=True
    )
    # where this team's copy came from (the same bytes from another team keep their own origin)
    origin: Mapped[JsonDoc | None]
    created_at: Mapped[CreatedAt]


class ApiToken(Base):
    """A bearer token, kept only as its sha256, with its team and scopes."""

    __tablename__ = "api_token"

    id: Mapped[int] = mapped_column(primary_key=True)
    token_hash: Mapped[Hash64] = mapped_column(unique=True)
    # "fw_" and the first random characters, what `token list` shows (NULL for older tokens)
    prefix: Mapped[str | None] = mapped_column(String(16))
    team: Mapped[str] = mapped_column(String(100))
    scopes: Mapped[JsonList]  # any of "submit", "read", "admin"
    # an analyst token may read every team's datasets and jobs
    analyst: Mapped[bool] = mapped_column(Boolean, default=False, server_default=false())
    created_at: Mapped[CreatedAt]
    expires_at: Mapped[datetime | None]
    revoked_at: Mapped[datetime | None]


class FoldPrediction(Base):
    """One candidate's predictions on one fold's test rows, so a new metric needs no refit."""

    __tablename__ = "fold_prediction"

    dataset_hash: Mapped[Hash64] = mapped_column(primary_key=True)
    fold_fingerprint: Mapped[Hash64] = mapped_column(
        ForeignKey("fold.fingerprint"), primary_key=True
    )
    candidate_key: Mapped[Hash64] = mapped_column(
        ForeignKey("candidate.candidate_key"), primary_key=True
    )
    kind: Mapped[str] = mapped_column(String(16))  # "label", "proba", "decision" or "value"
    classes: Mapped[JsonList | None]
    data: Mapped[bytes]  # compressed numpy arrays, float64 so metrics recompute exactly
    job_id: Mapped[str] = mapped_column(ForeignKey("job.id"), index=True)
    created_at: Mapped[CreatedAt]
