"""The query API against the store: every answer is checked with SQL written here, not ours."""

from __future__ import annotations

from typing import Any

import pytest
from sqlalchemy import text

from .conftest import SCHEDULE_ID, Seeded

# The scores a job's plan holds: its folds x its candidates, whichever job computed them.
_PLAN_SCORES = """
SELECT DISTINCT fs.id FROM fold_score fs
JOIN job_fold jf ON jf.fingerprint = fs.fold_fingerprint
JOIN job_candidate jc ON jc.job_id = jf.job_id AND jc.candidate_key = fs.candidate_key
JOIN job j ON j.id = jf.job_id
WHERE fs.dataset_hash = :h AND j.dataset_hash = :h AND j.team = :team {extra}
ORDER BY fs.id
"""


def _sql(seeded: Seeded, query: str, **params: Any) -> list[Any]:
    with seeded.server.sessions() as session:
        return [r[0] for r in session.execute(text(query), params)]


def _get(seeded: Seeded, token: str, path: str, **params: Any) -> Any:
    with seeded.server.client(token) as client:
        answer = client.get(path, params=params)
    assert answer.status_code == 200, answer.text
    return answer.json()


def _all_pages(seeded: Seeded, token: str, path: str, **params: Any) -> list[dict[str, Any]]:
    rows: list[dict[str, Any]] = []
    after = 0
    while True:
        page = _get(seeded, token, path, after=after, **params)
        rows += page["data"]
        if page["next_after"] is None:
            return rows
        after = page["next_after"]


def test_jobs_by_family_match_the_candidates_table(seeded: Seeded) -> None:
    expected = _sql(
        seeded,
        "SELECT DISTINCT j.id FROM job j JOIN job_candidate jc ON jc.job_id = j.id "
        "JOIN candidate c ON c.candidate_key = jc.candidate_key "
        "WHERE c.estimator = 'KNeighborsClassifier' AND j.team = 'lab'",
    )
    assert expected == [seeded.jobs["B"]["id"]]
    body = _get(seeded, seeded.lab, "/v1/jobs", estimator="KNeighborsClassifier")
    assert [j["id"] for j in body["data"]] == expected and body["count"] == 1
    lr = _get(seeded, seeded.lab, "/v1/jobs", estimator="LogisticRegression")
    assert {j["id"] for j in lr["data"]} == {seeded.jobs["A"]["id"], seeded.jobs["C"]["id"]}
    # the analyst sees the other team's logistic regression on wine as well
    everyone = _get(seeded, seeded.analyst, "/v1/jobs", estimator="LogisticRegression")
    assert seeded.jobs["D"]["id"] in {j["id"] for j in everyone["data"]}


def test_jobs_by_schedule(seeded: Seeded) -> None:
    body = _get(seeded, seeded.lab, "/v1/jobs", schedule_id=SCHEDULE_ID)
    expected = _sql(seeded, "SELECT id FROM job WHERE schedule_id = :s", s=SCHEDULE_ID)
    assert [j["id"] for j in body["data"]] == expected == [seeded.jobs["C"]["id"]]
    assert _get(seeded, seeded.other, "/v1/jobs", schedule_id=SCHEDULE_ID)["count"] == 0


def test_dataset_jobs_match_the_store_and_respect_teams(seeded: Seeded) -> None:
    iris = seeded.jobs["A"]["dataset_hash"]
    body = _get(seeded, seeded.lab, f"/v1/datasets/{iris}/jobs")
    expected = _sql(
        seeded,
        "SELECT id FROM job WHERE dataset_hash = :h AND team = 'lab' "
        "ORDER BY created_at DESC, id DESC",
        h=iris,
    )
    assert [j["id"] for j in body["data"]] == expected and body["count"] == 3
    with seeded.server.client(seeded.other) as client:
        hidden = client.get(f"/v1/datasets/{iris}/jobs")
    assert hidden.status_code == 404  # another team's table is as if it did not exist
    assert hidden.headers["content-type"].startswith("application/problem+json")


