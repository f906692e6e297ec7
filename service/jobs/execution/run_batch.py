"""Running a batch of units against the store: one claim, the fits, one record, one fan-in.

The batch's units (service/cv/unit_batches.py) keep everything a unit has on its own: its row,
its fold scores with its own key, unit id and worker, reuse by candidate key and fold
fingerprint. What they share is the store's round trips: one statement claims them all under
one token, one heartbeat renews them all, and one transaction records every unit still held,
fenced on the token unit by unit (service/jobs/batch_lifecycle.py). A copy killed mid-batch has
recorded nothing; its units' leases run out and they are claimed again, one by one or batched.
A unit that stops the batch (the job was cancelled, a fit failed) ends as it would alone; the
units fitted before it are recorded, the ones after it are cancelled (the job has ended).
"""

from __future__ import annotations

import traceback
from collections import defaultdict
from dataclasses import dataclass, field

from sqlalchemy.orm import Session, sessionmaker

from service.config import Settings
from service.cv.units import NonFiniteScore, UnitCancelled, UnitOutcome, fit_and_score, ref_of
from service.jobs import batch_lifecycle, lifecycle
from service.jobs.batch_lifecycle import ClaimedUnit
from service.jobs.curves.settle import settle_parent
from service.jobs.execution.advance import advance_job, advance_rounds
from service.jobs.execution.execute import (
    LOST,
    ModelFile,
    StopCheck,
    model_file_of,
    prediction_rows,
    record_model,
    score_rows,
)
from service.jobs.execution.heartbeat import Heartbeat
from service.jobs.execution.plans import LoadedPlan, plan_for_job
from service.store.db import insert_ignoring_duplicates
from service.store.host_cache import CopyRefused
from service.store.models import FoldPrediction, FoldScore
from service.store.statuses import UnitStatus


@dataclass
class BatchReport:
    """How each unit of a batch ended here, and which jobs' stages it completed."""

    statuses: dict[int, str] = field(default_factory=dict)  # unit id -> status (see UnitReport)
    fits: int = 0
    complete_jobs: list[str] = field(default_factory=list)  # jobs whose last open unit was here
    failed_jobs: list[str] = field(default_factory=list)
    # halving jobs -> the searches (scopes) whose round ended here, others still running
    rounds_ended: dict[str, list[str]] = field(default_factory=dict)


class BatchHeartbeat(Heartbeat):
    """One lease renewal for every unit of the batch; lost when any is no longer this copy's."""

    def __init__(
        self, sessions: sessionmaker[Session], unit_ids: list[int], token: str, settings: Settings
    ) -> None:
        super().__init__(sessions, unit_ids[0], token, settings)
        self.unit_ids = unit_ids

    def renew(self, session: Session) -> bool:
        held = batch_lifecycle.renew_leases(session, self.unit_ids, self.token, self.lease)
        return held == len(self.unit_ids)


@dataclass
class _Ran:
    outcomes: list[tuple[ClaimedUnit, UnitOutcome]]
    stopped: ClaimedUnit | None = None  # the unit that ended the batch early, if one did
    ending: UnitStatus | None = None  # CANCELLED or FAILED for `stopped`
    error: str | None = None


def _fit_all(loaded: LoadedPlan, units: list[ClaimedUnit], stop: StopCheck) -> _Ran:
    ran = _Ran([])
    for unit in units:
        ref = ref_of(unit)
        try:
            ran.outcomes.append((unit, fit_and_score(loaded.plan, ref, stop)))
        except UnitCancelled:
            ran.stopped, ran.ending = unit, UnitStatus.CANCELLED
            return ran
        except (NonFiniteScore, CopyRefused) as exc:  # the sentence is the whole story
            ran.stopped, ran.ending, ran.error = unit, UnitStatus.FAILED, str(exc)
            return ran
        except Exception:
            ran.stopped, ran.ending = unit, UnitStatus.FAILED
            ran.error = traceback.format_exc()
            return ran
    return ran


def _record(
    session: Session,
    job_id: str,
    token: str,
    ran: _Ran,
    units: list[ClaimedUnit],
    saved: dict[int, ModelFile | None],
    loaded: LoadedPlan,
    settings: Settings,
    worker: str,
    report: BatchReport,
) -> None:
    """The batch's one record transaction for one job's units (the caller owns it)."""
    done, last = batch_lifecycle.units_done(
        session, job_id, token, {u.id: (o.fits, o.seconds) for u, o in ran.outcomes}
    )
    held = set(done)
    kept = [(u, o) for u, o in ran.outcomes if u.id in held]
    scores = [row for u, o in kept for row in score_rows(u.id, job_id, o, loaded, worker)]
    # a redelivered copy of a finished unit inserts nothing: the key already holds the score
    insert_ignoring_duplicates(session, FoldScore, scores)
    predictions = [row for _, o in kept for row in prediction_rows(job_id, o, loaded)]
    insert_ignoring_duplicates(session, FoldPrediction, predictions)
    for unit, _ in kept:
        record_model(session, job_id, saved[unit.id], loaded, settings)
    for unit, outcome in ran.outcomes:
        report.statuses[unit.id] = UnitStatus.DONE if unit.id in held else LOST
        report.fits += outcome.fits
    if ran.stopped is not None:
        last = False  # the stage cannot complete: a unit of it ends unfinished
        _end_rest(session, job_id, token, ran, units, report)
    if last:
        report.complete_jobs.append(job_id)
    elif ran.stopped is None and loaded.plan.rounds:
        # counted after units_done locked the job's row, as `last` is: of two batches ending a
        # round together, the second to commit sees the first's units done
        scopes = sorted({u.scope for u in units if u.id in held and u.kind == "inner"})
        ended = batch_lifecycle.scopes_without_open_units(session, job_id, scopes)
        if ended:
            report.rounds_ended[job_id] = ended


