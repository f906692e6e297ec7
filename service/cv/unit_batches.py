"""Units sized to the work: which stored units one worker takes in one go (a batch).

A unit stays one candidate over the folds of one scope, with its own row, claim and scores; a
batch is only how many of them one message hands to a worker. Fast units (a linear model on a
small table) cost less to fit than to claim, record and publish, so many go in one batch; a slow
unit (a forest on a large table) goes alone, so no batch becomes the tail of the job.

The cost of a unit is estimated in seconds: from fit times already stored for the same candidate
on the same table when there are some, else from the estimator family and the table size (the
rough per-family rates below, from memory, are only meant to tell fast from slow by an order of
magnitude; stored times replace them from a table's second job on).
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

# a unit estimated at this many seconds or more runs alone: batching it saves nothing worth a
# longer tail (the per-unit overhead it would save is milliseconds)
SLOW_UNIT_SECONDS = 0.5
# a batch holds at most this much estimated work, and never more than an eighth of the whole
# (so a job spreads over up to eight workers before a batch can be its tail) ...
BATCH_SECONDS = 1.0
SPREAD = 8
# ... and at most this many units (the claim and the record are one statement each for all)
BATCH_UNITS = 32
# the last TAPER_BATCHES batches' worth of fast work goes in batches TAPER_SPLIT times smaller:
# a stage ends when its last batch does, so every other worker idles for what is left of the
# last big batch (traced on bench_nested_interval.py's job: 0.1-0.4 s of each worker's 3 s)
TAPER_BATCHES = 2
TAPER_SPLIT = 4
# ... but no smaller than this estimated: a batch costs a claim, a record and a message (tens of
# milliseconds), so a tiny job's batches are not split further
TAPERED_BATCH_FLOOR = 0.1
# nor is any batch budgeted below this, however small the stage: a halving search's later
# rounds (a dozen units of a few milliseconds each) went out one unit a batch and spent more
# on claims and records than on fits (tests/benchmarks/bench_halving.py, two workers)
BATCH_FLOOR = 0.1

# seconds per fit per training row (per tree or boosting stage for ensembles); from memory,
# order-of-magnitude only (see above)
_PER_ROW = {
    "LogisticRegression": 10e-6,
    "RidgeClassifier": 2e-6,
    "SGDClassifier": 5e-6,
    "LinearSVC": 10e-6,
    "KNeighborsClassifier": 10e-6,
    "DecisionTreeClassifier": 10e-6,
    "GaussianNB": 1e-6,
    "LinearDiscriminantAnalysis": 2e-6,
    "LinearRegression": 2e-6,
    "Ridge": 2e-6,
    "Lasso": 5e-6,
    "ElasticNet": 5e-6,
    "BayesianRidge": 5e-6,
    "HuberRegressor": 20e-6,
    "SGDRegressor": 5e-6,
    "LinearSVR": 10e-6,
    "KNeighborsRegressor": 10e-6,
    "DecisionTreeRegressor": 10e-6,
}
# a small neural network: seconds per row per epoch per hidden unit (from memory, as above)
_NETWORK_PER_ROW_EPOCH_UNIT = 5e-8
_PER_ROW_PER_TREE = {
    "RandomForestClassifier": (100, 3e-6),
    "ExtraTreesClassifier": (100, 2e-6),
    "GradientBoostingClassifier": (100, 2e-6),
    "AdaBoostClassifier": (50, 2e-6),
    "RandomForestRegressor": (100, 4e-6),
    "ExtraTreesRegressor": (100, 3e-6),
    "GradientBoostingRegressor": (100, 2e-6),
    "AdaBoostRegressor": (50, 2e-6),
}
_KERNEL = {"SVC", "SVR"}  # training grows with the square of the rows
_KERNEL_PER_ROW_SQUARED = 0.05e-6
_HIST_BOOSTING_FIT = 0.5  # seconds: its threads and bins cost about this whatever the size
_UNKNOWN_PER_ROW = 50e-6  # a family not listed: assume slowish, so it is not over-batched
_FIT_FLOOR = 0.002  # a fit costs at least this (validation, copies, scoring)
# the final pick's refit also hands the model over: skops' first import in a worker process, the
# reproducible write, the hash and the store's chunks. Traced on the 300-row table of
# bench_nested_interval.py, its batch took 0.38 s where the fits alone were a few milliseconds;
# counting it as slow sends it alone and first in its stage, instead of last, where the other
# workers waited for it
MODEL_HANDOVER_SECONDS = 0.5


@dataclass(frozen=True)
class UnitWork:
    """What the batcher needs of one queued unit."""

    unit_id: int
    candidate_key: str
    estimator: str
    params: Mapping[str, Any]
    fits: int  # how many fits the unit makes
    train_rows: int  # rows each of its fits trains on (about)
    extra_seconds: float = 0.0  # work beyond the fits (the final refit's model hand-over)


def estimated_fit_seconds(estimator: str, params: Mapping[str, Any], rows: int) -> float:
    """A rough guess of one fit's seconds for a family at a table size (see the module note)."""
    if estimator in _PER_ROW_PER_TREE:
        default_trees, rate = _PER_ROW_PER_TREE[estimator]
        trees = params.get("n_estimators", default_trees)
        trees = trees if isinstance(trees, int) and trees > 0 else default_trees
        return _FIT_FLOOR + trees * rows * rate
    if estimator in _KERNEL:
        return _FIT_FLOOR + rows * rows * _KERNEL_PER_ROW_SQUARED
    if estimator.startswith("HistGradientBoosting"):
        return _HIST_BOOSTING_FIT
    if estimator.startswith("MLP"):
        epochs = params.get("max_iter", 200)
        epochs = epochs if isinstance(epochs, int) and epochs > 0 else 200
        layers = params.get("hidden_layer_sizes", [100])
        layers = layers if isinstance(layers, (list, tuple)) else [layers]
        hidden = sum(size for size in layers if isinstance(size, int)) or 100
        return _FIT_FLOOR + rows * epochs * hidden * _NETWORK_PER_ROW_EPOCH_UNIT
    return _FIT_FLOOR + rows * _PER_ROW.get(estimator, _UNKNOWN_PER_ROW)


