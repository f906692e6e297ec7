"""A fold's preprocessing fitted once and shared by the candidates of that fold
(service/cv/shared_folds.py): the same bits as fitting each candidate's whole pipeline, and a
cache that stays within its bounds and never hands one table's rows to another."""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

import numpy as np
import pandas as pd
import pytest
from sklearn.base import clone

from service.cv import shared_folds
from service.cv.plan import SelectionPlan
from service.cv.predictions import capture
from service.cv.preprocess import build_pipeline
from service.cv.shared_folds import FoldCache, SharedFold, steps_key
from service.cv.units import UnitRef, _shared_inputs, _split, fit_and_score, inner_units
from service.cv.weights import fit_model

from .runs import plan_for, run_engine

# SVC(probability=True) is deprecated in scikit-learn 1.9 but still a candidate requests can name
pytestmark = pytest.mark.filterwarnings("ignore:The `probability` parameter:FutureWarning")


@pytest.fixture(autouse=True)
def fresh_cache() -> Iterator[None]:
    """Each test starts from an empty cache at the default bounds, and leaves it so."""
    default = (shared_folds.DEFAULT_MAX_ENTRIES, shared_folds.DEFAULT_MAX_MB * 1024 * 1024)
    shared_folds.set_limits(*default)
    yield
    shared_folds.set_limits(*default)


