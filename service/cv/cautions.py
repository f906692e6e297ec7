"""Cautions a report carries: what the estimate does and does not say about new data."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from service.cv.plan import SelectionPlan

ALWAYS = (
    "A cross-validated estimate describes data like the data it was computed on; it says "
    "nothing about rows drawn from a different population, place or time.",
    "The standard deviation and standard error across outer folds are descriptive: k-fold "
    "cross-validation has no unbiased variance estimator (Bengio & Grandvalet 2004), so do not "
    "read them as a confidence interval; each estimate's `interval` is the one to quote, with its "
    "method named beside it.",
)
# The banner about people is raised only by what the requester declares (request field
# `context`); a column name is a guess, so it only ever produces the soft, specific line below.
# Following common practice for documenting a model's intended use and checking its errors per
# group (Mitchell et al. 2019, "Model Cards for Model Reporting").
PEOPLE_PREFIX = "Declared use: this model decides about people"
PEOPLE_HINT_PREFIX = "Columns that may describe people:"


def people_caution(domain: str | None) -> str:
    """The caution for a request that declares its model decides about people."""
    where = f" ({domain})" if domain else ""
    return (
        f"{PEOPLE_PREFIX}{where}. Defer to domain review and the rules that apply before using "
        "it, and check its errors across groups (error, false positive and false negative rates "
        "per group), which a single estimate does not show."
    )


# a name that is a time stamp, not a duration such as age_years or months_since_service
_TIME_WORDS = re.compile(
    r"(^|_)(date|timestamp|datetime)($|_)|_(at|on|time)$|^(time|year|month|week|day|period)$"
)
_GROUP_WORDS = re.compile(r"(^|_)(id|site|patient|customer|user|subject|store|household)($|_)")
# column names that often hold personal attributes; only ever a hint (see PEOPLE_PREFIX)
_PEOPLE_WORDS = re.compile(
    r"(^|_)(sex|gender|race|ethnicity|ethnic|religion|religious|marital|married|disability|"
    r"nationality|income|salary|applicant|employee|birth|dob|pregnant|pregnancy)($|_)"
)


def _tokens(name: str) -> str:
    return re.sub(r"[^a-z0-9]+", "_", name.lower())


def _tiny_classes(plan: SelectionPlan) -> list[str]:
    if plan.spec.task != "classification":
        return []
    outer_k, inner_k = plan.spec.outer.k, plan.spec.inner.k
    labels, counts = np.unique(plan.y, return_counts=True)
    out = []
    for label, count in zip(labels, counts, strict=True):
        # rows of this class expected in one inner test fold
        per_fold = count * (outer_k - 1) / outer_k / inner_k
        if per_fold < 2:
            out.append(
                f"Class {label!r} has only {count} rows, about {per_fold:.1f} per inner test "
                "fold: scores involving it are noisy and some folds may not contain it."
            )
    return out


def _duplicates_across_folds(plan: SelectionPlan) -> list[str]:
    hashes = pd.util.hash_pandas_object(plan.table.X, index=False).to_numpy()
    leaked = 0
    for fold in plan.outer:
        leaked += int(np.isin(hashes[fold.test], hashes[fold.train]).sum())
    if not leaked:
        return []
    return [
        f"{leaked} outer test rows (summed over folds) have an exact duplicate of their feature "
        "values in the training part; if they are the same entity recorded twice, the estimate "
        "is optimistic: remove duplicates or split by group."
    ]


def _time_and_groups(plan: SelectionPlan, frame: pd.DataFrame, kinds: dict[str, str]) -> list[str]:
    spec = plan.spec
    out = []
    shuffled = spec.outer.method != "time_series"
    for name in frame.columns:
        tokens = _tokens(str(name))
        if name == spec.target:
            continue
        if shuffled and (kinds.get(str(name)) == "datetime" or _TIME_WORDS.search(tokens)):
            out.append(
                f"Column {name!r} looks like time but the outer split ignores time order: if "
                "the model will predict the future, the estimate is optimistic; use "
                f"time_series with order_by {name!r}."
            )
        grouped = spec.outer.method == "group_kfold"
        if not grouped and _GROUP_WORDS.search(tokens) and frame[name].duplicated().any():
            out.append(
                f"Rows sharing a value of {name!r} land on both sides of outer folds; if rows "
                f"of one {name} are alike, the estimate is optimistic: use group_kfold with "
                f"groups {name!r}."
            )
    return out


def _time_order(plan: SelectionPlan) -> list[str]:
    """An outer split in time order with an inner split that is not, and tied time stamps."""
    spec, out = plan.spec, []
    if spec.outer.method == "time_series" and spec.inner.method != "time_series":
        shuffled = "shuffles rows" if spec.inner.seed is not None else "ignores time order"
        out.append(
            f"The outer split follows time but the inner {spec.inner.method} split {shuffled}: "
            "candidates are picked on folds that train on later rows than they test on, which "
            "favours candidates that exploit the future; use time_series for the inner split "
            "too."
        )
    order = plan.split_inputs.order
    if order is None:
        return out
    column = spec.outer.order_by or spec.inner.order_by
    straddling = 0
    folds = list(plan.outer) if spec.outer.method == "time_series" else []
    if spec.inner.method == "time_series":
        folds += [f for group in plan.inner.values() for f in group]
    for fold in folds:
        if len(fold.train) and len(fold.test):
            # time_series folds train on the past: a tie is the latest training stamp reappearing
            straddling += int(order[fold.train].max() >= order[fold.test].min())
    if straddling:
        out.append(
            f"Rows with equal {column!r} values fall on both sides of {straddling} time-split "
            "boundaries (training and test rows from the same moment): if such rows are "
            "alike, those folds test on the present rather than the future; aggregate rows per "
            "time stamp or order by a finer column."
        )
    return out


def find_cautions(plan: SelectionPlan, frame: pd.DataFrame, kinds: dict[str, str]) -> list[str]:
    """Every caution that applies to this plan and table, the general ones first."""
    cautions = list(ALWAYS)
    cautions += _tiny_classes(plan)
    cautions += _duplicates_across_folds(plan)
    cautions += _time_and_groups(plan, frame, kinds)
    cautions += _time_order(plan)
    cautions += _people(plan, frame)
    return cautions


def _people(plan: SelectionPlan, frame: pd.DataFrame) -> list[str]:
    context = plan.spec.context
    if context is not None and context.decides_about_people:
        return [people_caution(context.domain)]
    named = [str(c) for c in frame.columns if _PEOPLE_WORDS.search(_tokens(str(c)))]
    if not named:
        return []
    return [
        f"{PEOPLE_HINT_PREFIX} {', '.join(named)}. If this model's decisions affect people, "
        "declare it in the request (context.decides_about_people) and check its errors across "
        "groups."
    ]
