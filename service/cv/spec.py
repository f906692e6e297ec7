"""The selection spec: job request v1 without its dataset reference (which is not the engine's)."""

from __future__ import annotations

from typing import Annotated, Any, Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

from service.cv.recipe_spec import ColumnType, Recipe

SplitMethod = Literal["kfold", "stratified_kfold", "group_kfold", "time_series"]
Task = Literal["classification", "regression"]
JsonValue = Any  # a value that came from JSON: checked against the estimator's own constraints

# Bounds on every number and list that drives work or memory. The whole job's fits are capped
# as well (size.py); these keep each field sensible on its own, so the sentence names it.
MAX_FOLDS = 1_000  # k of one split plan (leave-one-out on up to 1,000 rows)
MAX_REPEATS = 100
MAX_GRID_VALUES = 2_000  # values of one hyperparameter; also the most draws (MAX_CANDIDATES)
MAX_FAMILIES = 100
MAX_PARAMS = 100  # hyperparameters named in one family's fixed, grid or ranges
MAX_METRICS = 20
MAX_FEATURES = 100_000
MAX_NAME = 1_000  # characters of a column, estimator or metric name
# repetitions of the nested interval: each costs K·(K-1) whole selections (Bates et al. 2024)
MAX_INTERVAL_REPETITIONS = 100
# when a nested request names none: the coverage study's setting (README, "interval")
DEFAULT_INTERVAL_REPETITIONS = 3
Name = Annotated[str, Field(min_length=1, max_length=MAX_NAME)]


class _Strict(BaseModel):
    # allow_inf_nan=False: JSON has no NaN or Infinity, and a fold score cannot use them
    model_config = ConfigDict(extra="forbid", frozen=True, allow_inf_nan=False)


class RangeSpec(_Strict):
    """A hyperparameter range sampled `draws` times: uniform, or log-uniform with `log`."""

    low: float
    high: float
    integer: bool = False
    log: bool = False

    @model_validator(mode="after")
    def _ordered(self) -> RangeSpec:
        if not self.low < self.high:
            raise ValueError("high: must be greater than low")
        if self.log and self.low <= 0:
            raise ValueError("low: a log-scale range needs low > 0")
        return self


class FamilySpec(_Strict):
    """One estimator type with fixed values, a grid and ranges; neither means one candidate."""

    estimator: Name
    fixed: dict[Name, JsonValue] = Field(default_factory=dict, max_length=MAX_PARAMS)
    grid: dict[Name, Annotated[list[JsonValue], Field(max_length=MAX_GRID_VALUES)]] = Field(
        default_factory=dict, max_length=MAX_PARAMS
    )
    ranges: dict[Name, RangeSpec] = Field(default_factory=dict, max_length=MAX_PARAMS)
    draws: int | None = Field(default=None, ge=1, le=MAX_GRID_VALUES)
    draw_seed: int = Field(default=0, ge=0, le=2**32 - 1)

    @model_validator(mode="after")
    def _consistent(self) -> FamilySpec:
        for name, values in self.grid.items():
            if not values:
                raise ValueError(
                    f"grid: the value list for {name!r} is empty; give at least one value"
                )
        if self.ranges and self.draws is None:
            raise ValueError("draws: ranges need draws (how many points to sample), e.g. draws: 8")
        if self.draws is not None and not self.ranges:
            raise ValueError(
                "draws: is set but there are no ranges to draw from; remove it or add ranges"
            )
        overlap = (set(self.fixed) & set(self.grid)) | (set(self.fixed) & set(self.ranges))
        overlap |= set(self.grid) & set(self.ranges)
        if overlap:
            raise ValueError(
                f"fixed: {sorted(overlap)} given more than once among fixed, grid and ranges; "
                "keep one"
            )
        return self


class SplitSpec(_Strict):
    """How rows are divided: method, k, repeats and seed (plus groups or order column)."""

    method: SplitMethod
    k: int = Field(default=5, le=MAX_FOLDS)
    repeats: int = Field(default=1, ge=1, le=MAX_REPEATS)
    seed: int | None = Field(default=None, ge=0, le=2**32 - 1)  # numpy's seed range
    groups: Name | None = None
    order_by: Name | None = None
    # time_series only, as scikit-learn's TimeSeriesSplit takes them (see _time_options)
    gap: int = Field(default=0, ge=0)
    max_train_size: int | None = Field(default=None, ge=1)
    test_size: int | None = Field(default=None, ge=1)

    @model_validator(mode="after")
    def _consistent(self) -> SplitSpec:
        if self.k < 2:
            raise ValueError("k: must be at least 2")
        if self.method == "group_kfold" and not self.groups:
            raise ValueError(
                "groups: group_kfold needs groups, the column that holds the group labels"
            )
        if self.method == "time_series" and not self.order_by:
            raise ValueError(
                "order_by: time_series needs order_by, the column that orders the rows in time"
            )
        _time_options(self)
        if self.repeats > 1 and self.method in ("group_kfold", "time_series"):
            raise ValueError(
                "repeats: more than one repeat is only for kfold and stratified_kfold, "
                f"not {self.method}"
            )
        if self.repeats > 1 and self.seed is None:
            raise ValueError(
                "seed: repeats > 1 needs a seed so the repeated splits can be reproduced"
            )
        return self


class ContextSpec(_Strict):
    """What the model will be used for, as the requester declares it (it shapes the cautions)."""

    decides_about_people: bool = False
    domain: str | None = Field(default=None, min_length=1, max_length=100)