def mixed_frame(rows: int = 150, seed: int = 3) -> pd.DataFrame:
    """An invented table: two categorical columns and numeric ones, all with gaps."""
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame(
        {
            "site": rng.choice(["north", "south", "east", "west"], rows).astype(object),
            "kind": rng.choice(["a", "b", "c"], rows).astype(object),
            "x1": rng.normal(size=rows),
            "x2": rng.normal(5.0, 2.0, size=rows),
            "x3": rng.exponential(size=rows),
            "w": rng.uniform(0.2, 3.0, size=rows),
        }
    )
    signal = frame["x1"] + 0.5 * (frame["site"] == "north") - 0.2 * frame["x3"]
    frame["label"] = np.where(signal + rng.normal(0, 0.7, rows) > 0.2, "yes", "no")
    for column in ("site", "kind", "x1", "x2"):
        frame.loc[rng.choice(rows, rows // 10, replace=False), column] = np.nan
    return frame


def mixed_request(**changes: Any) -> dict[str, Any]:
    request: dict[str, Any] = {
        "dataset": {"path": "unused.csv"},
        "target": "label",
        "task": "classification",
        "features": ["site", "kind", "x1", "x2", "x3"],
        "families": [
            {
                "estimator": "LogisticRegression",
                "fixed": {"max_iter": 1000},
                "grid": {"C": [0.1, 1]},
            },
            {"estimator": "RandomForestClassifier", "fixed": {"n_estimators": 15}},
            {"estimator": "SVC", "grid": {"probability": [False, True]}},
        ],
        "outer": {"method": "stratified_kfold", "k": 3, "seed": 0},
        "inner": {"method": "stratified_kfold", "k": 2, "seed": 1},
        "metrics": ["accuracy", "roc_auc", "balanced_accuracy"],
    }
    request.update(changes)
    return request


def unit_results(plan: SelectionPlan, share: bool) -> list[list[dict[str, Any]]]:
    refs = inner_units(plan) + [
        UnitRef("outer_refit", fold.scope, c.key) for fold in plan.outer for c in plan.candidates
    ]
    return [fit_and_score(plan, ref, share=share).folds for ref in refs]


def assert_same_bits(shared: list[list[dict[str, Any]]], fresh: list[list[dict[str, Any]]]) -> None:
    assert len(shared) == len(fresh)
    for unit_shared, unit_fresh in zip(shared, fresh, strict=True):
        for a, b in zip(unit_shared, unit_fresh, strict=True):
            assert a["fingerprint"] == b["fingerprint"]
            # exact equality, not a tolerance: the same computation on the same bits
            assert a["scores"] == b["scores"]
            assert a["predictions"].arrays.keys() == b["predictions"].arrays.keys()
            for name, values in a["predictions"].arrays.items():
                assert values.tobytes() == b["predictions"].arrays[name].tobytes(), name


def test_auto_preprocessing_shared_gives_the_same_bits_as_whole_pipelines() -> None:
    plan = plan_for(mixed_request(), mixed_frame())
    fresh = unit_results(plan, share=False)
    assert shared_folds.CACHE.stats()["misses"] == 0  # share=False never looks
    shared = unit_results(plan, share=True)
    stats = shared_folds.CACHE.stats()
    folds = sum(len(f) for f in plan.inner.values()) + len(plan.outer)
    # "auto" does not depend on the estimator: one fit per fold, every other candidate reuses it
    assert stats["misses"] == folds
    assert stats["hits"] == folds * (len(plan.candidates) - 1)
    assert_same_bits(shared, fresh)


def test_recipe_with_selection_and_weights_shared_gives_the_same_bits() -> None:
    # weights reach the scaler and the selector's L1 model; a grid over a recipe value makes two
    # preprocessings, which must not share
    recipe = {
        "numeric": {"impute": "mean", "scale": True},
        "categorical": {"encode": "onehot"},
        "select": {"method": "l1_model", "C": 0.5},
    }
    families = [
        {
            "estimator": "LogisticRegression",
            "grid": {"C": [0.1, 1], "numeric__scale": [True, False]},
        },
        {"estimator": "RandomForestClassifier", "fixed": {"n_estimators": 10}},
    ]
    request = mixed_request(preprocess=recipe, families=families, weights="w")
    plan = plan_for(request, mixed_frame(seed=5))
    assert_same_bits(unit_results(plan, share=True), unit_results(plan, share=False))
    stats = shared_folds.CACHE.stats()
    folds = sum(len(f) for f in plan.inner.values()) + len(plan.outer)
    assert stats["misses"] == 2 * folds  # scaled and unscaled numeric columns


def test_weights_with_steps_that_take_none_still_reach_the_model() -> None:
    # no scaler and no selector: nothing before the model consumes the weights
    recipe = {"numeric": {"impute": "median", "scale": False}}
    families = [{"estimator": "LogisticRegression", "grid": {"C": [0.1, 1, 10]}}]
    request = mixed_request(preprocess=recipe, families=families, weights="w")
    plan = plan_for(request, mixed_frame(seed=7))
    assert_same_bits(unit_results(plan, share=True), unit_results(plan, share=False))
    assert shared_folds.CACHE.stats()["hits"] > 0


def test_a_hit_hands_out_the_arrays_of_a_fresh_fit() -> None:
    plan = plan_for(mixed_request(), mixed_frame())
    fold = plan.inner["all"][0]
    candidate = plan.candidates[0]
    first = _shared_inputs(
        plan, fold, _split(build_pipeline(candidate, plan.table, "classification"))[0]
    )  # type: ignore[index]
    steps = _split(build_pipeline(plan.candidates[3], plan.table, "classification"))[0]  # type: ignore[index]
    again = _shared_inputs(plan, fold, steps)
    assert again is first and shared_folds.CACHE.stats()["hits"] == 1
    # a fresh fit of the same steps outside the cache
    fresh = clone(steps)
    X = plan.table.X
    train = fresh.fit_transform(X.iloc[fold.train], plan.y[fold.train])
    test = fresh.transform(X.iloc[fold.test])
    for kept, made in ((again.train, train), (again.test, test)):
        assert kept.dtype == made.dtype and kept.shape == made.shape
        assert kept.tobytes() == made.tobytes()
        assert not kept.flags.writeable  # what candidates get is a copy


def test_an_estimator_writing_into_its_input_does_not_change_what_the_next_one_gets() -> None:
    frame = mixed_frame()
    frame["label"] = frame["x1"].fillna(0) * 2 + frame["x3"]
    families = [
        {"estimator": "LinearRegression", "grid": {"copy_X": [False, True]}},
        {"estimator": "Ridge", "fixed": {"copy_X": False}},
    ]
    request = mixed_request(task="regression", families=families, metrics=["r2"])
    request["outer"] = {"method": "kfold", "k": 3, "seed": 0}
    request["inner"] = {"method": "kfold", "k": 2, "seed": 1}
    plan = plan_for(request, frame)
    assert_same_bits(unit_results(plan, share=True), unit_results(plan, share=False))


def test_whole_nested_results_are_equal_with_and_without_sharing() -> None:
    request = mixed_request()
    frame = mixed_frame(seed=11)
    shared = run_engine(request, frame)
    shared_folds.set_limits(0, 0)
    fresh = run_engine(request, frame)
    assert shared.result == fresh.result
    assert shared.fits == fresh.fits


def test_labels_read_off_another_response_equal_predict() -> None:
    plan = plan_for(mixed_request(), mixed_frame())
    fold = plan.outer[0]
    X, y = plan.table.X, plan.y
    for three_classes in (False, True):
        target = y
        if three_classes:
            target = np.where(X["kind"].fillna("a").to_numpy() == "c", "maybe", y).astype(object)
        for candidate in plan.candidates[:3]:  # logistic regression twice, a random forest
            model = build_pipeline(candidate, plan.table, "classification")
            fit_model(model, X.iloc[fold.train], target[fold.train], None)
            kept = capture(
                model.steps[-1][1], model[:-1].transform(X.iloc[fold.test]), "classification"
            )
            index = {label: i for i, label in enumerate(model.classes_.tolist())}
            expected = [index[label] for label in model.predict(X.iloc[fold.test])]
            assert kept.arrays["predict"].tolist() == expected


def entry(nbytes: int) -> SharedFold:
    return SharedFold(None, np.zeros(1), np.zeros(1), nbytes)


def test_the_cache_keeps_within_entries_and_bytes_least_recently_used_first() -> None:
    table = pd.DataFrame({"a": [1.0]})
    sources = (table, None, None)
    cache = FoldCache(max_entries=3, max_bytes=1000)
    for key in "abc":
        cache.put(key, sources, entry(100))
    assert cache.get("a", sources) is not None  # now b is the least recently used
    cache.put("d", sources, entry(100))
    assert cache.get("b", sources) is None
    assert [k for k in "acd" if cache.get(k, sources) is not None] == ["a", "c", "d"]
    cache.put("e", sources, entry(850))  # over 1000 bytes: the oldest go until it fits
    assert cache.stats()["bytes"] == 950
    assert [k for k in "acde" if cache.get(k, sources) is not None] == ["d", "e"]
    cache.put("huge", sources, entry(1001))  # larger than the whole budget: not kept
    assert cache.get("huge", sources) is None
    assert cache.stats()["peak_bytes"] <= 1000


def test_an_entry_is_never_handed_out_for_another_table() -> None:
    cache = FoldCache(max_entries=4, max_bytes=10_000)
    table = pd.DataFrame({"a": [1.0]})
    cache.put("k", (table, None, None), entry(10))
    other = table.copy()  # equal values, another object: the key's id() would not tell them apart
    assert cache.get("k", (other, None, None)) is None
    assert cache.stats()["entries"] == 0  # the stale entry is dropped


def test_steps_with_any_other_value_have_another_key() -> None:
    plan = plan_for(mixed_request(), mixed_frame())
    steps = _split(build_pipeline(plan.candidates[0], plan.table, "classification"))[0]  # type: ignore[index]
    same = _split(build_pipeline(plan.candidates[4], plan.table, "classification"))[0]  # type: ignore[index]
    assert steps_key(steps) == steps_key(same)
    changed = clone(steps).set_params(preprocess__numeric__impute__strategy="mean")
    assert steps_key(changed) != steps_key(steps)
