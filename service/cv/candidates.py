"""Candidates: concrete (family, hyperparameters) points in a fixed, reproducible order."""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from sklearn.model_selection import ParameterGrid

from service.cv.errors import SpecError
from service.cv.estimators import check_params, estimator_class, has_random_state
from service.cv.recipe_spec import split_params
from service.cv.size import check_search_space
from service.cv.spec import RangeSpec, SelectionSpec

# Estimators with a random_state but none given get this one, recorded in the candidate's
# params, so that the same request always gives the same fold scores.
DEFAULT_RANDOM_STATE = 0


@dataclass(frozen=True)
class Candidate:
    """One concrete point: estimator class name, full hyperparameters and preprocessing."""

    key: str
    position: int
    family: int
    estimator: str
    params: dict[str, Any]
    preprocess: str

    def public(self) -> dict[str, Any]:
        """The candidate as result v1 shows it."""
        return {"candidate_key": self.key, "estimator": self.estimator, "params": self.params}


def candidate_key(
    estimator: str,
    params: dict[str, Any],
    preprocess: str | dict[str, Any],
    inputs: dict[str, Any] | None = None,
) -> str:
    """sha256 of the candidate's canonical JSON (sorted keys, no spaces).

    `preprocess` is "auto", "none" or a recipe's full JSON; `inputs` holds what else makes the
    candidate's scores: the problem (target, task, features), declared column types, weights.
    """
    body: dict[str, Any] = {"estimator": estimator, "params": params, "preprocess": preprocess}
    if inputs:
        body["inputs"] = inputs
    text = json.dumps(body, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode()).hexdigest()


def key_parts(spec: SelectionSpec) -> tuple[str | dict[str, Any], dict[str, Any]]:
    """What besides estimator and params makes a candidate's scores: preprocessing and inputs."""
    recipe = spec.recipe
    preprocess = recipe.model_dump(mode="json") if recipe is not None else str(spec.preprocess)
    inputs: dict[str, Any] = {}
    if spec.columns:
        inputs["columns"] = {
            name: declared.model_dump(mode="json", exclude_none=True)
            for name, declared in sorted(spec.columns.items())
        }
    if spec.weights:
        inputs["weights"] = spec.weights
    # What is predicted from what: a plain k-fold ignores the labels, so two jobs on one table
    # with another target, task or feature set share fold fingerprints, and must not share scores.
    inputs["problem"] = problem_of(spec)
    return preprocess, inputs


def problem_of(spec: SelectionSpec) -> dict[str, Any]:
    """The target, the task and the feature columns (as listed, or all but the reserved ones)."""
    if spec.features is not None:
        features: Any = list(spec.features)
    else:
        reserved = {spec.target} | ({spec.weights} if spec.weights else set())
        for plan in (spec.outer, spec.inner):
            reserved |= {c for c in (plan.groups, plan.order_by) if c}
        features = {"all_but": sorted(reserved)}
    return {"target": spec.target, "task": spec.task, "features": features}


def _check_model_params(cls: Any, params: dict[str, Any], spec: SelectionSpec, field: str) -> None:
    model, recipe = split_params(params)
    check_params(cls, model, field=field)
    if recipe and spec.recipe is None:
        name = sorted(recipe)[0]
        raise SpecError(
            f"{field}.{name}",
            f"{name!r} is a recipe value but preprocess is {spec.preprocess!r}; declare a "
            "preprocess recipe or remove it.",
        )


def draw_ranges(ranges: dict[str, RangeSpec], draws: int, seed: int) -> list[dict[str, Any]]:
    """`draws` points from the ranges, one seeded generator, keys in sorted order."""
    rng = np.random.default_rng(seed)
    points: list[dict[str, Any]] = []
    for _ in range(draws):
        point: dict[str, Any] = {}
        for name in sorted(ranges):
            spec = ranges[name]
            # integers are drawn on [low, high + 1) and floored, so `high` can be drawn too
            high = spec.high + 1 if spec.integer else spec.high
            if spec.log:
                value = math.exp(rng.uniform(math.log(spec.low), math.log(high)))
            else:
                value = rng.uniform(spec.low, high)
            point[name] = min(math.floor(value), int(spec.high)) if spec.integer else value
        points.append(point)
    return points


def enumerate_candidates(spec: SelectionSpec) -> list[Candidate]:
    """Every candidate of the spec, families in order, each in ParameterGrid order.

    Ranges are drawn and crossed with the grid (grid point outer, draw inner). A point that
    equals an earlier one is dropped: it would always tie with its twin and lose the tie.
    """
    check_search_space(spec)
    out: list[Candidate] = []
    seen: set[str] = set()
    preprocess, inputs = key_parts(spec)
    label = "recipe" if spec.recipe is not None else str(spec.preprocess)
    for index, family in enumerate(spec.families):
        field = f"families[{index}]"
        cls = estimator_class(family.estimator, task=spec.task, field=f"{field}.estimator")
        _check_model_params(cls, family.fixed, spec, f"{field}.fixed")
        for name, values in family.grid.items():
            for value in values:
                _check_model_params(cls, {name: value}, spec, f"{field}.grid")
        draws = (
            draw_ranges(family.ranges, family.draws, family.draw_seed)
            if family.ranges and family.draws
            else [{}]
        )
        for point in draws:
            _check_model_params(cls, point, spec, f"{field}.ranges")
        defaults = {}
        if has_random_state(cls) and "random_state" not in family.fixed:
            defaults["random_state"] = DEFAULT_RANDOM_STATE
        for grid_point in ParameterGrid(family.grid):
            for draw in draws:
                params = {**defaults, **family.fixed, **grid_point, **draw}
                params = dict(sorted(params.items()))
                key = candidate_key(family.estimator, params, preprocess, inputs)
                if key in seen:
                    continue
                seen.add(key)
                out.append(Candidate(key, len(out), index, family.estimator, params, label))
    return out
