"""Benchmark: what the Celery path costs per work unit beyond its fits, on one worker.

A job of many fast units (iris, 15 candidates, outer 5 x inner 3: 96 stored units) submitted as
the API submits it and run by one real `foldwise worker` (one pool process) on Redis and
PostgreSQL, the worker already running. Per round:

- wall: submission to the job's `succeeded` row;
- fit time: the sum of the seconds each unit records (fitting and scoring its folds);
- per-unit overhead = (wall - fit time) / stored units, and the same per message (a batch of
  units claimed and recorded together is one message; service/cv/unit_batches.py);
- the part of it inside the messages, claim to record (the claim's and record's timestamps),
  per unit, and the submission's own seconds (store, plan, publish), both inside the wall.

Medians over rounds are printed with each round's figures. The machine is shared: read medians.
Needs the local Redis and PostgreSQL. From the repository root:
`.venv/bin/python tests/benchmarks/bench_unit_overhead.py [--rounds 5]`.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

from sqlalchemy import func, select

REPO = Path(__file__).resolve().parents[2]
sys.path[:0] = [str(REPO), str(Path(__file__).resolve().parent)]

from bench_service import _drop, _stack  # noqa: E402

from service.store.models import WorkUnit  # noqa: E402

GOAL_MS = 5.0
JOB: dict[str, Any] = {
    "dataset": {"sample": "iris"},
    "target": "target",
    "task": "classification",
    "families": [
        {
            "estimator": "LogisticRegression",
            "fixed": {"max_iter": 1000},
            "grid": {"C": [0.001, 0.003, 0.01, 0.03, 0.1, 0.3, 1.0, 3.0, 10.0, 30.0]},
        },
        {"estimator": "KNeighborsClassifier", "grid": {"n_neighbors": [1, 3, 5, 9, 15]}},
    ],
    "outer": {"method": "stratified_kfold", "k": 5, "seed": 2},
    "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
    "metrics": ["accuracy"],
    "pick_by": "accuracy",
}


def one_round(folder: Path, tag: str) -> dict[str, float]:
    """One job on one fresh worker; its wall, fit time, stored units and messages."""
    stack, database = _stack(folder, tag)
    try:
        worker = stack.start_worker("w1")
        stack.wait_ready(worker, "ready.")
        began = time.perf_counter()
        job_id = stack.submit(JOB)
        submitted = time.perf_counter() - began
        while stack.job(job_id).status in ("queued", "running"):
            time.sleep(0.005)
        wall = time.perf_counter() - began
        row = stack.job(job_id)
        if row.status != "succeeded":
            sys.exit(f"job {row.status}: {row.error}\n{stack.logs()}")
        with stack.sessions() as session:
            fit = session.scalar(
                select(func.sum(WorkUnit.seconds)).where(WorkUnit.job_id == job_id)
            )
            units = session.scalar(select(func.count()).where(WorkUnit.job_id == job_id))
            messages = session.scalar(
                select(func.count(func.distinct(WorkUnit.claim_token))).where(
                    WorkUnit.job_id == job_id
                )
            )
            # one claim per message: its units share started_at (the claim) and finished_at
            # (the record), so claim-to-record spans add up to the time inside messages
            spans = session.execute(
                select(func.min(WorkUnit.started_at), func.max(WorkUnit.finished_at))
                .where(WorkUnit.job_id == job_id)
                .group_by(WorkUnit.claim_token)
            ).all()
        inside = sum((end - start).total_seconds() for start, end in spans)
        return {
            "wall": wall,
            "fit": float(fit or 0),
            "units": float(units or 0),
            "messages": float(messages or 0),
            "submit": submitted,
            "inside": inside,
        }
    finally:
        stack.stop()
        _drop(database)


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rounds", type=int, default=5)
    args = parser.parse_args()
    folder = Path(tempfile.mkdtemp(prefix="foldwise-bench-overhead-"))
    rounds = []
    for round_ in range(args.rounds):
        figures = one_round(folder, f"overhead-{round_}")
        figures["per_unit_ms"] = (figures["wall"] - figures["fit"]) / figures["units"] * 1000
        figures["per_message_ms"] = (figures["wall"] - figures["fit"]) / figures["messages"] * 1000
        # claim, heartbeat, plan lookup, record: inside the messages, beyond the fits
        figures["inside_ms"] = (figures["inside"] - figures["fit"]) / figures["units"] * 1000
        rounds.append(figures)
        print(
            f"round {round_ + 1}: wall {figures['wall']:.2f}s, fit {figures['fit']:.2f}s, "
            f"{figures['units']:.0f} units in {figures['messages']:.0f} messages, "
            f"{figures['per_unit_ms']:.1f} ms/unit",
            file=sys.stderr,
        )

    def median(key: str) -> float:
        return statistics.median(r[key] for r in rounds)

    print(f"\nCelery, one worker, iris, {median('units'):.0f} units; medians of {args.rounds}:")
    print(f"  wall {median('wall'):.2f} s, fit time {median('fit'):.2f} s")
    print(f"  messages (batches) {median('messages'):.0f}; submission {median('submit'):.2f} s")
    print(
        f"  inside the messages (claim to record) beyond the fits: "
        f"{median('inside_ms'):.2f} ms a unit; the rest is submission, the broker, the first plan "
        "in the worker, fan-in and the result"
    )
    print(
        f"  per-unit overhead (wall - fit) / units: {median('per_unit_ms'):.2f} ms "
        f"(goal < {GOAL_MS:g}); per message {median('per_message_ms'):.1f} ms"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
