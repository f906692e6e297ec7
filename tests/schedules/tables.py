"""A small invented classification table a schedule's source file holds, and its job template."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

TEMPLATE: dict[str, Any] = {
    "target": "failed",
    "features": None,
    "task": "classification",
    "families": [
        {"estimator": "LogisticRegression", "fixed": {"max_iter": 500}, "grid": {"C": [0.01, 1.0]}}
    ],
    "preprocess": "auto",
    "outer": {"method": "stratified_kfold", "k": 3, "seed": 0},
    "inner": {"method": "stratified_kfold", "k": 3, "seed": 1},
    "metrics": ["accuracy"],
    "pick_by": "accuracy",
}


def write_table(path: Path, *, seed: int, rows: int = 150) -> None:
    """Same labels whatever the seed (so the folds stay the same), features drawn with `seed`."""
    labels = np.random.default_rng(0).integers(0, 2, rows)
    rng = np.random.default_rng(seed)
    signal = labels * 1.5 + rng.normal(size=rows)
    frame = pd.DataFrame({"pressure": signal, "vibration": rng.normal(size=rows), "failed": labels})
    frame.to_csv(path, index=False)
