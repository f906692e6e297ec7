"""Successive halving in the inner loops agrees with scikit-learn's HalvingGridSearchCV.

scikit-learn as the reference implementation: a HalvingGridSearchCV (resource="n_samples")
inside cross_validate, on tables that ship with scikit-learn, with the same splits and seeds.
The reference is built here from scikit-learn alone; nothing of ours is imported to make it.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cache
from typing import Any

import numpy as np
import pytest
from sklearn import datasets
from sklearn.compose import ColumnTransformer
from sklearn.experimental import enable_halving_search_cv  # noqa: F401  (makes the class)
from sklearn.impute import SimpleImputer
from sklearn.linear_model import LogisticRegression, Ridge
from sklearn.model_selection import HalvingGridSearchCV, KFold, StratifiedKFold, cross_validate
from sklearn.neighbors import KNeighborsClassifier
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import StandardScaler

from service.cv.errors import SpecError
from service.cv.nested import NestedOutcome, run_nested
from service.cv.plan import SelectionPlan, build_plan
from service.cv.size import raced_fits
from service.cv.spec import SelectionSpec
from service.cv.units import inner_units

from .runs import outer_scores, sample_table

TOLERANCE = 1e-9
C_GRID = [0.001, 0.01, 0.03, 0.1, 0.3, 1.0, 3.0, 10.0, 100.0]
SMALL_C_GRID = [0.01, 0.1, 1.0, 10.0]
NEIGHBOURS = [1, 3, 5, 9, 15, 25]
LOGISTIC = {"max_iter": 5000, "random_state": 0}  # the engine's default random_state is 0


def auto(model: Any, columns: list[str]) -> Pipeline:
    """Preprocess "auto" on all-numeric tables, built by hand: median imputation, scaling."""
    numeric = Pipeline([("impute", SimpleImputer(strategy="median")), ("scale", StandardScaler())])
    return Pipeline(
        [("preprocess", ColumnTransformer([("numeric", numeric, columns)])), ("model", model)]
    )


@dataclass(frozen=True)
class Case:
    sample: str
    families: list[dict[str, Any]]
    grid: Any  # scikit-learn's param_grid for the same candidates, in the same order
    search: dict[str, Any]
    outer: int
    inner: int
    seeds: tuple[int, int]
    metrics: tuple[str, ...]
    task: str = "classification"

    def splitter(self, k: int, seed: int) -> Any:
        if self.task == "classification":
            return StratifiedKFold(k, shuffle=True, random_state=seed)
        return KFold(k, shuffle=True, random_state=seed)

    def request(self) -> dict[str, Any]:
        method = "stratified_kfold" if self.task == "classification" else "kfold"
        return {
            "dataset": {"sample": self.sample},
            "target": "target",
            "task": self.task,
            "families": self.families,
            "preprocess": "auto",
            "outer": {"method": method, "k": self.outer, "seed": self.seeds[0]},
            "inner": {"method": method, "k": self.inner, "seed": self.seeds[1]},
            "metrics": list(self.metrics),
            "search": {"strategy": "halving", **self.search},
        }

    def halving(self, columns: list[str]) -> HalvingGridSearchCV:
        # Ridge has a random_state (its sag solvers); the engine pins it to 0 as for the others
        model = (
            LogisticRegression(**LOGISTIC)
            if self.task == "classification"
            else Ridge(random_state=0)
        )
        return HalvingGridSearchCV(
            auto(model, columns),
            self.grid,
            cv=self.splitter(self.inner, self.seeds[1]),
            scoring=self.metrics[0],
            factor=self.search.get("factor", 3),
            min_resources=self.search.get("min_rows", "exhaust"),
            random_state=self.search.get("seed", 0),
            refit=True,
        )


def plan_for(request: dict[str, Any]) -> SelectionPlan:
    """The engine's plan for a request on its bundled sample, built as run_nested runs it."""
    spec = SelectionSpec.model_validate({k: v for k, v in request.items() if k != "dataset"})
    frame, kinds = sample_table(request["dataset"]["sample"])
    return build_plan(spec, frame, kinds)


def run_engine(request: dict[str, Any]) -> NestedOutcome:
    return run_nested(plan_for(request))


