"""What the dataset routes send and receive (the ORM rows stay in service.store.models)."""

from __future__ import annotations

from datetime import datetime

from pydantic import BaseModel, Field

from service.datasets.kinds import OVERRIDE_NOTE, ColumnKind
from service.datasets.sources import DatasetSource

# The body of POST /v1/datasets is the same source object a job request's `dataset` may hold.
DatasetCreate = DatasetSource


class ColumnPublic(BaseModel):
    """One column: its logical kind and how many values are missing and distinct."""

    name: str
    kind: ColumnKind
    missing: int
    distinct: int
    hint: str | None = Field(
        default=None,
        description="How a job request's `columns` could read this column otherwise, when a "
        "second reading is likely (dates written as text, whole-number codes).",
    )


class DatasetSummary(BaseModel):
    """A registered table, without its columns (what listings carry)."""

    content_hash: str = Field(description="sha256 of the table's canonical serialisation.")
    n_rows: int
    n_columns: int
    origin: dict[str, str] = Field(
        description="Where the caller's team's copy came from (its own file name or source)."
    )
    created_at: datetime = Field(description="When the caller's team registered the table.")


class DatasetPublic(DatasetSummary):
    """A registered table with its columns."""

    columns: list[ColumnPublic]
    column_types: str = Field(
        default=OVERRIDE_NOTE, description="How a job request overrides the inferred kinds."
    )


class DatasetList(BaseModel):
    """A page of the datasets the caller may see, and how many there are in all."""

    data: list[DatasetSummary]
    count: int
