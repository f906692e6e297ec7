"""Under null labels the nested estimate stays near chance; the non-nested best does not.

Varma & Simon 2006 (BMC Bioinformatics 7:91): with labels independent of the features, the best
inner score of a non-nested search is optimistic while nested cross-validation is not [V,
abstract]. The design is docs/references.md's fast one: 40 rows x 1000 Gaussian features, balanced
random labels, kNN with k in {1, 3, ..., 15}, 5-fold stratified inner and outer loops; with 20
seeds it gives a mean non-nested best of about 0.59 and a mean nested estimate of about 0.51
[V, rerun]. Fewer seeds are run here to keep the file near a minute (a fit on a 1000-column
frame costs tens of milliseconds, mostly scikit-learn's per-column dtype checks).
"""

from __future__ import annotations

from functools import cache

import numpy as np

from .null_labels import knn_request, null_frame
from .runs import run_engine

SEEDS = range(8)
N_NEIGHBORS = list(range(1, 16, 2))


@cache
def summaries() -> dict[str, np.ndarray]:
    """Per seed: nested estimate, non-nested best (final pick's inner mean) and their gap."""
    rows = []
    for seed in SEEDS:
        result = run_engine(knn_request(N_NEIGHBORS, seed), null_frame(seed)).result
        rows.append(
            (
                result["estimate"]["accuracy"]["mean"],
                result["final_pick"]["inner_mean"],
                result["optimism_gap"],
            )
        )
    nested, non_nested, gap = np.array(rows).T
    return {"nested": nested, "non_nested": non_nested, "gap": gap}


def test_nested_estimate_stays_near_chance() -> None:
    nested = summaries()["nested"]
    # Varma & Simon 2006: nested CV is unbiased under the null, chance is 0.5 with balanced
    # labels; docs/references.md reports about 0.51 over 20 seeds. The band allows the spread of a
    # 8-seed mean (per-seed std near 0.08 on 8-row test folds). Single seeds may fall below
    # 0.5, so no per-seed bound is asserted (docs/references.md).
    assert 0.35 < nested.mean() < 0.65


def test_optimism_gap_is_clearly_positive() -> None:
    # Varma & Simon 2006: the tuned non-nested score overstates accuracy under the null;
    # docs/references.md's design puts the gap near 0.59 - 0.51 = 0.08 [V, rerun]
    assert summaries()["gap"].mean() > 0.03


def test_non_nested_best_sits_above_chance() -> None:
    non_nested = summaries()["non_nested"]
    # Varma & Simon 2006: the best of several candidates' CV scores is biased upward even when
    # there is nothing to learn; docs/references.md: about 0.59 [V, rerun]
    assert non_nested.mean() > 0.53
    assert non_nested.mean() > summaries()["nested"].mean()


def test_gap_is_the_non_nested_best_minus_the_nested_estimate() -> None:
    # README.md (Result v1) defines the optimism gap: final pick inner mean minus outer mean
    s = summaries()
    np.testing.assert_allclose(s["gap"], s["non_nested"] - s["nested"], rtol=0, atol=1e-12)