def unit_seconds(work: UnitWork, stored_fit_seconds: Mapping[str, float]) -> float:
    """A unit's estimated seconds: stored fit times of its candidate if any, else the guess."""
    per_fit = stored_fit_seconds.get(work.candidate_key)
    if per_fit is None:
        per_fit = estimated_fit_seconds(work.estimator, work.params, work.train_rows)
    return max(1, work.fits) * per_fit + work.extra_seconds


def batch_units(
    works: list[UnitWork],
    stored_fit_seconds: Mapping[str, float] | None = None,
    *,
    spread: int = SPREAD,
) -> list[list[int]]:
    """Unit ids grouped into batches, slowest first; every id in exactly one batch.

    Slow units come first, one each, so the longest work starts earliest and the fast batches
    fill in behind it (longest-first scheduling); fast units are packed in their given order
    into batches of at most BATCH_SECONDS estimated (and a `spread`th of the total, or
    BATCH_FLOOR where that is less), BATCH_UNITS, the last TAPER_BATCHES budgets' worth in
    batches TAPER_SPLIT times smaller (down to TAPERED_BATCH_FLOOR), so the workers finish a
    stage together.

    `spread` 1 is for units run one batch after another in one process: no other worker waits
    for a batch there, so fast units fill whole BATCH_SECONDS batches and nothing is tapered
    (a tiny job's stage is then one claim and one record, not eight).
    """
    stored = stored_fit_seconds or {}
    costs = {w.unit_id: unit_seconds(w, stored) for w in works}
    budget = min(BATCH_SECONDS, max(BATCH_FLOOR, sum(costs.values()) / max(1, spread)))
    slow = sorted(
        (w.unit_id for w in works if costs[w.unit_id] >= SLOW_UNIT_SECONDS),
        key=lambda unit_id: -costs[unit_id],
    )
    fast = [w.unit_id for w in works if costs[w.unit_id] < SLOW_UNIT_SECONDS]
    # where the tapered tail starts: the fast units after it sum to TAPER_BATCHES budgets
    tail, behind = len(fast), 0.0
    while tail > 0 and behind + costs[fast[tail - 1]] <= TAPER_BATCHES * budget * (1 + 1e-9):
        tail -= 1
        behind += costs[fast[tail]]
    batches: list[list[int]] = [[unit_id] for unit_id in slow]
    tapered = max(budget / TAPER_SPLIT, min(budget, TAPERED_BATCH_FLOOR))
    if spread <= 1 or tapered >= budget:  # one process, or too little work for smaller batches
        return batches + _packed(fast, costs, budget)
    return batches + _packed(fast[:tail], costs, budget) + _packed(fast[tail:], costs, tapered)


def _packed(unit_ids: list[int], costs: Mapping[int, float], budget: float) -> list[list[int]]:
    """`unit_ids` in their order, in batches of at most `budget` estimated and BATCH_UNITS."""
    batches: list[list[int]] = []
    current: list[int] = []
    filled = 0.0
    for unit_id in unit_ids:
        cost = costs[unit_id]
        # a relative tolerance: n equal costs summed in floating point may exceed n x cost
        if current and (filled + cost > budget * (1 + 1e-9) or len(current) >= BATCH_UNITS):
            batches.append(current)
            current, filled = [], 0.0
        current.append(unit_id)
        filled += cost
    if current:
        batches.append(current)
    return batches
