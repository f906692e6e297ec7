"""Benchmark: what the Celery path costs per work unit beyond its fits, on one worker.

Two jobs of many fast units (iris, outer 5 x inner 3): 15 candidates (96 stored units) and the
same with 30 candidates (186 units), submitted as the API submits them and run by one real
`foldwise worker` (one pool process) on Redis and PostgreSQL, the worker already running. The
two sizes alternate round by round, each on a fresh store. Per run:

- wall: submission to the job's `succeeded` row;
- fit time: the sum of the seconds each unit records (fitting and scoring its folds);
- overhead = wall - fit time; per unit (the all-in average: the job's fixed costs, submission,
  the worker's first plan, the result, spread over its units) and per message (a batch of units
  claimed and recorded together is one message; service/cv/unit_batches.py);
- the part inside the messages, claim to record (the claim's and record's timestamps), per unit,
  and the submission's own seconds (store, plan, publish), both inside the wall.

From the two sizes' median overheads: the marginal cost of one more unit, (overhead of the large
job - overhead of the small) / (186 - 96), which leaves out the costs a job pays once, and those
fixed costs (the overhead the line gives a job of no units). The goal (< 5 ms a unit) is read
against both, printed side by side. The machine is shared: read medians.
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
# the same job with twice the candidates: 30 x (5 outer + 1 final) inner units and 6 refits
LARGE_JOB: dict[str, Any] = {
    **JOB,
    "families": [
        {
            "estimator": "LogisticRegression",
            "fixed": {"max_iter": 1000},
            "grid": {"C": [round(0.001 * 1.6**i, 6) for i in range(20)]},
        },
        {"estimator": "KNeighborsClassifier", "grid": {"n_neighbors": list(range(1, 20, 2))}},
    ],
}


def one_round(folder: Path, tag: str, job: dict[str, Any]) -> dict[str, float]:
    """One job on one fresh worker; its wall, fit time, stored units and messages."""
    stack, database = _stack(folder, tag)
    try:
        worker = stack.start_worker("w1")
        stack.wait_ready(worker, "ready.")
        began = time.perf_counter()
        job_id = stack.submit(job)
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
    rounds: dict[str, list[dict[str, float]]] = {"small": [], "large": []}
    for round_ in range(args.rounds):
        for size, job in (("small", JOB), ("large", LARGE_JOB)):
            figures = one_round(folder, f"overhead-{size}-{round_}", job)
            overhead = figures["wall"] - figures["fit"]
            figures["overhead"] = overhead
            figures["per_unit_ms"] = overhead / figures["units"] * 1000
            figures["per_message_ms"] = overhead / figures["messages"] * 1000
            # claim, heartbeat, plan lookup, record: inside the messages, beyond the fits
            figures["inside_ms"] = (figures["inside"] - figures["fit"]) / figures["units"] * 1000
            rounds[size].append(figures)
            print(
                f"round {round_ + 1} {size}: wall {figures['wall']:.2f}s, fit "
                f"{figures['fit']:.2f}s, {figures['units']:.0f} units in "
                f"{figures['messages']:.0f} messages, {figures['per_unit_ms']:.1f} ms/unit",
                file=sys.stderr,
            )

    def median(size: str, key: str) -> float:
        return statistics.median(r[key] for r in rounds[size])

    for size in ("small", "large"):
        print(
            f"\nCelery, one worker, iris, {median(size, 'units'):.0f} units; medians of "
            f"{args.rounds}:"
        )
        print(f"  wall {median(size, 'wall'):.2f} s, fit time {median(size, 'fit'):.2f} s")
        print(
            f"  messages (batches) {median(size, 'messages'):.0f}; submission "
            f"{median(size, 'submit'):.2f} s"
        )
        print(
            f"  inside the messages (claim to record) beyond the fits: "
            f"{median(size, 'inside_ms'):.2f} ms a unit"
        )
        print(
            f"  all-in overhead (wall - fit) / units: {median(size, 'per_unit_ms'):.2f} ms; "
            f"per message {median(size, 'per_message_ms'):.1f} ms"
        )
    extra_units = median("large", "units") - median("small", "units")
    marginal = (median("large", "overhead") - median("small", "overhead")) / extra_units
    fixed = median("small", "overhead") - marginal * median("small", "units")
    print(
        f"\nmarginal overhead of one more unit: {marginal * 1000:.2f} ms (goal < {GOAL_MS:g}); "
        f"fixed per job: {fixed:.2f} s (submission, the worker's first plan, the result); "
        f"all-in average over {median('small', 'units'):.0f} units: "
        f"{median('small', 'per_unit_ms'):.2f} ms"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
