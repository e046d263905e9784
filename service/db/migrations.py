"""Versioned schema: the service creates and upgrades its own tables.

Each migration is a numbered step applied once, in order, inside one
transaction together with the row that records it in ``schema_version``.
Concurrent starters (several workers, or ``keys`` run beside ``serve``) are
serialised: ``BEGIN IMMEDIATE`` on SQLite, a transaction-scoped advisory lock
on PostgreSQL. A database written by a newer service (a version above the
last one known here) is refused rather than guessed at.

Each step is written out as it was when it shipped (version 1's tables are a
frozen copy), so that a fresh database and an upgraded one end up alike.
"""

from __future__ import annotations

from collections.abc import Callable
from datetime import datetime, timezone

from sqlalchemy import (
    Boolean,
    Column,
    Connection,
    Engine,
    Float,
    ForeignKey,
    Index,
    Integer,
    MetaData,
    String,
    Table,
    Text,
    func,
    insert,
    select,
    text,
)

from service.db import tables

LATEST = 5


def _v1_metadata() -> MetaData:
    """The tables of schema version 1, exactly as they shipped."""
    m = MetaData()
    Table("teams", m, Column("id", String(40), primary_key=True),
          Column("name", String(200), nullable=False, unique=True),
          Column("created_at", String(32), nullable=False))
    Table("api_keys", m, Column("id", String(40), primary_key=True),
          Column("team_id", String(40), ForeignKey("teams.id"), nullable=False),
          Column("key_hash", String(64), nullable=False, unique=True),
          Column("label", String(200), nullable=False),
          Column("created_at", String(32), nullable=False),
          Column("revoked_at", String(32), nullable=True))
    e = Table("experiments", m, Column("id", String(40), primary_key=True),
              Column("team_id", String(40), ForeignKey("teams.id"), nullable=False),
              Column("name", String(200), nullable=False),
              Column("description", Text, nullable=False),
              Column("metric", String(20), nullable=False),
              Column("control_arm", String(64), nullable=False),
              Column("treatment_arm", String(64), nullable=False),
              Column("allocation", Float, nullable=False),
              Column("max_n", Float, nullable=True),
              Column("fraction", String(20), nullable=True),
              Column("plan_version", Integer, nullable=False),
              Column("look_count", Integer, nullable=False),
              Column("state", String(20), nullable=False),
              Column("decision", String(40), nullable=True),
              Column("created_at", String(32), nullable=False),
              Column("created_by", String(40), nullable=False),
              Column("updated_at", String(32), nullable=False))
    Index("experiments_team_state", e.c.team_id, e.c.state)
    Index("experiments_team_created", e.c.team_id, e.c.created_at)
    Table("plan_versions", m,
          Column("experiment_id", String(40), ForeignKey("experiments.id"), primary_key=True),
          Column("version", Integer, primary_key=True, autoincrement=False),
          Column("kind", String(40), nullable=False),
          Column("document", Text, nullable=False),
          Column("source", Text, nullable=False),
          Column("reason", Text, nullable=True),
          Column("after_look", Integer, nullable=False),
          Column("recorded_at", String(32), nullable=False),
          Column("recorded_by", String(40), nullable=False))
    Table("looks", m,
          Column("experiment_id", String(40), ForeignKey("experiments.id"), primary_key=True),
          Column("number", Integer, primary_key=True, autoincrement=False),
          Column("plan_version", Integer, nullable=False),
          Column("totals", Text, nullable=False),
          Column("final", Boolean, nullable=False),
          Column("decision", String(40), nullable=False),
          Column("analysis", Text, nullable=False),
          Column("recorded_at", String(32), nullable=False),
          Column("recorded_by", String(40), nullable=False))
    Table("idempotency_keys", m,
          Column("team_id", String(40), ForeignKey("teams.id"), primary_key=True),
          Column("key", String(200), primary_key=True),
          Column("request_hash", String(64), nullable=False),
          Column("status_code", Integer, nullable=False),
          Column("response", Text, nullable=False),
          Column("created_at", String(32), nullable=False))
    return m


def _v1_tables(conn: Connection) -> None:
    _v1_metadata().create_all(conn)


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


def _v3_store_once(conn: Connection) -> None:
    """Each look's own result stored once; boundary tables stored with their plan
    version; idempotency keys that expire (indexed by age) and answer a look by
    reference; a table for the health route's write check. Existing rows are not
    rewritten: v2 looks keep their full analysis and are read as they are."""
    for stmt in (
        "ALTER TABLE looks ADD COLUMN result TEXT",
        "ALTER TABLE looks ADD COLUMN state VARCHAR(20)",
        "ALTER TABLE plan_versions ADD COLUMN boundaries TEXT",
        "ALTER TABLE idempotency_keys ADD COLUMN experiment_id VARCHAR(40)",
        "ALTER TABLE idempotency_keys ADD COLUMN look_number INTEGER",
        "CREATE INDEX idempotency_keys_created ON idempotency_keys (created_at)",
        "CREATE TABLE health_checks (checked_at VARCHAR(40) NOT NULL)",
    ):
        conn.execute(text(stmt))


def _v4_service_secrets(conn: Connection) -> None:
    """A table of values generated once and shared by every server process (the key
    that signs the pages' session cookies)."""
    conn.execute(text("CREATE TABLE service_secrets (name VARCHAR(100) NOT NULL PRIMARY KEY, "
                      "value TEXT NOT NULL, created_at VARCHAR(32) NOT NULL)"))


def _v5_experiment_layout(conn: Connection) -> None:
    """Experiments with many arms and several metrics (plans of kind ``experiment``):
    their arms (names, the control first, with each treatment's allocation) and their
    metrics (name, role, kind), as JSON text; NULL for two-arm experiments. Existing
    rows are not rewritten; the append-only triggers on looks and plan versions stay."""
    for stmt in (
        "ALTER TABLE experiments ADD COLUMN arms TEXT",
        "ALTER TABLE experiments ADD COLUMN metrics TEXT",
    ):
        conn.execute(text(stmt))


MIGRATIONS: list[tuple[int, str, Callable[[Connection], None]]] = [
    (1, "teams, API keys, experiments, plan versions, looks, idempotency keys", _v1_tables),
    (2, "looks and plan versions are append-only (UPDATE and DELETE refused)", _v2_append_only),
    (3, "each look's result stored once; stored boundary tables; expiring idempotency "
        "keys; health write check", _v3_store_once),
    (4, "service secrets (the key that signs the pages' session cookies)",
     _v4_service_secrets),
    (5, "experiments with many arms and several metrics: their arms and metrics",
     _v5_experiment_layout),
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


def migrate(engine: Engine, target: int = LATEST) -> int:
    """Apply every pending migration up to ``target``; return the version now in place.

    A database already at ``target`` is only read (so that a read-only database can
    still be served for reading)."""
    with engine.connect() as conn:
        have = current_version(conn)
        conn.rollback()
    if have == target:
        return have
    if have > LATEST:
        raise SchemaTooNew(
            f"the database is at schema version {have}, but this service knows "
            f"versions up to {LATEST}; upgrade the service before using this database"
        )
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
                if version <= have or version > target:
                    continue
                step(conn)
                conn.execute(
                    insert(tables.schema_version).values(
                        version=version, description=description, applied_at=_now()
                    )
                )
            return current_version(conn)
