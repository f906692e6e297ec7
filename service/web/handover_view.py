"""The job page's sections drawn from the out-of-fold predictions, with scikit-learn's metrics.

Pooled over every outer test prediction of the job (each row once per repeat): per-class
precision, recall and F1 with a confusion matrix (precision_recall_fscore_support,
confusion_matrix), a reliability diagram for a binary target whose picks give probabilities
(calibration_curve), and for regression predicted against actual and the residuals. The slices
of result v1 are shown as they are stored.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from sklearn.calibration import calibration_curve
from sklearn.metrics import confusion_matrix, precision_recall_fscore_support
from sqlalchemy.orm import Session

from service.config import Settings
from service.cv.slices import OuterPredictions
from service.jobs.execution.plans import PlanMismatch, plan_for_job
from service.jobs.handover.outer_predictions import NotReady, all_outer
from service.store.host_cache import CopyRefused
from service.store.models import Job
from service.store.statuses import JobStatus
from service.web.handover_svg import scatter

CALIBRATION_BINS = 10


def _labels(part: OuterPredictions) -> np.ndarray:
    classes = np.asarray(part.stored.classes, dtype=object)
    return classes[part.stored.arrays["predict"].astype(np.int64)]


def _classification(parts: list[OuterPredictions], y: np.ndarray) -> dict[str, Any]:
    classes = np.unique(y).tolist()
    predicted = np.concatenate([_labels(p) for p in parts]).astype(y.dtype)
    precision, recall, f1, support = precision_recall_fscore_support(
        y, predicted, labels=classes, zero_division=0
    )
    rows = [
        {"label": str(c), "precision": p, "recall": r, "f1": f, "support": int(s)}
        for c, p, r, f, s in zip(classes, precision, recall, f1, support, strict=True)
    ]
    matrix = confusion_matrix(y, predicted, labels=classes).tolist()
    out: dict[str, Any] = {
        "task": "classification",
        "per_class": rows,
        "labels": [str(c) for c in classes],
        "matrix": matrix,
        "reliability": None,
    }
    with_proba = all("predict_proba" in p.stored.arrays for p in parts)
    if len(classes) == 2 and with_proba:
        positive = classes[-1]
        scores = np.concatenate(
            [
                p.stored.arrays["predict_proba"][:, list(p.stored.classes or []).index(positive)]
                for p in parts
            ]
        )
        observed, predicted_mean = calibration_curve(y == positive, scores, n_bins=CALIBRATION_BINS)
        bins = list(zip(predicted_mean.tolist(), observed.tolist(), strict=True))
        out["reliability"] = {
            "positive": str(positive),
            "bins": bins,
            "svg": scatter(
                bins,
                label=f"Reliability: share of {positive} among rows by predicted probability",
                x_title=f"mean predicted probability of {positive}",
                y_title=f"observed share of {positive}",
                kind="reliability-bin",
                diagonal=True,
                bounds=(0.0, 1.0),
            ),
        }
    return out


def _regression(parts: list[OuterPredictions], y: np.ndarray) -> dict[str, Any]:
    predicted = np.concatenate([p.stored.arrays["predict"] for p in parts])
    residuals = y - predicted
    return {
        "task": "regression",
        "n": len(y),
        "mean_residual": float(residuals.mean()),
        "mean_absolute_residual": float(np.abs(residuals).mean()),
        "scatter": scatter(
            list(zip(y.tolist(), predicted.tolist(), strict=True)),
            label="Predicted against actual, every outer test prediction",
            x_title="actual",
            y_title="predicted",
            kind="prediction",
            diagonal=True,
        ),
        "residuals": scatter(
            list(zip(predicted.tolist(), residuals.tolist(), strict=True)),
            label="Residual (actual minus predicted) against predicted",
            x_title="predicted",
            y_title="actual minus predicted",
            kind="residual",
            zero_line=True,
        ),
    }


def prediction_sections(session: Session, job: Job, settings: Settings) -> dict[str, Any] | None:
    """The page context of the prediction sections, or None for a job without a result."""
    if job.status != JobStatus.SUCCEEDED or job.kind != "selection" or not job.result:
        return None
    try:
        loaded = plan_for_job(session, job.id, settings)
        parts = all_outer(session, loaded, job.result)
    except (NotReady, PlanMismatch, FileNotFoundError, CopyRefused) as exc:
        return {"unavailable": str(exc)}
    y = np.concatenate([loaded.plan.y[p.rows] for p in parts])
    section = (
        _classification(parts, y)
        if loaded.plan.spec.task == "classification"
        else _regression(parts, y)
    )
    section["n_predictions"] = len(y)
    section["repeats"] = len({p.repeat for p in parts})
    section["slices"] = job.result.get("slices") or []
    section["pick_by"] = job.result["pick_by"]
    return section
