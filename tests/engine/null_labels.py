"""Tables whose labels are independent of the features, for the selection-bias tests.

Varma & Simon 2006 (BMC Bioinformatics 7:91) use such data to show that a tuned classifier's
non-nested cross-validated score is optimistic while the nested estimate stays at chance. The
features are drawn with a seeded numpy generator: that is the published design, not invented
reference data.

`small_study` is the in-suite size of the study, shared by tests/engine/test_null_labels.py and
tests/engine/test_optimism_grows_with_search.py (cached, so a run of both fits it once); the full
size is tests/benchmarks/bench_null_labels.py.
"""

from __future__ import annotations

from functools import cache
from typing import Any

import numpy as np
import pandas as pd

from .runs import run_engine

# The in-suite design: 40 rows as in docs/references.md's fast design, but 20 features instead of
# 1000 (under the null the feature count does not move chance; a fit on a 1000-column frame costs
# about four times as much) and 3-fold outer and inner loops instead of 5 (100 fits a seed for
# eight candidates instead of 246). Inner training parts keep about 17 rows, enough for k = 15.
SMALL_SEEDS = range(8)
SMALL_FEATURES = 20
SMALL_FOLDS = 3


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


@cache
def small_study(n_neighbors: tuple[int, ...]) -> dict[str, np.ndarray]:
    """Per seed of SMALL_SEEDS, for a kNN search over `n_neighbors` at the in-suite size: the
    nested estimate, the non-nested best (the final pick's inner mean) and the optimism gap."""
    rows = []
    for seed in SMALL_SEEDS:
        request = knn_request(list(n_neighbors), seed, outer_k=SMALL_FOLDS, inner_k=SMALL_FOLDS)
        result = run_engine(request, null_frame(seed, features=SMALL_FEATURES)).result
        rows.append(
            (
                result["estimate"]["accuracy"]["mean"],
                result["final_pick"]["inner_mean"],
                result["optimism_gap"],
            )
        )
    nested, non_nested, gap = np.array(rows).T
    return {"nested": nested, "non_nested": non_nested, "gap": gap}
