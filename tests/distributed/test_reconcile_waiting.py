"""What a crash leaves waiting is finished by the reconciler (the beat), at default settings.

Each test makes the state a crash leaves, on the real stack (two Celery workers and one beat on
PostgreSQL and Redis): rows committed and no message in the broker, either because the process
died before publishing (nothing sent) or because the broker lost what was sent (the row says
published, the queue is empty). Nothing else is done for them: the beat's reconcile tick must
find them and the workers must finish them.
"""

from __future__ import annotations

import time
from typing import Any

from sqlalchemy import func, select

from service.dispatch.base import mark_audits_published, mark_published
from service.jobs.audits.audit import request_audit
from service.jobs.intake.start import start_submitted
from service.jobs.intake.submit import submit_job
from service.store.followup_models import Audit
from service.store.models import FoldScore, Job, JobCandidate, JobFold, WorkUnit

from .requests import expected_scores, on_own_folds, small_request
from .stack import REPO, TEAM, Stack, comparable, wait_until

# one reconcile period (20 s by default) plus the work itself, on a shared two-core machine
HEAL_TIMEOUT = 120


def _audit(stack: Stack, audit_id: str) -> Audit:
    with stack.sessions() as session:
        return session.get_one(Audit, audit_id)


def test_audits_left_queued_by_a_crash_are_published_again(shared_stack: Stack) -> None:
    stack = shared_stack
    # folds of its own: the curve below must fit its full size, not take this job's scores
    job_id = stack.submit(on_own_folds(small_request(), seed=22))
    stack.wait_finished(job_id, timeout=HEAL_TIMEOUT)
    with stack.sessions.begin() as session:
        job = session.get_one(Job, job_id)
        # committed, and the API died before its publish
        never_sent = request_audit(session, job, fraction=1.0, seed=0, tolerance=0.0, team="t").id
        # committed and sent, and the broker lost the message (a Redis restart)
        lost = request_audit(session, job, fraction=0.5, seed=3, tolerance=0.0, team="t").id
    mark_audits_published(stack.sessions, [lost])
    committed = time.monotonic()

    for audit_id in (never_sent, lost):
        wait_until(
            lambda a=audit_id: _audit(stack, a).status in ("done", "failed"),
            HEAL_TIMEOUT,
            f"audit {audit_id} run",
            stack,
        )
    print(f"\naudits committed -> both done: {time.monotonic() - committed:.1f} s")
    for audit_id in (never_sent, lost):
        audit = _audit(stack, audit_id)
        assert audit.status == "done", audit.report
        report: dict[str, Any] = audit.report or {}
        # scikit-learn refitting the same folds on the same machine gives the same floats
        assert report["scores_checked"] > 0
        assert report["identical"] == report["scores_checked"]
        assert report["differing"] == report["missing"] == 0
    # the whole sample: one inner unit per candidate (4) and scope (3 outer parts and the final
    # split), plus one refit scored per outer fold
    assert _audit(stack, never_sent).report["units_checked"] == 4 * (3 + 1) + 3  # type: ignore[index]


def test_learning_curve_sizes_left_queued_by_a_crash_are_published_again(
    shared_stack: Stack, embedded_result: Any
) -> None:
    stack = shared_stack
    request = small_request()
    curve = {**request, "kind": "learning_curve", "sizes": [0.5, 1.0]}
    with stack.sessions.begin() as session:
        parent_id = submit_job(
            session, curve, principal=TEAM, settings=stack.settings, base_dir=REPO
        ).job.id
    # the creator started the curve and died while publishing: half of the units' messages
    # were sent and lost with the broker, the rest never sent
    units = start_submitted(stack.sessions, parent_id, stack.settings)
    with stack.sessions() as session:
        children = list(session.scalars(select(Job.id).where(Job.parent_id == parent_id)))
    half = len(units) // 2
    mark_published(stack.sessions, units[:half])
    assert units[:half] and units[half:], "the curve made too few units to lose"

    parent = stack.wait_finished(parent_id, timeout=3 * HEAL_TIMEOUT)
    assert parent.result is not None and len(parent.result["points"]) == 2
    with stack.sessions() as session:
        reused_from = session.scalars(
            select(WorkUnit.source_job_id).where(
                WorkUnit.job_id.in_(children), WorkUnit.reused.is_(True)
            )
        )
        # the sizes may share work with each other, never with the other test's job here
        assert set(reused_from) <= set(children)
        for child_id in children:
            child = session.get_one(Job, child_id)
            assert child.status == "succeeded"
            # the sizes share the final (all-rows) inner split, and a score's key names its
            # folds, not its job: the size that stored a shared score first holds it. So count
            # the scores on this size's own folds and candidates, whichever size stored them.
            folds = select(JobFold.fingerprint).where(JobFold.job_id == child_id)
            keys = select(JobCandidate.candidate_key).where(JobCandidate.job_id == child_id)
            scores = session.scalar(
                select(func.count()).where(
                    FoldScore.fold_fingerprint.in_(folds), FoldScore.candidate_key.in_(keys)
                )
            )
            candidates = session.scalar(select(func.count()).where(JobCandidate.job_id == child_id))
            # every fold score the size's plan calls for, each stored once
            assert scores == expected_scores(request, int(candidates or 0))
            if child.request.get("train_fraction") == 1.0:
                # the full size is an ordinary selection: the embedded run is the reference
                assert child.result is not None
                assert comparable(child.result) == comparable(embedded_result(request))
