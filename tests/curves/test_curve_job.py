"""A learning curve run end to end in the embedded default (SQLite store, the real units)."""

from __future__ import annotations

import itertools
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from scipy import stats
from sqlalchemy import select

from service.config import load_settings
from service.cv.plan import build_plan
from service.cv.spec import SelectionSpec
from service.cv.subsample import kept_count
from service.datasets.sources import DatasetSource, load_table
from service.jobs.execution.reconcile import reconcile
from service.jobs.local.driver import JobFailed, run_embedded
from service.store.db import make_engine, make_session_factory
from service.store.models import Job, WorkUnit

from .requests import SIZES, curve, selection


def _settings(home: Path) -> Any:
    return load_settings({"FOLDWISE_HOME": str(home)})


def _jobs(settings: Any) -> list[Job]:
    engine = make_engine(settings.database_url)
    try:
        with make_session_factory(engine)() as session:
            jobs = list(session.scalars(select(Job)))
            session.expunge_all()
            return jobs
    finally:
        engine.dispose()


@pytest.fixture(scope="module")
def finished(tmp_path_factory: pytest.TempPathFactory) -> tuple[Any, dict[str, Any], Any]:
    settings = _settings(tmp_path_factory.mktemp("curve"))
    outcome = run_embedded(curve(), settings=settings, workers=2)
    return settings, outcome.result, outcome.job_id


def test_parent_and_one_selection_per_size_are_stored(finished: Any) -> None:
    settings, result, parent_id = finished
    jobs = {j.id: j for j in _jobs(settings)}
    parent = jobs[parent_id]
    assert (parent.kind, parent.status, parent.parent_id) == ("learning_curve", "succeeded", None)
    children = [j for j in jobs.values() if j.parent_id == parent_id]
    assert sorted(j.request["train_fraction"] for j in children) == SIZES
    assert all(j.kind == "selection" and j.status == "succeeded" for j in children)
    assert result["jobs"] == [p["job_id"] for p in result["points"]]
    assert {p["job_id"] for p in result["points"]} == {j.id for j in children}
    assert parent.units_done == parent.units_total == sum(j.units_total for j in children)


def test_one_point_per_size_with_the_plans_training_sizes(finished: Any) -> None:
    _, result, _ = finished
    assert [p["size"] for p in result["points"]] == SIZES
    table = load_table(DatasetSource(sample="breast_cancer"), base_dir=Path.cwd())
    frame, kinds = table.frame, dict(table.kinds)
    spec = SelectionSpec.model_validate({k: v for k, v in selection().items() if k != "dataset"})
    plan = build_plan(spec, frame, kinds)
    for point in result["points"]:
        # each class of each outer training part keeps round-half-up(size x its rows)
        expected = [
            sum(kept_count(point["size"], int(np.sum(plan.y[f.train] == c))) for c in (0, 1))
            for f in plan.outer
        ]
        assert point["n_train_mean"] == pytest.approx(np.mean(expected))
        assert point["n_test_mean"] == pytest.approx(np.mean([len(f.test) for f in plan.outer]))


def test_error_is_one_minus_accuracy_and_does_not_rise_with_more_data(finished: Any) -> None:
    _, result, _ = finished
    assert (result["pick_by"], result["error_formula"]) == ("accuracy", "1 - accuracy")
    errors: list[float] = []
    for point in result["points"]:
        values = point["estimate"]["values"]
        assert point["error"]["values"] == pytest.approx([1 - v for v in values])
        assert point["error"]["std"] == pytest.approx(point["estimate"]["std"])
        errors.append(point["error"]["mean"])
    # Common practice (no single source): held-out error of a reasonable learner does not grow
    # with the training set, up to noise. Tolerances allow for 3 folds of about 190 test rows
    # (one row is 0.5 % of a fold).
    assert errors[-1] <= errors[0] + 0.01, errors
    assert all(b <= a + 0.02 for a, b in itertools.pairwise(errors)), errors
    # and on this table more data does help the linear model: about 0.98 accuracy at 100 %
    # (docs/references.md, a loose sanity range of 0.93-0.99 for breast cancer)
    assert 0.01 <= errors[-1] <= 0.07, errors


