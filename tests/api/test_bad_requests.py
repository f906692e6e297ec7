"""Bad job requests over HTTP: a problem naming the field, for every field, and nothing stored."""

from __future__ import annotations

import copy
import re
from collections.abc import Callable
from datetime import date, timedelta
from pathlib import Path
from typing import Any

import pytest

from .server import IRIS_REQUEST, Server

Edit = Callable[[dict[str, Any]], Any]


def _set(path: str, value: Any) -> Edit:
    """An edit that sets a dotted path (list indices as numbers) of the base request."""

    def edit(request: dict[str, Any]) -> dict[str, Any]:
        *parents, last = path.split(".")
        node: Any = request
        for part in parents:
            node = node[int(part)] if part.isdigit() else node[part]
        node[int(last) if last.isdigit() else last] = value
        return request

    return edit


def _drop(key: str) -> Edit:
    def edit(request: dict[str, Any]) -> dict[str, Any]:
        del request[key]
        return request

    return edit


FAMILY = "families.0"
CASES: list[tuple[str, Edit, str]] = [
    # dataset
    ("dataset missing", _drop("dataset"), "dataset"),
    ("dataset not a source", _set("dataset", 42), "dataset"),
    ("dataset unknown sample", _set("dataset", {"sample": "titanic"}), "dataset.sample"),
    ("dataset two sources", _set("dataset", {"sample": "iris", "path": "a.csv"}), "dataset"),
    ("dataset unknown hash", _set("dataset", "ab" * 32), "dataset"),
    ("dataset path outside roots", _set("dataset", {"path": "/etc/passwd"}), "dataset.path"),
    ("dataset path climbing out", _set("dataset", {"path": "../../x.csv"}), "dataset.path"),
    ("dataset path missing file", _set("dataset", {"path": "absent.csv"}), "dataset.path"),
    # target, features, task
    ("target missing", _drop("target"), "target"),
    ("target not a column", _set("target", "species"), "target"),
    ("features unknown column", _set("features", ["petal width (cm)", "wings"]), "features[1]"),
    ("features empty", _set("features", []), "features"),
    ("task unknown", _set("task", "clustering"), "task"),
    # families and each family field
    ("families empty", _set("families", []), "families"),
    ("families not a list", _set("families", {"estimator": "SVC"}), "families"),
    ("estimator unknown", _set(f"{FAMILY}.estimator", "DeepForest"), "families[0].estimator"),
    ("fixed bad value", _set(f"{FAMILY}.fixed", {"max_iter": -5}), "families[0].fixed.max_iter"),
    ("fixed unknown param", _set(f"{FAMILY}.fixed", {"colour": 1}), "families[0].fixed.colour"),
    ("grid bad value", _set(f"{FAMILY}.grid", {"C": [-1.0]}), "families[0].grid.C"),
    ("grid empty list", _set(f"{FAMILY}.grid", {"C": []}), "families[0].grid"),
    (
        "ranges reversed",
        _set(f"{FAMILY}.ranges", {"tol": {"low": 1.0, "high": 0.1}}),
        "families[0].ranges.tol.high",
    ),
    ("draws zero", _set(f"{FAMILY}.draws", 0), "families[0].draws"),
    ("draws without ranges", _set(f"{FAMILY}.draws", 3), "families[0].draws"),
    ("draw_seed negative", _set(f"{FAMILY}.draw_seed", -1), "families[0].draw_seed"),
    ("family unknown field", _set(f"{FAMILY}.colour", "red"), "families[0].colour"),
    # preprocess, split plans
    ("preprocess unknown", _set("preprocess", "scale"), "preprocess"),
    ("outer method unknown", _set("outer.method", "shuffle"), "outer.method"),
    ("outer k too small", _set("outer.k", 1), "outer.k"),
    ("outer missing", _drop("outer"), "outer"),
    ("inner missing", _drop("inner"), "inner"),
    ("inner seed negative", _set("inner.seed", -1), "inner.seed"),
    ("inner groups missing", _set("inner.method", "group_kfold"), "inner.groups"),
    # metrics and pick_by
    ("metrics empty", _set("metrics", []), "metrics"),
    ("metrics unknown", _set("metrics", ["accuracy", "vibes"]), "metrics[1]"),
    ("metrics repeated", _set("metrics", ["accuracy", "accuracy"]), "metrics"),
    ("pick_by not a metric", _set("pick_by", "roc_auc"), "pick_by"),
    # interval (issue 11): level in (0.5, 0.999), a known method, 2 to 100 repetitions
    ("interval level too high", _set("interval", {"level": 0.9995}), "interval.level"),
    ("interval level at one half", _set("interval", {"level": 0.5}), "interval.level"),
    ("interval method unknown", _set("interval", {"method": "bootstrap"}), "interval.method"),
    (
        "interval one repetition",
        _set("interval", {"method": "nested", "repetitions": 1}),
        "interval.repetitions",
    ),
    (
        "interval repetitions past the cap",
        _set("interval", {"method": "nested", "repetitions": 101}),
        "interval.repetitions",
    ),
    ("interval unknown field", _set("interval", {"colour": "red"}), "interval.colour"),
    (
        "interval nested on a grouped split",
        lambda r: _set("interval", {"method": "nested"})(
            _set("outer", {"method": "group_kfold", "k": 3, "groups": "petal width (cm)"})(r)
        ),
        "interval.method",
    ),
    (
        "interval nested with two outer folds",
        lambda r: _set("interval", {"method": "nested"})(_set("outer.k", 2)(r)),
        "interval.method",
    ),
    (
        "interval nested on a time-ordered split",
        lambda r: _set("interval", {"method": "nested"})(
            _set("outer", {"method": "time_series", "k": 3, "order_by": "sepal length (cm)"})(r)
        ),
        "interval.method",
    ),
    (
        "interval nested on a learning curve",
        lambda r: _set("interval", {"method": "nested"})(
            _set("sizes", [0.5, 1.0])(_set("kind", "learning_curve")(r))
        ),
        "interval.method",
    ),
    (
        "interval nested past the fits cap",
        lambda r: _set("interval", {"method": "nested", "repetitions": 100})(
            _set(f"{FAMILY}.grid", {"C": [0.01 * (i + 1) for i in range(300)]})(r)
        ),
        "interval.repetitions",
    ),
    # the body as a whole
    ("unknown top-level field", _set("colour", "red"), "colour"),
]


