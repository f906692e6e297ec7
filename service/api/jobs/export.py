"""Fold scores as CSV lines, paged through with the same keyset as the JSON listing."""

from __future__ import annotations

import csv
import io
import json
from collections.abc import Iterator
from typing import Any

from sqlalchemy.orm import Session, sessionmaker

from service.api.jobs.schemas import FOLD_SCORE_COLUMNS, FoldScorePublic
from service.auth import Principal
from service.jobs.handover.fold_rows import EXTRA_COLUMNS, FoldContext, describe_score, fold_context
from service.jobs.queries.jobs import fold_scores_page, foreign_job_ids
from service.store.models import FoldScore, Job

PAGE = 1000


def _cell(value: Any) -> Any:
    # versions is a mapping; keep it one JSON cell so the CSV stays rectangular
    return json.dumps(value, sort_keys=True) if isinstance(value, dict) else value


STORED_COLUMNS = tuple(c for c in FOLD_SCORE_COLUMNS if c not in EXTRA_COLUMNS)


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
                **{c: getattr(score, c) for c in STORED_COLUMNS},
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
    """The header, then one line per score, cells formatted as the JSON listing formats them."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(FOLD_SCORE_COLUMNS)
    after = 0
    with sessions() as session:
        context = fold_context(session, job_id)
    while True:
        # A short session per page: on SQLite a transaction holds the write lock, and the
        # client may read slowly.
        with sessions() as session:
            job = session.get_one(Job, job_id)
            page = fold_scores_page(
                session, job, after_id=after, limit=PAGE, all_metrics=all_metrics
            )
            rows = [
                r.model_dump(mode="json") for r in public_scores(session, principal, page, context)
            ]
        for row in rows:
            writer.writerow([_cell(row[c]) for c in FOLD_SCORE_COLUMNS])
        yield buffer.getvalue()
        buffer.seek(0)
        buffer.truncate()
        if len(page) < PAGE:
            return
        after = page[-1].id