def test_each_point_carries_its_interval_on_the_score_and_on_the_error(finished: Any) -> None:
    """Every size: the quick interval by hand, and the error's bounds mapped by 1 - score.

    Source: Nadeau & Bengio (2003), Machine Learning 52:239-281, corrected resampled t:
    se = sqrt((1/J + n_test/n_train) * s^2), df = J - 1, mean -/+ t_{df}(0.95) * se at level 0.9,
    n_test/n_train from the size's own (subsampled) folds; accuracy bounds cut to [0, 1].
    """
    settings, result, _ = finished
    children = {j.id: j for j in _jobs(settings)}
    for point in result["points"]:
        child = children[point["job_id"]].result
        assert child is not None
        outer = child["outer"]
        values = np.array(point["estimate"]["values"])
        ratio = sum(r["n_test"] for r in outer) / sum(r["n_train"] for r in outer)
        se = np.sqrt((1 / len(values) + ratio) * values.var(ddof=1))
        half = stats.t.ppf(0.95, len(values) - 1) * se
        score = point["estimate"]["interval"]
        assert score == child["estimate"]["accuracy"]["interval"]
        assert (score["method"], score["level"], score["df"]) == ("quick", 0.9, len(values) - 1)
        assert score["se"] == pytest.approx(se)
        assert score["lower"] == pytest.approx(max(0.0, values.mean() - half))
        assert score["upper"] == pytest.approx(min(1.0, values.mean() + half))
        error = point["error"]["interval"]
        assert error["lower"] == pytest.approx(1 - score["upper"])
        assert error["upper"] == pytest.approx(1 - score["lower"])
        assert error["lower"] <= point["error"]["mean"] <= error["upper"]
        assert (error["method"], error["level"], error["se"]) == ("quick", 0.9, score["se"])


def test_the_full_size_child_equals_an_ordinary_selection(finished: Any, tmp_path: Path) -> None:
    _, result, _ = finished
    full = next(p for p in result["points"] if p["size"] == 1.0)
    settings, _, _ = finished
    child = next(j for j in _jobs(settings) if j.id == full["job_id"])
    # a separate store, so nothing of the curve can be reused by the ordinary job
    ordinary = run_embedded(selection(), settings=_settings(tmp_path / "plain")).result
    assert child.result is not None
    for a, b in zip(child.result["outer"], ordinary["outer"], strict=True):
        assert (a["n_train"], a["n_test"], a["pick"]) == (b["n_train"], b["n_test"], b["pick"])
        assert a["scores"] == pytest.approx(b["scores"], abs=1e-12)
    assert child.result["final_pick"]["candidate_key"] == ordinary["final_pick"]["candidate_key"]
    assert full["estimate"]["values"] == pytest.approx(ordinary["estimate"]["accuracy"]["values"])


def test_a_failed_size_fails_the_curve(tmp_path: Path) -> None:
    settings = _settings(tmp_path)
    # an invalid value that only the fit can find: lbfgs cannot fit an l1 penalty
    body = curve(sizes=[0.5, 1.0])
    body["families"] = [{"estimator": "LogisticRegression", "fixed": {"l1_ratio": 1.0}}]
    with pytest.raises(JobFailed, match=r"size 0\.5"):
        run_embedded(body, settings=settings)
    jobs = _jobs(settings)
    parent = next(j for j in jobs if j.kind == "learning_curve")
    assert parent.status == "failed" and parent.result is None
    assert {j.status for j in jobs if j.parent_id == parent.id} == {"failed", "cancelled"}
    engine = make_engine(settings.database_url)
    with make_session_factory(engine)() as session:
        statuses = set(session.scalars(select(WorkUnit.status)))
    engine.dispose()
    assert "queued" not in statuses


def test_the_reconciler_settles_a_curve_whose_sizes_ended_unnoticed(tmp_path: Path) -> None:
    settings = _settings(tmp_path)
    outcome = run_embedded(curve(sizes=[0.5, 1.0]), settings=settings)
    engine = make_engine(settings.database_url)
    sessions = make_session_factory(engine)
    try:
        # as if the process that finished the last size died before settling the curve
        with sessions.begin() as session:
            parent = session.get_one(Job, outcome.job_id)
            parent.status, parent.stage, parent.result = "running", "aggregating", None
        reconcile(sessions, settings)
        with sessions() as session:
            parent = session.get_one(Job, outcome.job_id)
            assert parent.status == "succeeded" and parent.result == outcome.result
        # and a size that failed unnoticed (the reconciler gave up on it) fails the curve
        with sessions.begin() as session:
            parent = session.get_one(Job, outcome.job_id)
            parent.status, parent.result = "running", None
            child = session.get_one(Job, outcome.result["jobs"][0])
            child.status, child.error = "failed", "unit 1 (inner r0f0): gave up"
        reconcile(sessions, settings)
        with sessions() as session:
            parent = session.get_one(Job, outcome.job_id)
            assert parent.status == "failed" and parent.result is None
            assert parent.error is not None and "size 0.5" in parent.error
    finally:
        engine.dispose()
