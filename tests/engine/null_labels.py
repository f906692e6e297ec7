"""Tables whose labels are independent of the features, for the selection-bias tests.

Varma & Simon 2006 (BMC Bioinformatics 7:91) use such data to show that a tuned classifier's
non-nested cross-validated score is optimistic while the nested estimate stays at chance. The
features are drawn with a seeded numpy generator: that is the published design, not invented
reference data.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd


def null_frame(seed: int, *, rows: int = 40, features: int = 1000) -> pd.DataFrame:
    """`rows` x `features` standard Gaussian features and balanced labels drawn independently."""
    rng = np.random.default_rng(seed)
    X = rng.standard_normal((rows, features))
    labels = rng.permutation(np.repeat([0, 1], rows // 2))
    frame = pd.DataFrame(X, columns=[f"x{i}" for i in range(features)])
    frame["target"] = labels
    return frame


def knn_request(n_neighbors: list[int], seed: int, *, outer_k: int = 5, inner_k: int = 5) -> dict:
    """A kNN search over `n_neighbors`, stratified outer and inner loops seeded from `seed`."""
    family: dict[str, Any] = {
        "estimator": "KNeighborsClassifier",
        "grid": {"n_neighbors": n_neighbors},
    }
    return {
        "dataset": {"sample": "null"},  # unused: the frame is passed to the engine directly
        "target": "target",
        "task": "classification",
        "families": [family],
        "preprocess": "none",
        "outer": {"method": "stratified_kfold", "k": outer_k, "seed": seed},
        "inner": {"method": "stratified_kfold", "k": inner_k, "seed": seed + 1},
        "metrics": ["accuracy"],
    }