LOGISTIC_FAMILY = {"estimator": "LogisticRegression", "fixed": {"max_iter": 5000}}
CASES = {
    # load_breast_cancer (scikit-learn's bundled table): 9 candidates, 3 rounds by "exhaust"
    "cancer-exhaust": Case(
        "breast_cancer",
        [{**LOGISTIC_FAMILY, "grid": {"C": C_GRID}}],
        {"model__C": C_GRID},
        {},
        4,
        3,
        (2, 1),
        ("accuracy", "roc_auc"),
    ),
    # load_breast_cancer: two families (15 candidates), factor 2, a set min_rows and seed
    "cancer-two-families": Case(
        "breast_cancer",
        [
            {**LOGISTIC_FAMILY, "grid": {"C": C_GRID}},
            {"estimator": "KNeighborsClassifier", "grid": {"n_neighbors": NEIGHBOURS}},
        ],
        [
            {"model": [LogisticRegression(**LOGISTIC)], "model__C": C_GRID},
            {"model": [KNeighborsClassifier()], "model__n_neighbors": NEIGHBOURS},
        ],
        {"factor": 2, "min_rows": 40, "seed": 7},
        3,
        3,
        (5, 6),
        ("accuracy",),
    ),
    # load_wine (scikit-learn's bundled table): three classes, accuracy ties are common
    "wine-three-classes": Case(
        "wine",
        [{**LOGISTIC_FAMILY, "grid": {"C": C_GRID}}],
        {"model__C": C_GRID},
        {"min_rows": 30, "seed": 3},
        5,
        3,
        (4, 4),
        ("accuracy", "roc_auc_ovr"),
    ),
    # load_wine again, small enough for the reader tests (tests/analysis, tests/web, tests/cli)
    # to run as a job: 4 candidates, factor 2, 3 outer folds; each outer search races 4 then 2
    # candidates and the search on all rows 4, 2, 1 (scikit-learn's n_candidates_, checked
    # below). Outer and inner seeds differ: with one seed and equal k, the all-rows search's
    # inner folds would be the outer folds themselves and share their stored scores.
    "wine-small": Case(
        "wine",
        [{**LOGISTIC_FAMILY, "grid": {"C": SMALL_C_GRID}}],
        {"model__C": SMALL_C_GRID},
        {"factor": 2, "min_rows": 30, "seed": 3},
        3,
        3,
        (2, 1),
        ("accuracy", "roc_auc_ovr"),
    ),
    # load_diabetes (scikit-learn's bundled table): regression, so no classes in the first round
    "diabetes-regression": Case(
        "diabetes",
        [{"estimator": "Ridge", "grid": {"alpha": C_GRID}}],
        {"model__alpha": C_GRID},
        {"seed": 11},
        5,
        4,
        (0, 9),
        ("neg_mean_squared_error", "r2"),
        task="regression",
    ),
}


@cache
def reference(name: str) -> tuple[dict[str, Any], list[HalvingGridSearchCV], HalvingGridSearchCV]:
    """scikit-learn's nested halving: cross_validate's scores and searches, and the final one."""
    case = CASES[name]
    X, y = getattr(datasets, f"load_{case.sample}")(return_X_y=True, as_frame=True)
    nested = cross_validate(
        case.halving(list(X.columns)),
        X,
        y,
        cv=case.splitter(case.outer, case.seeds[0]),
        scoring=list(case.metrics),
        return_estimator=True,
    )
    final = case.halving(list(X.columns)).fit(X, y)
    return nested, list(nested["estimator"]), final


def check_pick(pick: dict[str, Any], best_params: dict[str, Any]) -> None:
    model = best_params.get("model")
    if model is not None:
        assert pick["estimator"] == type(model).__name__
    for name, value in best_params.items():
        if name != "model":
            assert pick["params"][name.removeprefix("model__")] == value, (pick, best_params)


def check_rounds(rounds: list[dict[str, Any]], search: HalvingGridSearchCV) -> None:
    # scikit-learn's schedule: candidates and rows per round, and fits = candidates x folds
    assert [r["candidates"] for r in rounds] == list(search.n_candidates_)
    assert [r["rows"] for r in rounds] == list(search.n_resources_)
    assert [r["fits"] for r in rounds] == [n * search.n_splits_ for n in search.n_candidates_]


