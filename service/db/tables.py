"""Table definitions (SQLAlchemy Core) at the latest schema version, the same on
SQLite and PostgreSQL. :mod:`service.db.migrations` builds them step by step.

JSON documents (plans, totals, results, stored responses) are kept as text written
by :func:`service.db.repository.dump_json`, so both databases store exactly the same
bytes. Timestamps are ISO 8601 text in UTC (``2024-05-01T12:00:00.000000Z``), which
sorts in time order on both databases.

Looks (schema version 3 on): ``result`` holds the look's own row of the analysis
and ``analysis`` the look-level summary (decision, direction, final inference,
projection, warnings, ...), each stored once. Looks recorded under schema version
2 have ``result`` NULL and the full analysis of every look up to theirs in
``analysis``; they are read as they are (looks are append-only).
"""

from __future__ import annotations

from sqlalchemy import (
    Boolean,
    Column,
    Float,
    ForeignKey,
    Index,
    Integer,
    MetaData,
    String,
    Table,
    Text,
)

metadata = MetaData()

schema_version = Table(
    "schema_version",
    metadata,
    Column("version", Integer, primary_key=True, autoincrement=False),
    Column("description", String(200), nullable=False),
    Column("applied_at", String(32), nullable=False),
)

teams = Table(
    "teams",
    metadata,
    Column("id", String(40), primary_key=True),
    Column("name", String(200), nullable=False, unique=True),
    Column("created_at", String(32), nullable=False),
)

api_keys = Table(
    "api_keys",
    metadata,
    Column("id", String(40), primary_key=True),
    Column("team_id", String(40), ForeignKey("teams.id"), nullable=False),
    Column("key_hash", String(64), nullable=False, unique=True),
    Column("label", String(200), nullable=False),
    Column("created_at", String(32), nullable=False),
    Column("revoked_at", String(32), nullable=True),
)

experiments = Table(
    "experiments",
    metadata,
    Column("id", String(40), primary_key=True),
    Column("team_id", String(40), ForeignKey("teams.id"), nullable=False),
    Column("name", String(200), nullable=False),
    Column("description", Text, nullable=False),
    Column("metric", String(20), nullable=False),  # the metric kind
    Column("control_arm", String(64), nullable=False),
    Column("treatment_arm", String(64), nullable=False),
    Column("allocation", Float, nullable=False),
    Column("max_n", Float, nullable=True),
    Column("fraction", String(20), nullable=True),  # the fraction basis
    Column("plan_version", Integer, nullable=False),
    Column("look_count", Integer, nullable=False),
    Column("state", String(20), nullable=False),
    Column("decision", String(40), nullable=True),
    Column("created_at", String(32), nullable=False),
    Column("created_by", String(40), nullable=False),
    Column("updated_at", String(32), nullable=False),
    # v5: an experiment plan's arms ([{"name", "allocation"}], the control first) and
    # metrics ([{"name", "role", "metric_kind"}]); NULL for two-arm experiments
    Column("arms", Text, nullable=True),
    Column("metrics", Text, nullable=True),
)
Index("experiments_team_state", experiments.c.team_id, experiments.c.state)
Index("experiments_team_created", experiments.c.team_id, experiments.c.created_at)

plan_versions = Table(
    "plan_versions",
    metadata,
    Column("experiment_id", String(40), ForeignKey("experiments.id"), primary_key=True),
    Column("version", Integer, primary_key=True, autoincrement=False),
    Column("kind", String(40), nullable=False),
    Column("document", Text, nullable=False),
    Column("source", Text, nullable=False),
    Column("reason", Text, nullable=True),
    Column("after_look", Integer, nullable=False),
    Column("recorded_at", String(32), nullable=False),
    Column("recorded_by", String(40), nullable=False),
    # v3: the boundary table, computed once when the version is recorded
    Column("boundaries", Text, nullable=True),
)

looks = Table(
    "looks",
    metadata,
    Column("experiment_id", String(40), ForeignKey("experiments.id"), primary_key=True),
    Column("number", Integer, primary_key=True, autoincrement=False),
    Column("plan_version", Integer, nullable=False),
    Column("totals", Text, nullable=False),
    Column("final", Boolean, nullable=False),
    Column("decision", String(40), nullable=False),
    # v3 on: the look-level summary; v2 rows: the full analysis
    Column("analysis", Text, nullable=False),
    Column("recorded_at", String(32), nullable=False),
    Column("recorded_by", String(40), nullable=False),
    # v3: this look's own row of the analysis, and the state it left the experiment in
    Column("result", Text, nullable=True),
    Column("state", String(20), nullable=True),
)

idempotency_keys = Table(
    "idempotency_keys",
    metadata,
    Column("team_id", String(40), ForeignKey("teams.id"), primary_key=True),
    Column("key", String(200), primary_key=True),
    Column("request_hash", String(64), nullable=False),
    Column("status_code", Integer, nullable=False),
    Column("response", Text, nullable=False),
    Column("created_at", String(32), nullable=False),
    # v3: a look's answer is rebuilt from the stored look instead of kept twice
    Column("experiment_id", String(40), nullable=True),
    Column("look_number", Integer, nullable=True),
)
Index("idempotency_keys_created", idempotency_keys.c.created_at)

health_checks = Table(
    "health_checks",
    metadata,
    Column("checked_at", String(40), nullable=False),
)

# v4: values the service generates once and every process shares (the key that signs
# the pages' session cookies), by name
service_secrets = Table(
    "service_secrets",
    metadata,
    Column("name", String(100), primary_key=True),
    Column("value", Text, nullable=False),
    Column("created_at", String(32), nullable=False),
)
