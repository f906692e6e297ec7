"""`{"sql": ...}` sources on the local PostgreSQL: same rows as a CSV file, same content hash."""

from __future__ import annotations

from pathlib import Path

import pytest
from sqlalchemy import create_engine, text

from service.config import SqlConnection
from service.datasets.sources import DatasetSource, load_table
from service.datasets.sql_source import SqlAccess
from service.errors import BadInput

ROWS = [
    (1, 0.5, "north", True),
    (2, -1.25, "south", False),
    (3, None, None, True),
    (4, 3.0, "north", None),
    (5, 2.5, "east", False),
]
CSV = (
    "id,reading,site,flag\n1,0.5,north,True\n2,-1.25,south,False\n3,,,True\n"
    "4,3.0,north,\n5,2.5,east,False\n"
)


@pytest.fixture
def access(postgresql_url: str) -> SqlAccess:
    engine = create_engine(postgresql_url)
    with engine.begin() as connection:
        connection.execute(text("CREATE SCHEMA plant"))
        connection.execute(
            text(
                "CREATE TABLE plant.readings (id integer, reading double precision, "
                "site text, flag boolean)"
            )
        )
        connection.execute(
            text("INSERT INTO plant.readings VALUES (:a, :b, :c, :d)"),
            [dict(zip("abcd", row, strict=True)) for row in ROWS],
        )
        connection.execute(text("CREATE SEQUENCE plant.counter"))
    engine.dispose()
    return SqlAccess({"plant": SqlConnection(postgresql_url, None)}, max_rows=10)


def _sql(access: SqlAccess, **sql: str) -> str:
    source = DatasetSource.model_validate({"sql": {"connection": "plant", **sql}})
    return load_table(source, base_dir=Path("."), sql=access).content_hash


def test_table_and_query_hash_equal_to_the_same_rows_as_csv(
    access: SqlAccess, tmp_path: Path
) -> None:
    csv = tmp_path / "readings.csv"
    csv.write_text(CSV)
    from_csv = load_table(DatasetSource(path=str(csv)), base_dir=tmp_path).content_hash
    assert _sql(access, table="plant.readings") == from_csv
    assert _sql(access, query="SELECT * FROM plant.readings ORDER BY id") == from_csv
    # a different selection of rows is a different table
    assert _sql(access, query="SELECT * FROM plant.readings WHERE id < 5 ORDER BY id") != from_csv


def test_query_runs_in_a_read_only_transaction(access: SqlAccess) -> None:
    source = DatasetSource.model_validate(
        {
            "sql": {
                "connection": "plant",
                "query": "SELECT current_setting('transaction_read_only') AS ro",
            }
        }
    )
    table = load_table(source, base_dir=Path("."), sql=access)
    assert list(table.frame["ro"]) == ["on"]
    # nextval writes to the sequence: PostgreSQL refuses it in a read-only transaction
    with pytest.raises(BadInput) as caught:
        _sql(access, query="SELECT nextval('plant.counter') AS n")
    assert caught.value.field == "dataset.sql.query"
    assert "read-only transaction" in caught.value.message


@pytest.mark.parametrize(
    ("sql", "field", "words"),
    [
        ({"connection": "elsewhere", "table": "t"}, "dataset.sql.connection", "not a configured"),
        (
            {"connection": "plant", "table": "readings; DROP TABLE x"},
            "dataset.sql.table",
            "not a table name",
        ),
        ({"connection": "plant", "table": "a.b.c"}, "dataset.sql.table", "not a table name"),
        ({"connection": "plant", "table": "plant.missing"}, "dataset.sql.table", "refused"),
        (
            {"connection": "plant", "query": "SELECT 1; DELETE FROM plant.readings"},
            "dataset.sql.query",
            "refused",
        ),
        (
            {"connection": "plant", "query": "SELECT generate_series(1, 11) AS n"},
            "dataset.sql.query",
            "more than 10 rows",
        ),
    ],
)
def test_bad_sql_sources_name_the_field(
    access: SqlAccess, sql: dict[str, str], field: str, words: str
) -> None:
    source = DatasetSource.model_validate({"sql": sql})
    with pytest.raises(BadInput) as caught:
        load_table(source, base_dir=Path("."), sql=access)
    assert caught.value.field == field
    assert words in caught.value.message
    # the rows are still all there: nothing a source does can write
    assert _sql(access, query="SELECT count(*) AS n FROM plant.readings") == _sql(
        access, query="SELECT 5 AS n"
    )


def test_a_source_needs_exactly_one_of_table_or_query() -> None:
    with pytest.raises(ValueError, match="exactly one of 'table' or 'query'"):
        DatasetSource.model_validate({"sql": {"connection": "plant"}})
