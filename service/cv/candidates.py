"""Candidates: concrete (family, hyperparameters) points in a fixed, reproducible order."""

from __future__ import annotations

import hashlib
import json
import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from sklearn.model_selection import ParameterGrid

from service.cv.estimators import check_params, estimator_class, has_random_state
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


def candidate_key(estimator: str, params: dict[str, Any], preprocess: str) -> str:
    """sha256 of the candidate's canonical JSON (sorted keys, no spaces)."""
    body = {"estimator": estimator, "params": params, "preprocess": preprocess}
    text = json.dumps(body, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode()).hexdigest()


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
    for index, family in enumerate(spec.families):
        field = f"families[{index}]"
        cls = estimator_class(family.estimator, task=spec.task, field=f"{field}.estimator")
        check_params(cls, family.fixed, field=f"{field}.fixed")
        for name, values in family.grid.items():
            for value in values:
                check_params(cls, {name: value}, field=f"{field}.grid")
        draws = (
            draw_ranges(family.ranges, family.draws, family.draw_seed)
            if family.ranges and family.draws
            else [{}]
        )
        for point in draws:
            check_params(cls, point, field=f"{field}.ranges")
        defaults = {}
        if has_random_state(cls) and "random_state" not in family.fixed:
            defaults["random_state"] = DEFAULT_RANDOM_STATE
        for grid_point in ParameterGrid(family.grid):
            for draw in draws:
                params = {**defaults, **family.fixed, **grid_point, **draw}
                params = dict(sorted(params.items()))
                key = candidate_key(family.estimator, params, spec.preprocess)
                if key in seen:
                    continue
                seen.add(key)
                out.append(
                    Candidate(key, len(out), index, family.estimator, params, spec.preprocess)
                )
    return out