class IntervalSpec(_Strict):
    """Which interval each estimate gets: its method, its level and (nested) its repetitions."""

    method: Literal["quick", "nested"] = "quick"
    level: float = 0.9
    repetitions: int | None = None

    @model_validator(mode="after")
    def _bounded(self) -> IntervalSpec:
        if not 0.5 < self.level < 0.999:
            raise ValueError(
                f"level: {self.level} is outside (0.5, 0.999); give a coverage such as 0.9"
            )
        if self.repetitions is not None:
            if self.method == "quick":
                raise ValueError(
                    "repetitions: the quick interval uses the outer folds the job already has; "
                    "remove repetitions, or set outer.repeats for more outer folds"
                )
            if not 2 <= self.repetitions <= MAX_INTERVAL_REPETITIONS:
                raise ValueError(
                    f"repetitions: {self.repetitions} is outside 2 to "
                    f"{MAX_INTERVAL_REPETITIONS}; give a number of repetitions in that range"
                )
        return self


class SearchSpec(_Strict):
    """How the inner search spends its fits: the full grid, or successive halving (halving.py).

    Halving follows scikit-learn's HalvingGridSearchCV with resource="n_samples": `factor` is its
    factor, `min_rows` its min_resources (None: its "exhaust" rule), `seed` its random_state.
    """

    strategy: Literal["grid", "halving"] = "grid"
    factor: int = 3
    min_rows: int | None = None
    seed: int = Field(default=0, ge=0, le=2**32 - 1)  # which rows each round subsamples

    @model_validator(mode="after")
    def _consistent(self) -> SearchSpec:
        if self.strategy == "grid":
            # non-default values, not fields set: a request read back from the store has them all
            defaults = SearchSpec.model_fields
            given = [
                n for n in ("factor", "min_rows", "seed") if getattr(self, n) != defaults[n].default
            ]
            if given:
                raise ValueError(
                    f"{given[0]}: only the halving strategy takes {given[0]}; remove it or set "
                    "strategy to 'halving'"
                )
            return self
        if self.factor < 2:
            raise ValueError(
                f"factor: {self.factor} is below 2 and each round keeps 1/factor of the "
                "candidates; give a factor of at least 2, e.g. 3"
            )
        if self.min_rows is not None and self.min_rows < 1:
            raise ValueError(
                f"min_rows: {self.min_rows} rows cannot fit a model; give at least 1, or leave "
                "it out for the default"
            )
        return self


def _time_options(plan: SplitSpec) -> None:
    """gap, max_train_size and test_size belong to time_series alone."""
    if plan.method == "time_series":
        return
    for name in ("gap", "max_train_size", "test_size"):
        if getattr(plan, name) not in (None, 0):
            raise ValueError(f"{name}: only a time_series split takes {name}; remove it")


class SelectionSpec(_Strict):
    """Everything the engine needs to run nested cross-validation on a table."""

    target: Name
    features: list[Name] | None = Field(default=None, max_length=MAX_FEATURES)
    task: Task
    families: list[FamilySpec] = Field(min_length=1, max_length=MAX_FAMILIES)
    preprocess: Literal["auto", "none"] | Recipe = "auto"
    outer: SplitSpec
    inner: SplitSpec
    metrics: list[Name] = Field(min_length=1, max_length=MAX_METRICS)
    pick_by: Name | None = None
    # a share of each outer training part (seeded, stratified for classification; subsample.py)
    train_fraction: float = Field(default=1.0, gt=0, le=1)
    subsample_seed: int = Field(default=0, ge=0, le=2**32 - 1)
    # declared use of the model: a declared decision about people gets the people caution
    context: ContextSpec | None = None
    # column types that override inference, and the column of observation weights
    columns: dict[str, ColumnType] = Field(default_factory=dict)
    weights: str | None = Field(default=None, min_length=1)
    # columns whose values split the outer test rows into groups scored apart (slices.py)
    slices: list[str] = Field(default_factory=list, max_length=20)
    # the interval on every estimate (service/cv/intervals.py); the default costs no extra fit
    interval: IntervalSpec = Field(default_factory=IntervalSpec)
    # the inner search: every candidate on every inner fold, or successive halving (opt-in)
    search: SearchSpec = Field(default_factory=SearchSpec)

    @model_validator(mode="after")
    def _consistent(self) -> SelectionSpec:
        if len(set(self.metrics)) != len(self.metrics):
            raise ValueError("metrics: a metric is listed twice; name each once")
        if self.pick_by is not None and self.pick_by not in self.metrics:
            raise ValueError(
                f"pick_by: {self.pick_by!r} is not among metrics; add it to metrics or pick one "
                "of them"
            )
        if self.features is not None and not self.features:
            raise ValueError("features: is empty; list columns or use null for all but the target")
        ordered = {"group_kfold", "time_series"} & {self.outer.method, self.inner.method}
        if self.train_fraction < 1 and ordered:
            raise ValueError(
                "train_fraction: subsampling draws rows at random, which would break the groups "
                f"or time order of {sorted(ordered)[0]}; use kfold or stratified_kfold"
            )
        if self.search.strategy == "halving" and self.interval.method == "nested":
            raise ValueError(
                "interval: the nested interval reruns the full-grid search, not halving; use "
                "the quick interval with the halving strategy"
            )
        return self

    @property
    def recipe(self) -> Recipe | None:
        """The declared preprocessing recipe, or None for "auto" and "none"."""
        return self.preprocess if isinstance(self.preprocess, Recipe) else None

    @property
    def pick_metric(self) -> str:
        """The metric that picks candidates: `pick_by`, else the first metric."""
        return self.pick_by or self.metrics[0]
