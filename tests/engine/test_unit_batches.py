"""Batches sized to the work (service/cv/unit_batches.py): fast units together, slow ones alone.

The rule the batcher keeps is common practice for scheduling independent jobs: the longest
first (Graham's longest-processing-time rule, SIAM J. Appl. Math. 17(2), 1969, from memory), and
short ones packed so that no pack is long enough to become the tail.
"""

from __future__ import annotations

from service.cv.unit_batches import (
    BATCH_FLOOR,
    BATCH_SECONDS,
    BATCH_UNITS,
    MODEL_HANDOVER_SECONDS,
    SLOW_UNIT_SECONDS,
    SPREAD,
    TAPER_BATCHES,
    TAPER_SPLIT,
    TAPERED_BATCH_FLOOR,
    UnitWork,
    batch_units,
    estimated_fit_seconds,
    unit_seconds,
)


def _works() -> list[UnitWork]:
    # a job's inner units: 40 logistic regressions on 300 rows, 4 big forests on 3000 rows
    fast = [UnitWork(i, f"lr{i % 10}", "LogisticRegression", {"C": 1.0}, 3, 300) for i in range(40)]
    slow = [
        UnitWork(100 + i, f"rf{i}", "RandomForestClassifier", {"n_estimators": 300}, 3, 3000)
        for i in range(4)
    ]
    return fast[:20] + slow + fast[20:]


def test_every_unit_lands_in_exactly_one_batch() -> None:
    works = _works()
    batches = batch_units(works)
    flat = [unit_id for batch in batches for unit_id in batch]
    assert sorted(flat) == sorted(w.unit_id for w in works)


def test_slow_units_run_alone_and_first() -> None:
    works = _works()
    batches = batch_units(works)
    slow = {w.unit_id for w in works if unit_seconds(w, {}) >= SLOW_UNIT_SECONDS}
    assert slow == {100, 101, 102, 103}
    assert batches[: len(slow)] == [[unit_id] for unit_id in sorted(slow)]
    assert all(len(batch) == 1 for batch in batches if set(batch) & slow)


def test_fast_units_share_batches_within_the_budget() -> None:
    works = _works()
    costs = {w.unit_id: unit_seconds(w, {}) for w in works}
    budget = min(BATCH_SECONDS, max(BATCH_FLOOR, sum(costs.values()) / SPREAD))
    fast_batches = [batch for batch in batch_units(works) if batch[0] < 100]
    # 40 fast units in far fewer messages, none over the budget or the unit cap
    assert len(fast_batches) < 40 / 4
    for batch in fast_batches:
        assert len(batch) <= BATCH_UNITS
        assert len(batch) == 1 or sum(costs[i] for i in batch) <= budget * (1 + 1e-9)


def test_a_small_job_spreads_over_several_batches() -> None:
    # eight units of about 0.1 s: the budget is an eighth of the whole, so two workers both
    # get work
    works = [UnitWork(i, "k", "LogisticRegression", {}, 3, 4000) for i in range(8)]
    assert sum(unit_seconds(w, {}) for w in works) / SPREAD >= BATCH_FLOOR
    assert len(batch_units(works)) >= 4


def test_a_stage_of_a_few_milliseconds_is_not_cut_below_the_floor() -> None:
    # eight units of 6 ms (a halving search's later round, say): an eighth of the whole would
    # be one unit a batch, each costing more to claim and record than to fit
    works = [UnitWork(i, "k", "GaussianNB", {}, 3, 100) for i in range(8)]
    assert sum(unit_seconds(w, {}) for w in works) <= BATCH_FLOOR
    assert batch_units(works) == [[w.unit_id for w in works]]


def test_stored_fit_times_replace_the_family_guess() -> None:
    # a candidate guessed fast whose stored fits took two seconds each runs alone
    works = _works()
    stored = {"lr3": 2.0}
    batches = batch_units(works, stored)
    of_lr3 = [
        batch
        for batch in batches
        if any(works_by_id(works)[i].candidate_key == "lr3" for i in batch)
    ]
    assert of_lr3 and all(len(batch) == 1 for batch in of_lr3)