def check_against_reference(result: dict[str, Any], name: str) -> None:
    """Result v1 of case `name` equals scikit-learn's nested halving: outer scores (to 1e-9),
    each search's pick, best mean and rounds, and the fits (searches' plus one refit each)."""
    case = CASES[name]
    nested, searches, final = reference(name)
    for metric in case.metrics:
        np.testing.assert_allclose(
            outer_scores(result, metric), nested[f"test_{metric}"], rtol=0, atol=TOLERANCE
        )
    rounds = result["search"]["rounds"]
    for row, search in zip(result["outer"], searches, strict=True):
        check_pick(row["pick"], search.best_params_)
        assert abs(row["inner_mean"] - search.best_score_) < TOLERANCE
        scope = f"r{row['repeat']}f{row['fold']}"
        check_rounds([r for r in rounds if r["scope"] == scope], search)
    check_pick(result["final_pick"], final.best_params_)
    assert abs(result["final_pick"]["inner_mean"] - final.best_score_) < TOLERANCE
    check_rounds([r for r in rounds if r["scope"] == "all"], final)
    halving_fits = sum(sum(s.n_candidates_) * s.n_splits_ for s in [*searches, final])
    assert result["search"]["fits"] == halving_fits + case.outer + 1


@pytest.mark.parametrize("name", list(CASES))
def test_halving_matches_halving_search_inside_cross_validate(name: str) -> None:
    case = CASES[name]
    outcome = run_engine(case.request())
    result = outcome.result
    check_against_reference(result, name)
    _, searches, final = reference(name)
    # fits: scikit-learn's searches' fits, plus one refit per outer fold and the final refit,
    # against every candidate on every inner fold of every search (the full grid)
    n_candidates = len(outcome_candidates(case))
    refits = case.outer + 1
    assert result["search"]["fits"] == outcome.fits
    full = (case.outer + 1) * case.inner * n_candidates + refits
    assert result["search"]["full_grid_fits"] == full
    # halving refits kept candidates every round, so it may make more fits than the grid, but
    # on fewer rows: each round's rows are the inner training parts cut as scikit-learn cuts them
    rows = sum(
        n * sum(int(r / s.max_resources_ * len(tr)) for tr, _ in s.cv.split(X, y))
        for s, (X, y) in zip([*searches, final], search_inputs(case), strict=True)
        for n, r in zip(s.n_candidates_, s.n_resources_, strict=True)
    )
    assert result["search"]["inner_train_rows"] == rows
    assert rows < result["search"]["full_grid_inner_train_rows"]


def search_inputs(case: Case) -> list[tuple[Any, Any]]:
    """The (X, y) each reference search was given: each outer training part, then all rows."""
    X, y = getattr(datasets, f"load_{case.sample}")(return_X_y=True, as_frame=True)
    outer = case.splitter(case.outer, case.seeds[0])
    return [(X.iloc[tr], y.iloc[tr]) for tr, _ in outer.split(X, y)] + [(X, y)]


def outcome_candidates(case: Case) -> list[Any]:
    return plan_for(case.request()).candidates


def test_scope_names_match_the_outer_folds() -> None:
    # the rounds are keyed by scope; the check above relies on "r<repeat>f<fold>" and "all"
    plan = plan_for(CASES["cancer-exhaust"].request())
    assert plan.scopes == [f"r0f{i}" for i in range(4)] + ["all"]


def _spec(search: dict[str, Any], **extra: Any) -> dict[str, Any]:
    request = CASES["cancer-exhaust"].request()
    request["search"] = search
    return {**request, **extra}


@pytest.mark.parametrize(
    ("search", "field", "words"),
    [
        ({"strategy": "halving", "factor": 1}, "factor", "at least 2"),
        ({"strategy": "halving", "min_rows": 0}, "min_rows", "at least 1"),
        ({"strategy": "grid", "min_rows": 30}, "min_rows", "only the halving strategy"),
        ({"strategy": "halving", "speed": 3}, "speed", "extra"),
        ({"strategy": "bracket"}, "strategy", "'grid' or 'halving'"),
    ],
)
def test_bad_search_values_name_the_field(search: dict[str, Any], field: str, words: str) -> None:
    body = {k: v for k, v in _spec(search).items() if k != "dataset"}
    with pytest.raises(ValueError) as caught:
        SelectionSpec.model_validate(body)
    text = str(caught.value)
    assert field in text and words in text, text


def test_min_rows_beyond_the_inner_search_is_refused() -> None:
    # breast cancer has 569 rows; a 4-fold outer training part has 426 or 427
    with pytest.raises(SpecError) as caught:
        plan_for(_spec({"strategy": "halving", "min_rows": 500}))
    assert caught.value.field == "search.min_rows"
    assert "more than the 426 rows" in caught.value.message