def _problem(answer: Any, status: int) -> dict[str, Any]:
    assert answer.status_code == status, answer.text
    assert answer.headers["content-type"] == "application/problem+json"
    problem: dict[str, Any] = answer.json()
    assert problem["status"] == status
    assert problem["detail"].endswith(".") and "Traceback" not in problem["detail"]
    return problem


@pytest.mark.parametrize(("case", "edit", "field"), CASES, ids=[c[0] for c in CASES])
def test_a_bad_field_is_a_422_naming_it_and_stores_nothing(
    server: Server, token: str, case: str, edit: Edit, field: str
) -> None:
    body = edit(copy.deepcopy(IRIS_REQUEST))
    before = server.snapshot()
    with server.client(token) as client:
        answer = client.post("/v1/jobs", json=body, headers={"Idempotency-Key": f"bad-{case}"})
    problem = _problem(answer, 422)
    assert problem["type"] == "/problems/bad-input"
    assert problem["field"] == field, problem["detail"]
    assert server.snapshot() == before


@pytest.mark.parametrize(
    ("content", "content_type", "status"),
    [
        (b"[1, 2, 3]", "application/json", 422),
        (b'"a job"', "application/json", 422),
        (b"", "application/json", 422),
        (b'{"dataset": {"sample": "iris"},', "application/json", 400),
        (b"\xff\xfe not utf-8", "application/json", 400),
        (b'{"target": "target"}', "text/plain", 422),
    ],
    ids=["array", "string", "empty", "truncated JSON", "not UTF-8", "not JSON content type"],
)
def test_a_body_that_is_not_a_json_object_is_refused(
    server: Server, token: str, content: bytes, content_type: str, status: int
) -> None:
    before = server.snapshot()
    with server.client(token) as client:
        answer = client.post("/v1/jobs", content=content, headers={"Content-Type": content_type})
    assert _problem(answer, status)["field"] == "request"
    assert server.snapshot() == before


