"""Helpers for the engine tests: samples as the service loads them, engine runs, stored runs."""

from __future__ import annotations

from functools import cache
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from service.config import Settings
from service.cv.nested import NestedOutcome, run_nested
from service.cv.plan import SelectionPlan, build_plan
from service.cv.spec import SelectionSpec
from service.datasets.kinds import infer_column_kinds
from service.datasets.sources import DatasetSource, load_table
from service.jobs.local.driver import EmbeddedOutcome, run_embedded


@cache
def sample_table(name: str) -> tuple[pd.DataFrame, dict[str, str]]:
    """A bundled sample as the service loads it: canonical frame and column kinds."""
    table = load_table(DatasetSource(sample=name), base_dir=Path.cwd())  # type: ignore[arg-type]
    return table.frame, dict(table.kinds)


def plan_for(request: dict[str, Any], frame: pd.DataFrame | None = None) -> SelectionPlan:
    """The engine's plan for a job request v1 dict, on its sample or on `frame`."""
    body = {k: v for k, v in request.items() if k != "dataset"}
    spec = SelectionSpec.model_validate(body)
    if frame is None:
        frame, kinds = sample_table(request["dataset"]["sample"])
    else:
        kinds = dict(infer_column_kinds(frame))
    return build_plan(spec, frame, kinds)


def run_engine(request: dict[str, Any], frame: pd.DataFrame | None = None) -> NestedOutcome:
    """Nested CV through the engine alone (no store), as run_nested does it."""
    return run_nested(plan_for(request, frame))


def run_stored(request: dict[str, Any], settings: Settings, workers: int = 1) -> EmbeddedOutcome:
    """The application path: validate, store and run the job on the local pool."""
    return run_embedded(request, settings=settings, workers=workers, base_dir=Path.cwd())


def outer_scores(result: dict[str, Any], metric: str) -> np.ndarray:
    """Result v1's outer fold scores for `metric`, in (repeat, fold) order."""
    return np.array([row["scores"][metric] for row in result["outer"]], dtype="float64")
