"""Did a refresh change anything: the final pick, the estimate beyond its noise, the threshold.

Two tests, chosen by what the two jobs share:
- the same outer folds (equal fold fingerprints, in order): the corrected resampled t-test of
  Nadeau & Bengio (2003) on the per-fold differences, t = d̄ / sqrt((1/J + n_test/n_train)·s²),
  df = J - 1; the correction accounts for training sets that overlap between folds;
- otherwise (other rows, other folds): Welch's unequal-variance t-test on the two sets of outer
  fold values (Welch 1947).
Both two-sided; "moved" means p < ALPHA.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

from scipy import stats

from service.cv import intervals

ALPHA = 0.05
PAIRED_TEST = "nadeau_bengio_corrected_t"
UNPAIRED_TEST = "welch_t"


def corrected_t(
    differences: Sequence[float], n_train: float, n_test: float
) -> tuple[float, int, float]:
    """Nadeau & Bengio's corrected resampled t: (t, df, two-sided p).

    The arithmetic is service.cv.intervals.corrected_t's (one formula for the estimate's
    interval, /v1/compare and refreshes); NaN when there are fewer than two folds.
    """
    if len(differences) < 2:
        return math.nan, 0, math.nan
    found = intervals.corrected_t(differences, n_test / n_train, 0.9)  # level: not used for t
    t, p = found.against_zero()
    return t, found.df, p


def welch_t(new: Sequence[float], old: Sequence[float]) -> tuple[float, float, float]:
    """Welch's t-test of mean(new) - mean(old): (t, Welch-Satterthwaite df, two-sided p)."""
    n1, n2 = len(new), len(old)
    if n1 < 2 or n2 < 2:
        return math.nan, math.nan, math.nan
    m1, m2 = sum(new) / n1, sum(old) / n2
    v1 = sum((x - m1) ** 2 for x in new) / (n1 - 1)
    v2 = sum((x - m2) ** 2 for x in old) / (n2 - 1)
    se2 = v1 / n1 + v2 / n2
    if se2 == 0:
        return (
            (0.0 if m1 == m2 else math.copysign(math.inf, m1 - m2)),
            math.nan,
            (1.0 if m1 == m2 else 0.0),
        )
    t = (m1 - m2) / math.sqrt(se2)
    df = se2**2 / ((v1 / n1) ** 2 / (n1 - 1) + (v2 / n2) ** 2 / (n2 - 1))
    return t, df, float(2 * stats.t.sf(abs(t), df))


def judged_value(
    result: dict[str, Any], metric: str, mean: float, degraded_on: str
) -> tuple[str, float]:
    """What is held against the threshold: ("estimate", mean) or ("interval_upper", bound).

    Every metric here is a score where higher is better (scikit-learn's convention: a loss
    such as the squared error is reported negated, neg_mean_squared_error). The interval's
    bound on the better side is therefore always its upper bound; for a negated loss that is
    minus the loss's lower bound, the smallest loss the interval allows. So `degraded` on the
    interval fires only when even the most favourable reading is below the threshold. A job
    whose estimate carries no interval (a time-ordered split, an unserved metric) is judged on
    its estimate, and `judged_on` says so.
    """
    if degraded_on != "interval":
        return "estimate", mean
    interval = (result.get("estimate", {}).get(metric) or {}).get("interval")
    if not interval:
        return "estimate", mean
    return "interval_upper", float(interval["upper"])


def _finite(value: float) -> float | None:
    # JSON columns refuse NaN and infinity (docs/store.md): an undefined statistic is null
    return value if math.isfinite(value) else None


def compare_results(
    new: dict[str, Any],
    old: dict[str, Any] | None,
    *,
    new_folds: list[str],
    old_folds: list[str],
    threshold: float | None,
    degraded_on: str = "estimate",
) -> dict[str, Any]:
    """The comparison a refresh stores: pick change, estimate shift with its test, threshold."""
    metric = new["pick_by"]
    values = [float(f["scores"][metric]) for f in new["outer"]]
    mean = sum(values) / len(values)
    judged_on, judged = judged_value(new, metric, mean, degraded_on)
    out: dict[str, Any] = {
        "metric": metric,
        "pick": new["final_pick"]["candidate_key"],
        "mean": mean,
        "threshold": threshold,
        "degraded_on": degraded_on,
        "judged_on": judged_on,
        "judged_value": judged,
        "below_threshold": threshold is not None and judged < threshold,
    }
    if old is None or old.get("pick_by") != metric:
        out.update(previous=None, pick_changed=False, test=None, moved=False)
        return out
    old_values = [float(f["scores"][metric]) for f in old["outer"]]
    old_mean = sum(old_values) / len(old_values)
    out.update(
        previous_pick=old["final_pick"]["candidate_key"],
        previous_mean=old_mean,
        difference=mean - old_mean,
        pick_changed=new["final_pick"]["candidate_key"] != old["final_pick"]["candidate_key"],
    )
    if new_folds and new_folds == old_folds:
        n_train = sum(f["n_train"] for f in new["outer"]) / len(new["outer"])
        n_test = sum(f["n_test"] for f in new["outer"]) / len(new["outer"])
        diffs = [a - b for a, b in zip(values, old_values, strict=True)]
        t, df, p = corrected_t(diffs, n_train, n_test)
        out["test"] = PAIRED_TEST
        df_value: float = df
    else:
        t, df_value, p = welch_t(values, old_values)
        out["test"] = UNPAIRED_TEST
    out.update(statistic=_finite(t), df=_finite(df_value), p_value=_finite(p))
    out["moved"] = math.isfinite(p) and p < ALPHA
    return out


def refresh_status(comparison: dict[str, Any]) -> str:
    """degraded (below the threshold) before pick_changed before reselected."""
    if comparison["below_threshold"]:
        return "degraded"
    if comparison["pick_changed"]:
        return "pick_changed"
    return "reselected"
