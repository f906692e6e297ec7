"""Datasets over HTTP: register and upload, confined to the data roots, capped, nothing kept."""

from __future__ import annotations

import io
import os
from pathlib import Path
from typing import Any

import httpx
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from .conftest import MAX_COLUMNS
from .server import IRIS_REQUEST, Server

PUMPS = Path(__file__).resolve().parents[2] / "demo_data" / "pump_failures.csv"


def _problem(answer: httpx.Response, status: int, field: str | None = "file") -> dict[str, Any]:
    assert answer.status_code == status, answer.text
    assert answer.headers["content-type"] == "application/problem+json"
    problem: dict[str, Any] = answer.json()
    assert problem["status"] == status and problem["detail"]
    if field is not None:
        assert problem["field"] == field, problem
    return problem


def _upload(client: httpx.Client, name: str, content: bytes) -> httpx.Response:
    return client.post("/v1/datasets/upload", files={"file": (name, content, "text/csv")})


def test_upload_registers_once_and_reads_back(server: Server, token: str) -> None:
    content = PUMPS.read_bytes()
    with server.client(token) as client:
        first = _upload(client, "pumps.csv", content)
        again = _upload(client, "pumps-copy.csv", content)
        read = client.get(first.headers["location"])
        listed = client.get("/v1/datasets").json()
    assert first.status_code in (200, 201) and again.status_code == 200
    body = first.json()
    assert again.json()["content_hash"] == body["content_hash"]
    assert first.headers["location"] == f"/v1/datasets/{body['content_hash']}"
    assert (body["n_rows"], body["n_columns"]) == (1500, 13)
    columns = {c["name"]: c for c in body["columns"]}
    assert columns["site"]["kind"] == "categorical" and columns["site"]["distinct"] == 12
    assert read.status_code == 200 and read.json() == body
    assert body["content_hash"] in [d["content_hash"] for d in listed["data"]]
    assert listed["count"] == len(listed["data"])
    assert not any(server.settings.upload_dir.glob("*")), "the spooled upload was left behind"


def test_the_same_table_as_csv_and_parquet_has_one_hash(server: Server, token: str) -> None:
    frame = pd.read_csv(PUMPS)
    buffer = io.BytesIO()
    frame.to_parquet(buffer, index=False)
    with server.client(token) as client:
        as_csv = _upload(client, "pumps.csv", PUMPS.read_bytes()).json()
        as_parquet = _upload(client, "pumps.parquet", buffer.getvalue()).json()
    assert as_csv["content_hash"] == as_parquet["content_hash"]


def test_register_by_path_under_the_data_root(server: Server, token: str, data_root: Path) -> None:
    (data_root / "pumps").mkdir(exist_ok=True)
    (data_root / "pumps" / "pumps.csv").write_bytes(PUMPS.read_bytes())
    with server.client(token) as client:
        relative = client.post("/v1/datasets", json={"path": "pumps/pumps.csv"})
        absolute = client.post("/v1/datasets", json={"path": str(data_root / "pumps/pumps.csv")})
        sample = client.post("/v1/datasets", json={"sample": "wine"})
    assert relative.status_code in (200, 201)
    assert absolute.status_code == 200
    assert relative.json()["content_hash"] == absolute.json()["content_hash"]
    assert sample.status_code in (200, 201) and sample.json()["n_rows"] == 178


def _csv_bytes(n_columns: int, n_rows: int = 3) -> bytes:
    header = ",".join(f"c{i}" for i in range(n_columns))
    rows = [",".join(str(r * i) for i in range(n_columns)) for r in range(n_rows)]
    return ("\n".join([header, *rows]) + "\n").encode()


def _nested_parquet_bytes() -> bytes:
    buffer = io.BytesIO()
    table = pa.table([pa.array([1.0, 2.0]), pa.array([[1, 2], [3]])], names=["a", "readings"])
    pq.write_table(table, buffer)
    return buffer.getvalue()


BAD_UPLOADS = [
    ("junk bytes", "table.csv", os.urandom(4096) + b"\x00", 422),
    ("junk parquet", "table.parquet", b"PAR1 this is not parquet PAR1", 422),
    ("nested parquet column", "table.parquet", _nested_parquet_bytes(), 422),
    ("header only", "table.csv", b"a,b,c\n", 422),
    ("empty file", "table.csv", b"", 422),
    ("ragged rows", "table.csv", b"a,b\n1,2\n3,4,5,6\n", 422),
    ("dot-dot name", "../table.csv", b"a,b\n1,2\n", 422),
    ("dot-dot inside", "ta..ble.csv", b"a,b\n1,2\n", 422),
    ("path in name", "sub/table.csv", b"a,b\n1,2\n", 422),
    ("backslash in name", "..\\table.csv", b"a,b\n1,2\n", 422),
    ("wrong extension", "table.txt", b"a,b\n1,2\n", 422),
    ("too many columns", "wide.csv", _csv_bytes(MAX_COLUMNS + 1), 422),
    ("over the size cap", "big.csv", _csv_bytes(10, 1) + b"1,2,3\n" * 200_000, 413),
]