def test_a_first_round_with_one_class_is_refused_before_any_fit() -> None:
    # load_breast_cancer, 27 candidates: scikit-learn's default start (16 of 455 rows) cuts
    # inner fold 0 of outer fold r0f0 to 10 training rows of a single class; scikit-learn
    # would score those fits NaN and race on, the engine asks for a larger min_rows instead
    request = _spec({"strategy": "halving"})
    request["families"] = [
        {**LOGISTIC_FAMILY, "grid": {"C": [float(c) for c in np.logspace(-3, 3, 27)]}}
    ]
    request["outer"] = {"method": "stratified_kfold", "k": 5, "seed": 2}
    request["inner"] = {"method": "stratified_kfold", "k": 3, "seed": 1}
    with pytest.raises(SpecError) as caught:
        plan_for(request)
    assert caught.value.field == "search.min_rows"
    assert "a single class" in caught.value.message
    request["search"] = {"strategy": "halving", "min_rows": 40}
    assert len(plan_for(request).candidates) == 27


def test_halving_with_one_candidate_is_refused() -> None:
    request = _spec({"strategy": "halving"})
    request["families"] = [{**LOGISTIC_FAMILY, "grid": {"C": [1.0]}}]
    with pytest.raises(SpecError) as caught:
        plan_for(request)
    assert caught.value.field == "search.strategy"
    assert "at least two candidates" in caught.value.message


def test_the_nested_interval_is_refused_with_halving() -> None:
    body = {k: v for k, v in _spec({"strategy": "halving"}).items() if k != "dataset"}
    body["interval"] = {"method": "nested", "repetitions": 2}
    with pytest.raises(ValueError, match="interval: the nested interval reruns the full-grid"):
        SelectionSpec.model_validate(body)


def test_a_halving_job_starts_with_its_first_rounds_units() -> None:
    # the service stores the first round's units; its fan-in adds the later rounds' units
    plan = plan_for(_spec({"strategy": "halving"}))
    first = inner_units(plan)
    assert {(u.kind, u.round) for u in first} == {("inner", 0)}
    assert len(first) == len(plan.scopes) * len(plan.candidates)
    # each scope's rounds cut its inner folds, the last round on every row of the search
    for scope, rounds in plan.rounds.items():
        assert [len(cut) for cut in rounds] == [len(plan.inner[scope])] * len(rounds)
        for cut, fold in zip(rounds[-1], plan.inner[scope], strict=True):
            assert len(cut.train) <= len(fold.train)
    grid = plan_for(_spec({"strategy": "grid"}))
    assert grid.rounds == {}
    assert len(inner_units(grid)) == 5 * len(grid.candidates)


def test_a_spec_read_back_from_the_store_validates_again() -> None:
    # the service stores model_dump() of the request and validates it again to run it
    for search in ({}, {"strategy": "halving", "factor": 2, "min_rows": 30, "seed": 4}):
        body = {k: v for k, v in _spec(search).items() if k != "dataset"}
        spec = SelectionSpec.model_validate(body)
        assert SelectionSpec.model_validate(spec.model_dump()) == spec


def test_grid_is_still_the_default_and_its_result_unchanged() -> None:
    request = _spec({})
    request["families"] = [{**LOGISTIC_FAMILY, "grid": {"C": [0.1, 1.0]}}]
    outcome = run_engine(request)
    assert "search" not in outcome.result
    assert outcome.fits == 5 * 3 * 2 + 5


@pytest.mark.parametrize("name", list(CASES))
def test_the_fits_cap_counts_every_round_of_a_search(name: str) -> None:
    # the cap is checked from the request's numbers alone: it must bound the candidate fits of
    # scikit-learn's own searches (their n_candidates_ per round), and meet them where every
    # round runs ("exhaust" on 9 candidates: 9 + 3 + 1)
    case = CASES[name]
    spec = SelectionSpec.model_validate({k: v for k, v in case.request().items() if k != "dataset"})
    bound = raced_fits(spec, len(outcome_candidates(case)))
    _, searches, final = reference(name)
    raced = [sum(s.n_candidates_) for s in [*searches, final]]
    assert max(raced) <= bound
    if name == "cancer-exhaust":
        assert set(raced) == {bound}
