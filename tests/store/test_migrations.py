"""The Alembic history builds exactly the schema the models declare, on both backends."""

from __future__ import annotations

import threading
from pathlib import Path

from alembic import command
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import Engine, inspect

from service.store.db import HEAD_REVISION, alembic_config, make_engine, upgrade_database
from service.store.followup_models import Base  # the one metadata, with every table loaded


def _differences(engine: Engine) -> list[object]:
    with engine.connect() as connection:
        context = MigrationContext.configure(
            connection, opts={"compare_type": True, "compare_server_default": True}
        )
        return list(compare_metadata(context, Base.metadata))


def _current_revision(engine: Engine) -> str | None:
    with engine.connect() as connection:
        return MigrationContext.configure(connection).get_current_revision()


def _head(url: str) -> str | None:
    return ScriptDirectory.from_config(alembic_config(url)).get_current_head()


def test_upgrade_head_matches_models(db_url: str, engine: Engine) -> None:
    assert _current_revision(engine) == _head(db_url)
    assert _differences(engine) == []


def test_constraint_names_follow_the_convention(engine: Engine) -> None:
    # compare_metadata ignores CHECK constraints and most names, so check the names themselves.
    inspector = inspect(engine)
    for table in Base.metadata.sorted_tables:
        want = {str(c.name) for c in table.constraints} | {str(i.name) for i in table.indexes}
        got = {
            inspector.get_pk_constraint(table.name)["name"],
            *(fk["name"] for fk in inspector.get_foreign_keys(table.name)),
            *(uq["name"] for uq in inspector.get_unique_constraints(table.name)),
            *(ck["name"] for ck in inspector.get_check_constraints(table.name)),
            *(ix["name"] for ix in inspector.get_indexes(table.name)),
        }
        assert got == want, table.name


def test_alembic_without_a_connection_builds_its_own(empty_url: str) -> None:
    # The path `alembic upgrade head` takes from a shell: env.py makes the engine from the URL.
    command.upgrade(alembic_config(empty_url), "head")
    engine = make_engine(empty_url)
    try:
        assert _current_revision(engine) == _head(empty_url)
        assert _differences(engine) == []
    finally:
        engine.dispose()


def test_upgrade_twice_is_a_no_op(db_url: str, engine: Engine) -> None:
    before = sorted(inspect(engine).get_table_names())
    upgrade_database(db_url)
    engine.dispose()  # forget cached reflection
    assert sorted(inspect(engine).get_table_names()) == before
    assert _current_revision(engine) == _head(db_url)
    assert _differences(engine) == []


def test_concurrent_upgrades_both_succeed(empty_url: str) -> None:
    # An API process and a worker starting together both migrate; neither may fail.
    errors: list[BaseException] = []

    def migrate() -> None:
        try:
            upgrade_database(empty_url)
        except BaseException as error:  # collected and asserted below
            errors.append(error)

    threads = [threading.Thread(target=migrate) for _ in range(3)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    assert errors == []
    engine = make_engine(empty_url)
    try:
        assert _differences(engine) == []
    finally:
        engine.dispose()


def test_head_revision_constant_is_alembics_head(sqlite_url: str) -> None:
    # upgrade_database skips Alembic when the store is at HEAD_REVISION, so the two must agree
    head = ScriptDirectory.from_config(alembic_config(sqlite_url)).get_current_head()
    assert head == HEAD_REVISION


def test_a_store_behind_head_is_upgraded(sqlite_url: str) -> None:
    command.upgrade(alembic_config(sqlite_url), "0001")
    upgrade_database(sqlite_url)
    engine = make_engine(sqlite_url)
    try:
        assert "api_token" in inspect(engine).get_table_names()
    finally:
        engine.dispose()


def _schema(engine: Engine) -> dict[str, object]:
    """Everything the inspector reads of a schema, in a comparable form (CHECK texts without
    their spacing, which batch-mode table copies reformat; columns by name)."""
    inspector = inspect(engine)
    found: dict[str, object] = {}
    for table in sorted(inspector.get_table_names()):
        found[table] = {
            # sorted: a migration adds a column at the end, a model declares it in its place
            "columns": sorted(
                (c["name"], str(c["type"]), c["nullable"], str(c.get("default")))
                for c in inspector.get_columns(table)
            ),
            "pk": inspector.get_pk_constraint(table),
            "fks": sorted(
                (fk["name"] or "", tuple(fk["constrained_columns"]), fk["referred_table"])
                for fk in inspector.get_foreign_keys(table)
            ),
            "uniques": sorted(
                (uq["name"] or "", tuple(uq["column_names"]))
                for uq in inspector.get_unique_constraints(table)
            ),
            "checks": sorted(
                (ck["name"] or "", "".join(str(ck["sqltext"]).split()))
                for ck in inspector.get_check_constraints(table)
            ),
            "indexes": sorted(
                (ix["name"] or "", tuple(str(c) for c in ix["column_names"]), ix["unique"])
                for ix in inspector.get_indexes(table)
            ),
        }
    return found


def test_a_new_sqlite_store_made_from_the_models_is_the_migrated_schema(tmp_path: Path) -> None:
    # upgrade_database makes a new SQLite store from the models, without Alembic: it must be
    # the schema the migrations build, down to constraint names and CHECK texts
    migrated, made = (f"sqlite:///{tmp_path}/{name}/foldwise.sqlite" for name in ("a", "b"))
    command.upgrade(alembic_config(migrated), "head")
    upgrade_database(made)
    engines = [make_engine(migrated), make_engine(made)]
    try:
        assert _current_revision(engines[1]) == HEAD_REVISION
        assert _schema(engines[1]) == _schema(engines[0])
        assert _differences(engines[1]) == []
    finally:
        for engine in engines:
            engine.dispose()


def test_every_migration_runs_down_and_up_on_a_store_made_from_the_models(tmp_path: Path) -> None:
    # the next migration will run on stores made this way: every named drop and alter of the
    # history must find what it names on them
    url = f"sqlite:///{tmp_path}/home/foldwise.sqlite"
    upgrade_database(url)
    command.downgrade(alembic_config(url), "base")
    command.upgrade(alembic_config(url), "head")
    engine = make_engine(url)
    try:
        assert _current_revision(engine) == HEAD_REVISION
        assert _differences(engine) == []
    finally:
        engine.dispose()