@pytest.mark.parametrize(
    ("name", "content", "status"), [c[1:] for c in BAD_UPLOADS], ids=[c[0] for c in BAD_UPLOADS]
)
def test_a_bad_upload_is_refused_and_nothing_is_stored(
    server: Server, token: str, name: str, content: bytes, status: int
) -> None:
    before = server.snapshot()
    with server.client(token) as client:
        answer = _upload(client, name, content)
    _problem(answer, status)
    assert server.snapshot() == before


def test_an_upload_without_a_file_part_is_refused(server: Server, token: str) -> None:
    before = server.snapshot()
    with server.client(token) as client:
        no_file = client.post("/v1/datasets/upload", data={"note": "hello"})
        other_name = client.post("/v1/datasets/upload", files={"table": ("a.csv", b"a\n1\n")})
        not_multipart = client.post("/v1/datasets/upload", content=b"a,b\n1,2\n")
    for answer in (no_file, other_name, not_multipart):
        _problem(answer, 422)
    assert server.snapshot() == before


def test_a_path_outside_the_roots_is_refused(server: Server, token: str, tmp_path: Path) -> None:
    outside = tmp_path / "outside.csv"
    outside.write_bytes(PUMPS.read_bytes())
    before = server.snapshot()
    with server.client(token) as client:
        absolute = client.post("/v1/datasets", json={"path": str(outside)})
        climbing = client.post("/v1/datasets", json={"path": f"../../../../{outside}"})
        system = client.post("/v1/datasets", json={"path": "/etc/passwd"})
    for answer in (absolute, climbing, system):
        problem = _problem(answer, 422, field="dataset.path")
        assert "outside the configured data roots" in problem["detail"]
    assert server.snapshot() == before


def test_a_symlink_inside_the_root_pointing_out_is_refused(
    server: Server, token: str, data_root: Path, tmp_path: Path
) -> None:
    outside = tmp_path / "secret.csv"
    outside.write_bytes(PUMPS.read_bytes())
    link = data_root / "innocent.csv"
    link.unlink(missing_ok=True)
    link.symlink_to(outside)
    before = server.snapshot()
    with server.client(token) as client:
        answer = client.post("/v1/datasets", json={"path": "innocent.csv"})
        job = client.post("/v1/jobs", json=IRIS_REQUEST | {"dataset": {"path": "innocent.csv"}})
    for refused in (answer, job):
        problem = _problem(refused, 422, "dataset.path")
        assert "outside the configured data roots" in problem["detail"]
    assert server.snapshot() == before


def test_a_bad_source_body_names_the_field(server: Server, token: str) -> None:
    before = server.snapshot()
    with server.client(token) as client:
        both = client.post("/v1/datasets", json={"path": "a.csv", "sample": "iris"})
        unknown = client.post("/v1/datasets", json={"sample": "titanic"})
        extra = client.post("/v1/datasets", json={"url": "http://example.com/a.csv"})
        bad_hash = client.get("/v1/datasets/not-a-hash")
        missing = client.get(f"/v1/datasets/{'0' * 64}")
    _problem(both, 422, "request")
    _problem(unknown, 422, "sample")
    _problem(extra, 422, "url")
    _problem(bad_hash, 422, "content_hash")
    _problem(missing, 404, None)
    assert server.snapshot() == before


def test_upload_answer_shows_inferred_kinds_and_how_to_override_them(
    server: Server, token: str
) -> None:
    rows = "".join(f"{m:02d}/15/2024,2024-{m:02d}-01,{m * 1.5}\n" for m in range(1, 13))
    content = ("us_date,iso_date,x\n" + rows).encode()
    with server.client(token) as client:
        answer = _upload(client, "dated.csv", content)
    assert answer.status_code in (200, 201), answer.text
    body = answer.json()
    columns = {c["name"]: c for c in body["columns"]}
    assert columns["iso_date"]["kind"] == "datetime"  # ISO 8601 text is read as dates
    assert columns["us_date"]["kind"] == "categorical"
    assert '"format": "%m/%d/%Y"' in columns["us_date"]["hint"]
    assert '"columns"' in body["column_types"]
