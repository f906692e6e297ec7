"""A job's fold scores as the listing shows them, and as CSV lines paged with the same keyset."""

from __future__ import annotations

from collections.abc import Iterator

from sqlalchemy.orm import Session, sessionmaker

from service.analysis.export import COLUMNS, csv_chunks
from service.api.jobs.schemas import FoldScorePublic
from service.auth import Principal
from service.jobs.handover.fold_rows import FoldContext, describe_score, fold_context
from service.jobs.queries.jobs import fold_scores_page, foreign_job_ids
from service.store.models import FoldScore, Job


def public_scores(
    session: Session,
    principal: Principal,
    scores: list[FoldScore],
    context: FoldContext | None = None,
) -> list[FoldScorePublic]:
    """Stored scores as the listing shows them; with a job's `context`, also their fold's place
    and candidate. The computing job's id only when the caller may read it."""
    hidden = foreign_job_ids(session, principal, {s.job_id for s in scores})
    public = [
        FoldScorePublic.model_validate(
            {
                **{c: getattr(score, c) for c in COLUMNS},
                **(describe_score(score, context) if context is not None else {}),
            }
        )
        for score in scores
    ]
    for score in public:
        if score.job_id in hidden:
            score.job_id = None  # computed by another team's job, shared by content
    return public


def fold_score_lines(
    sessions: sessionmaker[Session], job_id: str, principal: Principal, *, all_metrics: bool = False
) -> Iterator[str]:
    """The header, then the job's scores with their fold's place and candidate (the listing's
    columns), written by the one fold-score CSV writer (service/analysis/export.py)."""

    def fetch(session: Session, after: int, limit: int) -> list[FoldScore]:
        job = session.get_one(Job, job_id)
        return fold_scores_page(session, job, after_id=after, limit=limit, all_metrics=all_metrics)

    with sessions() as session:
        context = fold_context(session, job_id)
    return csv_chunks(sessions, fetch, principal, context)
