"""Summaries of a list of fold scores: mean, std (ddof=1), standard error, the values."""

from __future__ import annotations

from typing import Any

import numpy as np


def describe_values(values: list[float]) -> dict[str, Any]:
    """Mean, std (ddof=1), standard error and the values themselves."""
    arr = np.asarray(values, dtype="float64")
    std = float(arr.std(ddof=1)) if len(arr) > 1 else 0.0
    return {
        "mean": float(arr.mean()),
        "std": std,
        "se": std / float(np.sqrt(len(arr))),
        "values": [float(v) for v in arr],
    }
