"""Under null labels the nested estimate stays near chance; the non-nested best does not.

Varma & Simon 2006 (BMC Bioinformatics 7:91): with labels independent of the features, the best
inner score of a non-nested search is optimistic while nested cross-validation is not [V,
abstract]. This is the study at a size the suite can afford (tests/engine/null_labels.py's
`small_study`: 40 rows x 20 Gaussian features, balanced random labels, kNN with k in {1, 3, ...,
15}, 3-fold stratified outer and inner loops, seeds 0-7; about 100 fits a seed). The full size,
docs/references.md's design with 1000 features, 5-fold loops and 20 seeds, each seed checked
against scikit-learn, is tests/benchmarks/bench_null_labels.py; it also asserts that the gap is
clearly (three standard errors) above zero, which eight seeds cannot show.

Where the numbers come from: the same small design rerun on seeds 100-139, apart from the seeds
asserted here (2026-12-04, [rerun]), gave per seed a nested mean 0.471 (std 0.082), a non-nested
best 0.551 (std 0.060) and a gap 0.080 (std 0.074), so an 8-seed mean has a standard error near
0.029, 0.021 and 0.026; seeds 0-7 give 0.554, 0.583 and 0.030. A gap of 0.030 sits one standard
error above zero: at this size the statistics check the direction of the claim, and the
agreement with scikit-learn's own nested and non-nested search below, seed by seed, is what
catches an engine whose nested estimate sees its outer test rows.
"""

from __future__ import annotations

import numpy as np
from sklearn.model_selection import GridSearchCV, StratifiedKFold, cross_val_score
from sklearn.neighbors import KNeighborsClassifier

from .null_labels import SMALL_FEATURES, SMALL_FOLDS, SMALL_SEEDS, null_frame, small_study

EIGHT_CANDIDATES = tuple(range(1, 16, 2))
TOLERANCE = 1e-9


def test_nested_estimate_stays_near_chance() -> None:
    nested = small_study(EIGHT_CANDIDATES)["nested"]
    # Varma & Simon 2006: nested CV is unbiased under the null; chance is 0.5 with balanced
    # labels. The band is 0.5 +- 0.1, about three standard errors of an 8-seed mean (0.029,
    # rerun above; three standard errors is common practice, not a published value). Single
    # seeds may fall below 0.5, so no per-seed bound is asserted (docs/references.md).
    assert 0.4 < nested.mean() < 0.6


def test_non_nested_best_sits_above_chance() -> None:
    s = small_study(EIGHT_CANDIDATES)
    # Varma & Simon 2006: the best of several candidates' CV scores is biased upward even when
    # there is nothing to learn, and the truth under the null is 0.5; the rerun above gives 0.551
    # for this design (docs/references.md: about 0.59 for the full one [V, rerun]); 0.52 is 1.5
    # standard errors (0.021) below 0.551 and 1 above chance
    assert s["non_nested"].mean() > 0.52
    # ... and above the nested estimate on average: a positive mean optimism gap
    assert s["non_nested"].mean() > s["nested"].mean()


def test_both_estimates_equal_scikit_learns_nested_and_non_nested_search() -> None:
    # scikit-learn as the reference implementation, from scikit-learn alone on the same splits:
    # GridSearchCV inside cross_val_score for the nested estimate, the same GridSearchCV on all
    # rows for the non-nested best (best_score_). Equal to 1e-9 on every seed means the engine
    # runs the procedure Varma & Simon 2006 show unbiased, not one that lets the outer test rows
    # into the choice.
    s = small_study(EIGHT_CANDIDATES)
    for position, seed in enumerate(SMALL_SEEDS):
        frame = null_frame(seed, features=SMALL_FEATURES)
        X, y = frame.drop(columns="target").to_numpy(), frame["target"].to_numpy()
        search = GridSearchCV(
            KNeighborsClassifier(),
            {"n_neighbors": list(EIGHT_CANDIDATES)},
            cv=StratifiedKFold(SMALL_FOLDS, shuffle=True, random_state=seed + 1),
            scoring="accuracy",
        )
        outer = StratifiedKFold(SMALL_FOLDS, shuffle=True, random_state=seed)
        nested = cross_val_score(search, X, y, cv=outer, scoring="accuracy").mean()
        assert abs(s["nested"][position] - nested) <= TOLERANCE, seed
        assert abs(s["non_nested"][position] - search.fit(X, y).best_score_) <= TOLERANCE, seed


def test_gap_is_the_non_nested_best_minus_the_nested_estimate() -> None:
    # README.md (Result v1) defines the optimism gap: final pick inner mean minus outer mean
    s = small_study(EIGHT_CANDIDATES)
    assert len(s["gap"]) == len(SMALL_SEEDS)
    np.testing.assert_allclose(s["gap"], s["non_nested"] - s["nested"], rtol=0, atol=1e-12)
