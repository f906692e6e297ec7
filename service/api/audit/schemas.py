"""Response models of the audit and provenance routes (documented in OpenAPI)."""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel


class AuditPublic(BaseModel):
    """An audit: what was asked, its status and, once done, the comparison report."""

    id: str
    job_id: str
    status: Literal["queued", "running", "done", "failed"]
    fraction: float
    seed: int
    tolerance: float
    created_at: str | None
    finished_at: str | None
    # counts (identical, within_tolerance, differing, missing), versions_now, and one item per
    # recomputed score with the stored value, the recomputed one and the versions beside each
    report: dict[str, Any] | None


class Provenance(BaseModel):
    """A job's whole trail as the store holds it."""

    job: dict[str, Any]
    dataset: dict[str, Any]
    request: dict[str, Any]
    candidates: list[dict[str, Any]]
    folds: list[dict[str, Any]]
    units: list[dict[str, Any]]
    fold_scores: list[dict[str, Any]]  # grouped by computing job, worker and versions
    final_model: dict[str, Any] | None
    audits: list[dict[str, Any]]
