"""Versioned schema: the service creates and upgrades its own tables.

Each migration is a numbered step applied once, in order, inside one
transaction together with the row that records it in ``schema_version``.
Concurrent starters (several workers, or ``keys`` run beside ``serve``) are
serialised: ``BEGIN IMMEDIATE`` on SQLite, a transaction-scoped advisory lock
on PostgreSQL. A database written by a newer service (a version above the
last one known here) is refused rather than guessed at.
"""

from __future__ import annotations

from collections.abc import Callable
from datetime import datetime, timezone

from sqlalchemy import Connection, Engine, func, insert, select, text

from service import tables

LATEST = 2


def _v1_tables(conn: Connection) -> None:
    tables.metadata.create_all(
        conn, tables=[t for t in tables.VERSION_1_TABLES if t is not tables.schema_version]
    )


_APPEND_ONLY = ("looks", "plan_versions")


def _v2_append_only(conn: Connection) -> None:
    if conn.dialect.name == "postgresql":
        conn.execute(
            text(
                "CREATE OR REPLACE FUNCTION seqtest_refuse_change() RETURNS trigger "
                "LANGUAGE plpgsql AS $$ BEGIN "
                "RAISE EXCEPTION 'table % is append-only', TG_TABLE_NAME; "
                "END $$"
            )
        )
        for table in _APPEND_ONLY:
            conn.execute(
                text(
                    f"CREATE TRIGGER {table}_append_only BEFORE UPDATE OR DELETE ON {table} "
                    "FOR EACH ROW EXECUTE FUNCTION seqtest_refuse_change()"
                )
            )
    else:
        for table in _APPEND_ONLY:
            for action in ("UPDATE", "DELETE"):
                conn.execute(
                    text(
                        f"CREATE TRIGGER {table}_no_{action.lower()} BEFORE {action} ON {table} "
                        f"BEGIN SELECT RAISE(ABORT, '{table} is append-only'); END"
                    )
                )


MIGRATIONS: list[tuple[int, str, Callable[[Connection], None]]] = [
    (1, "teams, API keys, experiments, plan versions, looks, idempotency keys", _v1_tables),
    (2, "looks and plan versions are append-only (UPDATE and DELETE refused)", _v2_append_only),
]
assert [m[0] for m in MIGRATIONS] == list(range(1, LATEST + 1))


class SchemaTooNew(RuntimeError):
    """The database was written by a newer version of the service."""


def _now() -> str:
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def current_version(conn: Connection) -> int:
    """Highest applied migration (0 for an empty database)."""
    if not conn.dialect.has_table(conn, "schema_version"):
        return 0
    v = conn.execute(select(func.max(tables.schema_version.c.version))).scalar()
    return int(v or 0)


def migrate(engine: Engine) -> int:
    """Apply every pending migration; return the schema version now in place."""
    with engine.connect() as conn:
        conn = conn.execution_options(seqtest_write=True)
        with conn.begin():
            if conn.dialect.name == "postgresql":
                conn.execute(text("SELECT pg_advisory_xact_lock(hashtext(current_schema()))"))
            tables.schema_version.create(conn, checkfirst=True)
            have = current_version(conn)
            if have > LATEST:
                raise SchemaTooNew(
                    f"the database is at schema version {have}, but this service knows "
                    f"versions up to {LATEST}; upgrade the service before using this database"
                )
            for version, description, step in MIGRATIONS:
                if version <= have:
                    continue
                step(conn)
                conn.execute(
                    insert(tables.schema_version).values(
                        version=version, description=description, applied_at=_now()
                    )
                )
            return current_version(conn)
