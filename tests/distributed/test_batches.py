"""Batched units on real workers: a kill mid-batch, reuse across different batches, cancel.

Fast units are published together (service/cv/unit_batches.py) and claimed under one token; each
unit keeps its own row and scores. The reference for every finished job is the embedded run of
the same request (one local process, one unit at a time), itself checked against scikit-learn in
tests/engine.
"""

from __future__ import annotations

from collections import defaultdict
from collections.abc import Callable
from datetime import timedelta
from typing import Any

from sqlalchemy import func, select

from service.jobs.lifecycle import cancel_job
from service.store.models import FoldScore, Job, JobCandidate, WorkUnit
from service.store.types import utcnow

from .requests import expected_scores, small_request
from .stack import Stack, comparable, duplicated_keys, wait_until


def _batched_request(every_epoch: bool = False) -> dict[str, Any]:
    """Seven small neural networks (one hidden layer of 10): each unit is guessed fast enough
    to share a batch (three to a batch here), while a batch runs long enough (seconds) for a
    kill to land in the middle of it.

    `every_epoch`: all 1,000 epochs of every fit run (no early stop), for a cancel that the
    batch's stop check (at most once a second) must see before its last unit: at 300 epochs
    with early stopping a batch took under a second on a quiet machine, and a cancel could miss
    every unit of it. (Not for comparisons with the embedded run: a thousand epochs let the
    last bits of the weights drift apart between processes, and the model files differ.)
    """
    fixed: dict[str, Any] = {"hidden_layer_sizes": [10], "max_iter": 300, "random_state": 0}
    if every_epoch:
        fixed |= {"max_iter": 1000, "tol": 0.0, "n_iter_no_change": 1000}
    return {
        **small_request(),
        "families": [
            {
                "estimator": "MLPClassifier",
                "fixed": fixed,
                "grid": {"alpha": [0.0001, 0.001, 0.01, 0.1, 1.0, 3.0, 10.0]},
            }
        ],
    }


def _running_batches(stack: Stack, job_id: str) -> dict[str, list[WorkUnit]]:
    """The job's running units grouped by claim: a batch shows as one token on several units."""
    with stack.sessions() as session:
        units = session.scalars(
            select(WorkUnit).where(WorkUnit.job_id == job_id, WorkUnit.status == "running")
        ).all()
    batches: dict[str, list[WorkUnit]] = defaultdict(list)
    for unit in units:
        assert unit.claim_token is not None
        batches[unit.claim_token].append(unit)
    return batches


def _score_rows(stack: Stack, job_id: str) -> int:
    with stack.sessions() as session:
        return int(session.scalar(select(func.count()).where(FoldScore.job_id == job_id)) or 0)


def _candidates(stack: Stack, job_id: str) -> int:
    with stack.sessions() as session:
        return int(session.scalar(select(func.count()).where(JobCandidate.job_id == job_id)) or 0)


def test_a_worker_killed_mid_batch_loses_nothing_and_duplicates_nothing(
    running_stack: Stack, embedded_result: Callable[[dict[str, Any]], dict[str, Any]]
) -> None:
    stack = running_stack
    request = _batched_request()
    job_id = stack.submit(request)

    def a_batch_running() -> list[WorkUnit] | None:
        held = [units for units in _running_batches(stack, job_id).values() if len(units) > 1]
        return held[0] if held else None

    batch = wait_until(a_batch_running, 120, "a batch of two or more units running", stack)
    node = batch[0].worker.split("@", 1)[0]
    victim = next(p for p in stack.processes if p.name == node)
    # the whole group, as when the machine dies: nothing acknowledged, requeued or recorded
    victim.kill_group()
    victim.popen.wait(timeout=10)

    job = stack.wait_finished(job_id, timeout=240)
    assert job.result is not None
    assert comparable(job.result) == comparable(embedded_result(request))
    with stack.sessions() as session:
        after = [session.get_one(WorkUnit, unit.id) for unit in batch]
        writers = set(
            session.scalars(
                select(FoldScore.worker).where(FoldScore.unit_id.in_([u.id for u in batch]))
            )
        )
    # every unit of the killed batch was claimed again (its lease lapsed) and finished elsewhere
    assert [(u.status, u.attempts) for u in after] == [("done", 2)] * len(batch)
    assert {w.split("@", 1)[0] for w in writers} == {"w1", "w2"} - {node}
    # every score of the plan, each once
    assert _score_rows(stack, job_id) == expected_scores(request, _candidates(stack, job_id))
    assert duplicated_keys(stack) == []


def _logistic(cs: list[float], depths: list[int]) -> dict[str, Any]:
    return {
        **small_request(),
        "families": [
            {"estimator": "LogisticRegression", "fixed": {"max_iter": 2000}, "grid": {"C": cs}},
            {
                "estimator": "DecisionTreeClassifier",
                "fixed": {"random_state": 0},
                "grid": {"max_depth": depths},
            },
        ],
    }


