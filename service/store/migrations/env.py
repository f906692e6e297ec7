"""Alembic environment for the store; configured from code (see service.store.db), no ini file.

The caller may hand over an open connection in `config.attributes["connection"]` (that is how
`upgrade_database` runs, inside its own locked transaction); otherwise an engine is built from the
`sqlalchemy.url` main option with the same tuning the application uses.
"""

from __future__ import annotations

from alembic import context
from sqlalchemy import Connection

from service.store import followup_models
from service.store.db import make_engine

# one metadata holds both modules' tables; taking it from the second makes sure that is loaded
target_metadata = followup_models.Base.metadata


def _run(connection: Connection) -> None:
    context.configure(
        connection=connection,
        target_metadata=target_metadata,
        # SQLite cannot ALTER most things; batch mode copies the table instead. Our engines run
        # with foreign_keys=ON, which cannot be switched off inside the migration transaction:
        # a later revision that copies a table other tables reference must plan for that.
        render_as_batch=connection.dialect.name == "sqlite",
        compare_type=True,
        compare_server_default=True,
    )
    with context.begin_transaction():
        context.run_migrations()


def run_offline() -> None:
    context.configure(
        url=context.config.get_main_option("sqlalchemy.url"),
        target_metadata=target_metadata,
        literal_binds=True,
        render_as_batch=True,
    )
    with context.begin_transaction():
        context.run_migrations()


def run_online() -> None:
    given = context.config.attributes.get("connection")
    if given is not None:
        _run(given)
        return
    url = context.config.get_main_option("sqlalchemy.url")
    if not url:
        raise RuntimeError("no database: set the sqlalchemy.url option or pass a connection")
    engine = make_engine(url)
    try:
        with engine.connect() as connection:
            _run(connection)
            connection.commit()
    finally:
        engine.dispose()


if context.is_offline_mode():
    run_offline()
else:
    run_online()
