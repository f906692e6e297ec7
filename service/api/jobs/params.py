"""Path and query parameters that several job-related routers declare alike."""

from __future__ import annotations

from typing import Annotated

from fastapi import Path, Query

JobId = Annotated[str, Path(max_length=64, description="The job's id.")]
AllMetrics = Annotated[
    bool,
    Query(
        description="Also list metrics that other jobs stored on these folds and candidates; "
        "by default only the metrics this job asked for."
    ),
]