def works_by_id(works: list[UnitWork]) -> dict[int, UnitWork]:
    return {w.unit_id: w for w in works}


def test_the_guess_grows_with_rows_and_trees() -> None:
    assert estimated_fit_seconds("SVC", {}, 4000) > 4 * estimated_fit_seconds("SVC", {}, 1000)
    few = estimated_fit_seconds("RandomForestClassifier", {"n_estimators": 10}, 1000)
    many = estimated_fit_seconds("RandomForestClassifier", {"n_estimators": 500}, 1000)
    assert many > 10 * few


def test_work_beyond_the_fits_counts_in_the_estimate() -> None:
    # the final refit's model hand-over makes a millisecond fit a slow unit: alone and first
    final = UnitWork(999, "lr0", "LogisticRegression", {"C": 1.0}, 1, 300, MODEL_HANDOVER_SECONDS)
    works = [*_works()[:20], final]
    assert unit_seconds(works[-1], {}) >= SLOW_UNIT_SECONDS
    assert batch_units(works)[0] == [999]


def test_a_stage_ends_in_small_batches() -> None:
    # 200 equal fast units: full batches first, then the last two budgets' worth in quarters,
    # so no worker is left waiting long for another's last batch (common practice in
    # scheduling loops: chunks that shrink towards the end, as guided self-scheduling does)
    works = [
        UnitWork(i, f"lr{i % 10}", "LogisticRegression", {"C": 1.0}, 3, 300) for i in range(200)
    ]
    costs = {w.unit_id: unit_seconds(w, {}) for w in works}
    budget = min(BATCH_SECONDS, sum(costs.values()) / SPREAD)
    batches = batch_units(works)
    assert [i for batch in batches for i in batch] == list(range(200))  # order kept
    work = [sum(costs[i] for i in batch) for batch in batches]
    tapered = max(budget / TAPER_SPLIT, TAPERED_BATCH_FLOOR)
    assert tapered < budget / 2
    small = [w for w in work if w <= tapered * (1 + 1e-9)]
    assert len(small) >= TAPER_BATCHES * TAPER_SPLIT - 1
    # the small ones are the last, and they hold about TAPER_BATCHES budgets of work
    assert work[-len(small) :] == small
    assert sum(small) <= TAPER_BATCHES * budget * (1 + 1e-9)
    assert max(work[: -len(small)]) > budget / 2


def test_a_tiny_stage_is_not_split_further() -> None:
    # 32 cheap units (0.2 s in all): an eighth of the whole is under the floor, so batches are
    # filled to the floor and nothing is tapered (splitting would cost more than it saves)
    works = [UnitWork(i, "k", "GaussianNB", {}, 3, 100) for i in range(32)]
    costs = {w.unit_id: unit_seconds(w, {}) for w in works}
    assert sum(costs.values()) / SPREAD < BATCH_FLOOR <= TAPERED_BATCH_FLOOR
    batches = batch_units(works)
    # every batch but the last is full: one more unit would have taken it over the floor
    for batch in batches[:-1]:
        assert sum(costs[i] for i in batch) + max(costs.values()) > BATCH_FLOOR
    assert len(batches) < SPREAD


def test_one_process_packs_whole_batches_and_tapers_nothing() -> None:
    # 40 fast units (0.6 s estimated in all) run one batch after another in one process: no
    # worker waits for another there, so the unit cap, not an eighth of the work, ends a batch
    fast = [w for w in _works() if w.unit_id < 100]
    total = sum(unit_seconds(w, {}) for w in fast)
    assert total < BATCH_SECONDS
    one_process = batch_units(fast, spread=1)
    assert [len(batch) for batch in one_process] == [BATCH_UNITS, len(fast) - BATCH_UNITS]
    assert [i for batch in one_process for i in batch] == [w.unit_id for w in fast]
    assert len(batch_units(fast)) >= 4  # the workers' default spreads the same units