def test_a_body_past_the_json_limit_is_413(server: Server, token: str) -> None:
    before = server.snapshot()
    request = copy.deepcopy(IRIS_REQUEST)
    request["families"][0]["grid"]["C"] = [0.5] * 300_000
    with server.client(token) as client:
        answer = client.post("/v1/jobs", json=request)
    _problem(answer, 413)
    assert server.snapshot() == before


# Column types, time order, recipes and weights, on iris (ships with scikit-learn) written under
# the server's data root with a month-first date column and a weight column added.
def _iris_csv(data_root: Path, name: str, weights: list[str]) -> str:
    from sklearn.datasets import load_iris

    frame = load_iris(as_frame=True).frame
    frame["when"] = [
        (date(2023, 12, 1) + timedelta(days=i)).strftime("%m/%d/%Y") for i in range(150)
    ]
    frame["w"] = weights
    path = data_root / name
    frame.to_csv(path, index=False)
    return str(path)


LOGISTIC_ONLY = [{"estimator": "LogisticRegression", "fixed": {"max_iter": 500}}]
TIME_OUTER = {"method": "time_series", "k": 3, "order_by": "when"}
US_FORMAT = {"when": {"kind": "datetime", "format": "%m/%d/%Y"}}
TABLE_CASES: list[tuple[str, dict[str, Any], str]] = [
    ("unknown kind", {"columns": {"w": {"kind": "text"}}}, "columns.w.kind"),
    (
        "unknown format directive",
        {"columns": {"when": {"kind": "datetime", "format": "%m/%Q"}}},
        "columns.when.format",
    ),
    (
        "format on a numeric column",
        {"columns": {"w": {"kind": "numeric", "format": "%Y"}}},
        "columns.w.format",
    ),
    ("text dates ordering time", {"outer": TIME_OUTER}, "outer.order_by"),
    (
        "gap leaving no training rows",
        {"outer": {**TIME_OUTER, "gap": 120}, "columns": US_FORMAT},
        "outer.gap",
    ),
    (
        "recipe on a missing column",
        {"preprocess": {"groups": [{"columns": ["wings"], "treat_as": "numeric"}]}},
        "preprocess.groups[0].columns[0]",
    ),
    (
        "recipe value outside constraints",
        {"preprocess": {"categorical": {"min_frequency": 1.5}}},
        "preprocess.categorical.min_frequency",
    ),
    ("negative weights", {"weights": "w", "families": LOGISTIC_ONLY}, "weights"),
    ("missing weights", {"weights": "w", "families": LOGISTIC_ONLY}, "weights"),
    (
        "weights for KNeighborsClassifier",
        {"weights": "w", "families": [{"estimator": "KNeighborsClassifier"}]},
        "families[0].estimator",
    ),
]
WEIGHTS = {
    "negative weights": ["-0.5"] + ["1"] * 149,
    "missing weights": [""] * 4 + ["1"] * 146,
}


@pytest.mark.parametrize(("case", "changes", "field"), TABLE_CASES, ids=[c[0] for c in TABLE_CASES])
def test_column_time_recipe_and_weight_errors_are_422_and_store_nothing(
    server: Server, token: str, data_root: Path, case: str, changes: dict[str, Any], field: str
) -> None:
    name = case.replace(" ", "-") + ".csv"
    path = _iris_csv(data_root, name, WEIGHTS.get(case, ["1"] * 150))
    body = {**copy.deepcopy(IRIS_REQUEST), "dataset": {"path": path}, **copy.deepcopy(changes)}
    before = server.snapshot()
    with server.client(token) as client:
        answer = client.post("/v1/jobs", json=body, headers={"Idempotency-Key": f"table-{name}"})
    problem = _problem(answer, 422)
    assert problem["field"] == field, problem["detail"]
    # one sentence: no full stop followed by a capital inside it
    assert re.search(r"[.?!]\s+[A-Z]", problem["detail"]) is None, problem["detail"]
    assert server.snapshot() == before