@pytest.mark.parametrize(
    ("filters", "extra"),
    [
        ({}, ""),
        ({"role": "outer"}, "AND jf.role = 'outer'"),
        ({"role": "inner"}, "AND jf.role = 'inner'"),
        (
            {"role": "final_inner", "metric": "accuracy"},
            "AND jf.role = 'final_inner' AND fs.metric = 'accuracy'",
        ),
    ],
)
def test_dataset_fold_scores_match_the_store(
    seeded: Seeded, filters: dict[str, str], extra: str
) -> None:
    iris = seeded.jobs["A"]["dataset_hash"]
    expected = _sql(seeded, _PLAN_SCORES.format(extra=extra), h=iris, team="lab")
    assert expected, "the seeded jobs stored no such scores"
    rows = _all_pages(seeded, seeded.lab, f"/v1/datasets/{iris}/fold-scores", limit=97, **filters)
    assert [r["id"] for r in rows] == expected  # id order, no gaps, no repeats across pages
    if "metric" in filters:
        assert {r["metric"] for r in rows} == {filters["metric"]}


def test_dataset_fold_scores_by_candidate(seeded: Seeded) -> None:
    a = seeded.jobs["A"]
    key = a["result"]["final_pick"]["candidate_key"]
    iris = a["dataset_hash"]
    expected = _sql(
        seeded, _PLAN_SCORES.format(extra="AND fs.candidate_key = :k"), h=iris, team="lab", k=key
    )
    rows = _all_pages(seeded, seeded.lab, f"/v1/datasets/{iris}/fold-scores", candidate_key=key)
    assert [r["id"] for r in rows] == expected and {r["candidate_key"] for r in rows} == {key}


def test_fold_score_limit_is_capped(seeded: Seeded) -> None:
    iris = seeded.jobs["A"]["dataset_hash"]
    with seeded.server.client(seeded.lab) as client:
        answer = client.get(f"/v1/datasets/{iris}/fold-scores", params={"limit": 1001})
    assert answer.status_code == 422 and answer.json()["field"] == "limit"


def test_history_lists_jobs_oldest_first_with_estimates_and_refreshes(seeded: Seeded) -> None:
    iris = seeded.jobs["A"]["dataset_hash"]
    body = _get(seeded, seeded.lab, f"/v1/datasets/{iris}/history")
    expected = _sql(
        seeded,
        "SELECT id FROM job WHERE dataset_hash = :h AND team = 'lab' ORDER BY created_at, id",
        h=iris,
    )
    assert [p["job_id"] for p in body["jobs"]] == expected
    by_id = {job["id"]: job for job in seeded.jobs.values()}
    for point in body["jobs"]:
        result = by_id[point["job_id"]]["result"]
        estimate = result["estimate"][result["pick_by"]]
        assert (point["mean"], point["se"]) == (estimate["mean"], estimate["se"])
        assert point["interval"] == estimate["interval"] and point["interval"]["method"] == "quick"
        assert point["final_pick"]["candidate_key"] == result["final_pick"]["candidate_key"]
    assert [p["schedule_id"] for p in body["jobs"]].count(SCHEDULE_ID) == 1
    refreshes = _sql(seeded, "SELECT id FROM refresh WHERE dataset_hash = :h", h=iris)
    assert [r["id"] for r in body["refreshes"]] == refreshes
    assert body["refreshes"][0]["job_id"] == seeded.jobs["C"]["id"]
    # the refresh belongs to lab's schedule; the analyst sees it too, the other team not at all
    assert _get(seeded, seeded.analyst, f"/v1/datasets/{iris}/history")["refreshes"]


def test_an_analyst_sees_every_teams_scores_of_a_dataset(seeded: Seeded) -> None:
    wine = seeded.jobs["D"]["dataset_hash"]
    expected = _sql(seeded, _PLAN_SCORES.format(extra=""), h=wine, team="other")
    rows = _all_pages(seeded, seeded.analyst, f"/v1/datasets/{wine}/fold-scores", limit=1000)
    assert [r["id"] for r in rows] == expected and expected
    with seeded.server.client(seeded.lab) as client:
        assert client.get(f"/v1/datasets/{wine}/fold-scores").status_code == 404