def _end_rest(
    session: Session,
    job_id: str,
    token: str,
    ran: _Ran,
    units: list[ClaimedUnit],
    report: BatchReport,
) -> None:
    """The unit that stopped the batch ends as it would alone; the units after it are cancelled."""
    stopped = ran.stopped
    assert stopped is not None
    after = units[units.index(stopped) + 1 :]
    if ran.ending == UnitStatus.FAILED:
        error = ran.error or "unknown error"
        first_line = error.strip().splitlines()[-1]
        failed = lifecycle.claim_failed(
            session,
            stopped.id,
            token,
            error,
            job_error=f"unit {stopped.id} ({stopped.kind} {stopped.scope}) failed: {first_line}",
        )
        report.statuses[stopped.id] = UnitStatus.FAILED if failed else LOST
        if failed:
            report.failed_jobs.append(job_id)
    else:
        cancelled = lifecycle.claim_cancelled(session, stopped.id, token)
        report.statuses[stopped.id] = UnitStatus.CANCELLED if cancelled else LOST
    for unit in after:
        cancelled = lifecycle.claim_cancelled(session, unit.id, token)
        report.statuses[unit.id] = UnitStatus.CANCELLED if cancelled else LOST


def _run_job_units(
    sessions: sessionmaker[Session],
    job_id: str,
    units: list[ClaimedUnit],
    token: str,
    beat: Heartbeat,
    settings: Settings,
    worker: str,
    report: BatchReport,
) -> None:
    try:
        with sessions() as session:
            loaded = plan_for_job(session, job_id, settings)
    except Exception as exc:
        if beat.lost():  # the store went away while loading the plan: not a failed fit
            report.statuses.update({u.id: LOST for u in units})
            return
        # a refused copy of the table says everything in its sentence, as in execute.py
        error = str(exc) if isinstance(exc, CopyRefused) else traceback.format_exc()
        ran = _Ran([], units[0], UnitStatus.FAILED, error)
        with sessions.begin() as session:
            _end_rest(session, job_id, token, ran, units, report)
        return
    ran = _fit_all(loaded, units, StopCheck(sessions, job_id, beat))
    if beat.lost():  # given up or taken over during a fit: write nothing
        report.statuses.update({u.id: LOST for u in units})
        return
    # models serialized before the transaction opens: minutes for a big forest (execute.py)
    saved = {unit.id: model_file_of(outcome, settings) for unit, outcome in ran.outcomes}
    with sessions.begin() as session:
        _record(session, job_id, token, ran, units, saved, loaded, settings, worker, report)


def execute_batch(
    sessions: sessionmaker[Session], unit_ids: list[int], *, settings: Settings, worker: str
) -> BatchReport:
    """Claim, run and record the units of `unit_ids` this copy can take; never raises for a
    failing fit. Units it could not claim are reported "skipped"."""
    report = BatchReport()
    with sessions.begin() as session:
        token, claimed = batch_lifecycle.claim_units(session, unit_ids, worker, settings.unit_lease)
    taken = {unit.id for unit in claimed}
    report.statuses.update({i: "skipped" for i in unit_ids if i not in taken})
    if not claimed:
        return report
    by_job: dict[str, list[ClaimedUnit]] = defaultdict(list)
    for unit in claimed:
        by_job[unit.job_id].append(unit)
    # one heartbeat for the whole claim; it stops before any ending is written
    beat = BatchHeartbeat(sessions, [unit.id for unit in claimed], token, settings)
    with beat:
        for job_id, units in by_job.items():
            if beat.lost():
                report.statuses.update({u.id: LOST for u in units})
                continue
            _run_job_units(sessions, job_id, units, token, beat, settings, worker, report)
    return report


def run_batch_and_advance(
    sessions: sessionmaker[Session], unit_ids: list[int], *, settings: Settings, worker: str
) -> tuple[BatchReport, list[int]]:
    """`run_and_advance` for a batch: run it, then fan in each job whose stage it completed."""
    report = execute_batch(sessions, unit_ids, settings=settings, worker=worker)
    added: list[int] = []
    for job_id in report.failed_jobs:
        settle_parent(sessions, job_id)  # a learning curve fails with its child
    for job_id in report.complete_jobs:
        new = advance_job(sessions, job_id, settings)
        if not new:  # the job may have finished: its learning curve, if any, may be complete
            settle_parent(sessions, job_id)
        added += new
    for job_id, scopes in report.rounds_ended.items():
        # a halving search whose round ended goes on while the others finish theirs
        added += advance_rounds(sessions, job_id, scopes, settings)
    return report, added
