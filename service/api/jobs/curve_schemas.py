"""What a learning curve's parent job carries as its result (service.jobs.curves builds it)."""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, Field


class _Open(BaseModel):
    model_config = ConfigDict(extra="allow")


class Spread(_Open):
    """Mean, std (ddof=1), standard error and the per-outer-fold values."""

    mean: float
    std: float
    se: float
    values: list[float]
    interval: dict[str, Any] | None = Field(
        default=None,
        description="The size's interval, as estimate[metric].interval in result v1; on the "
        "error, its bounds mapped by error_formula (null when the size's job had none).",
    )


class CurvePoint(_Open):
    """One training-set size: its selection job and the nested estimate at that size."""

    size: float = Field(description="Share of each outer training part the selection used.")
    job_id: str
    n_train_mean: float = Field(description="Mean rows fitted on per outer fold.")
    n_test_mean: float
    estimate: Spread = Field(description="The pick_by estimate over the outer folds.")
    error: Spread = Field(description="The estimate as an error, by error_formula.")


class CurveResult(_Open):
    """A learning curve: estimated error against training-set size, same outer test folds."""

    kind: Literal["learning_curve"]
    dataset_hash: str
    task: str
    n_rows: int
    pick_by: str
    error_formula: str = Field(description="'1 - <metric>', or '-<metric>' for neg_* metrics.")
    points: list[CurvePoint] = Field(description="Smallest size first.")
    jobs: list[str] = Field(description="The selection jobs, smallest size first.")