def _claims(stack: Stack, job_id: str) -> dict[str, set[str]]:
    """Per claim token (one batch), the candidate keys it ran."""
    with stack.sessions() as session:
        rows = session.execute(
            select(WorkUnit.claim_token, WorkUnit.candidate_key).where(
                WorkUnit.job_id == job_id, WorkUnit.kind == "inner", WorkUnit.reused.is_(False)
            )
        ).all()
    claims: dict[str, set[str]] = defaultdict(set)
    for token, key in rows:
        claims[str(token)].add(key)
    return claims


def test_a_candidate_fitted_in_another_batch_is_reused_by_key_and_fold(
    shared_stack: Stack, embedded_result: Callable[[dict[str, Any]], dict[str, Any]]
) -> None:
    stack = shared_stack
    first = _logistic([0.01, 0.1, 1.0, 10.0], [2])
    first_id = stack.submit(first)
    stack.wait_finished(first_id, timeout=120)
    first_claims = _claims(stack, first_id)
    # batching happened: some claim ran several candidates together
    assert max(len(keys) for keys in first_claims.values()) > 1

    second = _logistic([0.1, 1.0, 10.0, 100.0], [2, 6])
    second_id = stack.submit(second)
    job = stack.wait_finished(second_id, timeout=120)
    assert job.result is not None
    assert comparable(job.result) == comparable(embedded_result(second))
    with stack.sessions() as session:
        units = session.scalars(
            select(WorkUnit).where(WorkUnit.job_id == second_id, WorkUnit.kind == "inner")
        ).all()
        first_keys = set(
            session.scalars(
                select(JobCandidate.candidate_key).where(JobCandidate.job_id == first_id)
            )
        )
        refitted_inner = session.scalar(
            select(func.count())
            .select_from(FoldScore)
            .join(WorkUnit, WorkUnit.id == FoldScore.unit_id)
            .where(
                FoldScore.job_id == second_id,
                WorkUnit.kind == "inner",
                FoldScore.candidate_key.in_(first_keys),
            )
        )
    shared = {u.candidate_key for u in units} & first_keys
    assert len(shared) == 4  # C in 0.1, 1, 10 and the depth-2 tree
    # the shared candidates' inner units came from the store, naming the job that fitted them
    for unit in units:
        if unit.candidate_key in shared:
            assert (unit.reused, unit.source_job_id, unit.attempts) == (True, first_id, 0)
        else:
            assert not unit.reused and unit.status == "done"
    # ... though the batches that fitted them held other candidates than the second job's
    assert any(keys - shared for keys in first_claims.values() if keys & shared)
    # and the second job fitted none of them again on an inner fold
    assert refitted_inner == 0
    assert duplicated_keys(stack) == []


def test_a_cancelled_batch_records_the_units_it_finished_and_cancels_the_rest(
    shared_stack: Stack,
) -> None:
    stack = shared_stack
    job_id = stack.submit(_batched_request(every_epoch=True))

    def a_batch_just_claimed() -> list[WorkUnit] | None:
        # A batch's units all show running until its one record, so a batch first seen in its
        # last second could fit every unit before its next stop check (at most one a second)
        # sees the cancel, and end all done: take only a batch claimed under a second ago.
        recent = utcnow() - timedelta(seconds=1)
        held = [
            units
            for units in _running_batches(stack, job_id).values()
            if len(units) > 1 and units[0].started_at is not None and units[0].started_at > recent
        ]
        return held[0] if held else None

    batch = wait_until(a_batch_just_claimed, 120, "a batch of two or more units claimed", stack)
    with stack.sessions.begin() as session:
        cancel_job(session, session.get_one(Job, job_id))
    wait_until(
        lambda: not stack.unit_states(job_id).get("running"), 60, "no unit still running", stack
    )
    with stack.sessions() as session:
        ended = {u.id: session.get_one(WorkUnit, u.id).status for u in batch}
        rows = dict(
            session.execute(
                select(FoldScore.unit_id, func.count())
                .where(FoldScore.unit_id.in_(list(ended)))
                .group_by(FoldScore.unit_id)
            ).all()
        )
    # a unit of the batch either finished (all its scores: inner folds x metrics) or stopped
    # (none): never a part
    request = _batched_request(every_epoch=True)
    inner_rows = len(request["metrics"]) * request["inner"]["k"]
    for unit_id, status in ended.items():
        assert status in ("done", "cancelled")
        assert rows.get(unit_id, 0) == (inner_rows if status == "done" else 0)
    assert "cancelled" in ended.values()
    assert stack.job(job_id).status == "cancelled"
