"""At start, ask each PostgreSQL source connection whether its role could write, and warn.

Reads are already confined (one statement, read-only transaction); a role that can only SELECT is
the operator's second wall, and the one foldwise cannot build itself. SQLite files are not
checked: their reads run under an authorizer that denies every write.
"""

from __future__ import annotations

import logging
import threading
from collections.abc import Mapping
from dataclasses import dataclass, field

from sqlalchemy import create_engine, text
from sqlalchemy.pool import NullPool

from service.config import SqlConnection

log = logging.getLogger(__name__)
CONNECT_TIMEOUT_SECONDS = 5

# pg_roles, has_table_privilege, has_schema_privilege, has_database_privilege: PostgreSQL manual,
# "System Information Functions and Operators" (access privilege inquiry functions)
_PRIVILEGES = text(
    """
    SELECT
      (SELECT rolsuper FROM pg_roles WHERE rolname = current_user) AS superuser,
      (SELECT count(*) FROM pg_class c JOIN pg_namespace n ON n.oid = c.relnamespace
        WHERE c.relkind IN ('r', 'p')
          AND n.nspname NOT IN ('pg_catalog', 'information_schema')
          AND n.nspname NOT LIKE 'pg\\_%'
          AND (has_table_privilege(c.oid, 'INSERT') OR has_table_privilege(c.oid, 'UPDATE')
               OR has_table_privilege(c.oid, 'DELETE') OR has_table_privilege(c.oid, 'TRUNCATE'))
      ) AS writable_tables,
      (SELECT count(*) FROM pg_namespace n
        WHERE n.nspname NOT IN ('pg_catalog', 'information_schema')
          AND n.nspname NOT LIKE 'pg\\_%'
          AND has_schema_privilege(n.oid, 'CREATE')
      ) AS creatable_schemas,
      has_database_privilege(current_database(), 'CREATE') AS creates_schemas
    """
)


def write_powers(url: str) -> list[str]:
    """What the connection's role could write, in words; empty when it can only read."""
    engine = create_engine(
        url, poolclass=NullPool, connect_args={"connect_timeout": CONNECT_TIMEOUT_SECONDS}
    )
    try:
        with engine.connect() as connection:
            row = connection.execute(_PRIVILEGES).one()
    finally:
        engine.dispose()
    powers = []
    if row.superuser:
        powers.append("it is a superuser")
    if row.writable_tables:
        powers.append(f"it may INSERT, UPDATE, DELETE or TRUNCATE {row.writable_tables} tables")
    if row.creatable_schemas:
        powers.append(f"it may CREATE in {row.creatable_schemas} schemas")
    if row.creates_schemas:
        powers.append("it may create schemas in the database")
    return powers


@dataclass
class RoleCheck:
    """What the start-up check found, for /readyz: names of connections whose role can write."""

    done: bool = False
    can_write: list[str] = field(default_factory=list)
    unchecked: list[str] = field(default_factory=list)

    def summary(self) -> str:
        """One line for /readyz, naming no connection (the probe is unauthenticated)."""
        if not self.done:
            return "checking"
        if self.can_write:
            return f"warning: {len(self.can_write)} connection(s) can write; see the server log"
        if self.unchecked:
            return f"warning: {len(self.unchecked)} connection(s) not checked; see the server log"
        return "ok"


def check_roles(connections: Mapping[str, SqlConnection], found: RoleCheck) -> None:
    """Warn in the log for every PostgreSQL connection whose role could write."""
    for name, connection in sorted(connections.items()):
        if not connection.url.startswith("postgresql"):
            continue
        try:
            powers = write_powers(connection.url)
        except Exception as exc:  # a source database that is down must not stop the API
            found.unchecked.append(name)
            log.warning("sql connection %r: could not check its role's privileges (%s)", name, exc)
            continue
        if powers:
            found.can_write.append(name)
            log.warning(
                "sql connection %r: its database role can write (%s); name a role that can only "
                "SELECT in FOLDWISE_SQL_CONNECTIONS (see deploy/README.md)",
                name,
                "; ".join(powers),
            )
    found.done = True


def start_role_check(connections: Mapping[str, SqlConnection]) -> RoleCheck:
    """Run check_roles in the background, so a slow source database never delays the start."""
    found = RoleCheck(done=not connections)
    for name, connection in sorted(connections.items()):
        if connection.teams == frozenset():
            log.warning(
                "sql connection %r lists no teams, so no API caller may use it; give it as "
                '{"url": ..., "teams": [...]} in FOLDWISE_SQL_CONNECTIONS',
                name,
            )
    if connections:
        threading.Thread(
            target=check_roles, args=(connections, found), name="sql-role-check", daemon=True
        ).start()
    return found
