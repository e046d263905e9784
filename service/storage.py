"""Storage: one layer over SQLite (default) and PostgreSQL, through SQLAlchemy Core.

Guarantees the routers rely on:

- every write is one transaction;
- writes to one experiment are serialised: ``BEGIN IMMEDIATE`` on SQLite (one
  writer for the whole file), ``SELECT ... FOR UPDATE`` on the experiment row on
  PostgreSQL, so look numbers are consecutive, none lost and none duplicated;
- looks and plan versions are only ever inserted (the schema refuses UPDATE and
  DELETE on them);
- an idempotency key is stored in the same transaction as the write it
  protects, with the answer that write produced: a retry gets that answer back
  and stores nothing; the same key with a different request is refused.

This module knows nothing of statistics. The routers pass callables that
compute a look's analysis or build a plan; they run inside the transaction,
after the lock is taken, so they see every look committed before.
"""

from __future__ import annotations

import hashlib
import json
import os
import secrets
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, replace
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from sqlalchemy import (
    Connection,
    Engine,
    and_,
    bindparam,
    create_engine,
    event,
    func,
    insert,
    select,
    text,
    update,
)
from sqlalchemy.engine import make_url
from sqlalchemy.exc import IntegrityError, OperationalError, SQLAlchemyError

from service import migrations, tables
from service.errors import Conflict, IdempotencyConflict, NotFound, Unavailable

DEFAULT_DATABASE_URL = "sqlite:///./seqtest.db"
ENV_DATABASE_URL = "SEQTEST_DATABASE_URL"
ENV_SQLITE_SYNCHRONOUS = "SEQTEST_SQLITE_SYNCHRONOUS"
SQLITE_SYNCHRONOUS = ("FULL", "NORMAL", "EXTRA")
SQLITE_BUSY_TIMEOUT_S = 30.0

STATES = ("planned", "running", "stopped", "completed")


# --------------------------------------------------------------------------- helpers


def now() -> str:
    """Current UTC time as sortable ISO 8601 text."""
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def dump_json(obj: Any) -> str:
    """Canonical JSON text (sorted keys, no NaN/Infinity) used for everything stored."""
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), allow_nan=False)


def request_hash(method: str, path: str, body: Any) -> str:
    """Fingerprint of a request for idempotency (method, path and parsed body)."""
    payload = f"{method.upper()} {path}\n{dump_json(body)}"
    return hashlib.sha256(payload.encode("utf-8")).hexdigest()


def hash_token(token: str) -> str:
    """How an API key is kept at rest: hex SHA-256 of the token."""
    return hashlib.sha256(token.encode("utf-8")).hexdigest()


def new_id(prefix: str) -> str:
    return f"{prefix}_{secrets.token_hex(12)}"


def resolve_database_url(url: str | None = None) -> str:
    """The SQLAlchemy URL to use.

    ``None`` reads ``SEQTEST_DATABASE_URL`` and falls back to ``./seqtest.db``.
    A bare path means an SQLite file. ``postgresql://`` and ``postgres://``
    select the psycopg 3 driver.
    """
    if url is None or url == "":
        url = os.environ.get(ENV_DATABASE_URL) or DEFAULT_DATABASE_URL
    if "://" not in url:
        url = "sqlite:///" + str(Path(url).expanduser())
    for prefix in ("postgresql://", "postgres://"):
        if url.startswith(prefix):
            url = "postgresql+psycopg://" + url[len(prefix) :]
    parsed = make_url(url)
    backend = parsed.get_backend_name()
    if backend == "sqlite":
        if not parsed.database or parsed.database == ":memory:" or "mode=memory" in url:
            raise ValueError(
                f"database URL {url!r}: an in-memory SQLite database cannot be shared between "
                "connections; give a file, e.g. sqlite:///./seqtest.db"
            )
        parent = Path(parsed.database).expanduser().resolve().parent
        if not parent.is_dir():
            raise ValueError(
                f"database URL {url!r}: the directory {str(parent)!r} does not exist"
            )
    elif backend == "postgresql":
        if parsed.get_driver_name() != "psycopg":
            raise ValueError(
                f"database URL {url!r}: use postgresql:// (the psycopg 3 driver is installed)"
            )
    else:
        raise ValueError(
            f"database URL {url!r}: the service stores data in SQLite (sqlite:///path/file.db "
            "or a file path) or PostgreSQL (postgresql://user@host/db)"
        )
    return url


def make_engine(url: str | None = None) -> Engine:
    """Create the engine for ``url`` with the per-database settings the service needs."""
    url = resolve_database_url(url)
    if url.startswith("sqlite"):
        synchronous = (os.environ.get(ENV_SQLITE_SYNCHRONOUS) or "FULL").strip().upper()
        if synchronous not in SQLITE_SYNCHRONOUS:
            raise ValueError(
                f"{ENV_SQLITE_SYNCHRONOUS}={synchronous!r}: allowed are "
                f"{', '.join(SQLITE_SYNCHRONOUS)}"
            )
        engine = create_engine(
            url,
            connect_args={"check_same_thread": False, "timeout": SQLITE_BUSY_TIMEOUT_S},
            pool_size=8,
            max_overflow=32,
        )

        @event.listens_for(engine, "connect")
        def _sqlite_connect(dbapi_conn: Any, _record: Any) -> None:
            # Take transaction control away from the sqlite3 module so that the
            # "begin" hook below decides between deferred and IMMEDIATE.
            dbapi_conn.isolation_level = None
            cur = dbapi_conn.cursor()
            cur.execute("PRAGMA journal_mode=WAL")
            # FULL (default): a commit is on disk (fsync of the WAL) before the
            # client hears about it, so an acknowledged look survives a crash of
            # the machine. NORMAL: survives a crash of the process (kill -9), but
            # the last commits may be lost if the machine loses power.
            cur.execute(f"PRAGMA synchronous={synchronous}")
            cur.execute("PRAGMA foreign_keys=ON")
            cur.execute(f"PRAGMA busy_timeout={int(SQLITE_BUSY_TIMEOUT_S * 1000)}")
            cur.close()

        @event.listens_for(engine, "begin")
        def _sqlite_begin(conn: Connection) -> None:
            if conn.get_execution_options().get("seqtest_write"):
                conn.exec_driver_sql("BEGIN IMMEDIATE")
            else:
                conn.exec_driver_sql("BEGIN")

    else:
        engine = create_engine(url, pool_size=10, max_overflow=30, pool_pre_ping=True)
    return engine


# --------------------------------------------------------------------------- records


@dataclass(frozen=True)
class Principal:
    """Who is calling: the team and the API key used."""

    team_id: str
    team_name: str
    key_id: str
    key_label: str


@dataclass(frozen=True)
class KeyRecord:
    id: str
    team_id: str
    team_name: str
    label: str
    created_at: str
    revoked_at: str | None


@dataclass(frozen=True)
class Experiment:
    id: str
    team_id: str
    name: str
    description: str
    metric: str
    control_arm: str
    treatment_arm: str
    allocation: float
    max_n: float | None
    fraction: str | None
    plan_version: int
    look_count: int
    state: str
    decision: str | None
    created_at: str
    created_by: str
    updated_at: str


@dataclass(frozen=True)
class PlanVersion:
    version: int
    kind: str
    document: dict[str, Any]
    source: dict[str, Any]
    reason: str | None
    after_look: int
    recorded_at: str
    recorded_by: str


@dataclass(frozen=True)
class Look:
    number: int
    plan_version: int
    totals: dict[str, Any]
    final: bool
    decision: str
    analysis: dict[str, Any]
    recorded_at: str
    recorded_by: str


@dataclass(frozen=True)
class NewExperiment:
    name: str
    description: str
    metric: str
    control_arm: str
    treatment_arm: str
    allocation: float
    max_n: float | None = None
    fraction: str | None = None


@dataclass(frozen=True)
class NewPlan:
    """A plan ready to store: its document and what it was built from."""

    kind: str
    document: dict[str, Any]
    source: dict[str, Any]


@dataclass(frozen=True)
class NewLook:
    """What the monitor computed for a look, ready to store."""

    totals: dict[str, Any]
    final: bool
    decision: str
    state: str
    analysis: dict[str, Any]


@dataclass(frozen=True)
class Idempotency:
    key: str
    request_hash: str


@dataclass(frozen=True)
class Stored:
    """The answer of a write: status, JSON body, and whether it is a replay."""

    status_code: int
    body: dict[str, Any]
    replayed: bool = False


def _experiment(row: Any) -> Experiment:
    m = row._mapping
    return Experiment(
        id=m["id"],
        team_id=m["team_id"],
        name=m["name"],
        description=m["description"],
        metric=m["metric"],
        control_arm=m["control_arm"],
        treatment_arm=m["treatment_arm"],
        allocation=float(m["allocation"]),
        max_n=None if m["max_n"] is None else float(m["max_n"]),
        fraction=m["fraction"],
        plan_version=int(m["plan_version"]),
        look_count=int(m["look_count"]),
        state=m["state"],
        decision=m["decision"],
        created_at=m["created_at"],
        created_by=m["created_by"],
        updated_at=m["updated_at"],
    )


def _plan_version(row: Any) -> PlanVersion:
    m = row._mapping
    return PlanVersion(
        version=int(m["version"]),
        kind=m["kind"],
        document=json.loads(m["document"]),
        source=json.loads(m["source"]),
        reason=m["reason"],
        after_look=int(m["after_look"]),
        recorded_at=m["recorded_at"],
        recorded_by=m["recorded_by"],
    )


def _look(row: Any) -> Look:
    m = row._mapping
    return Look(
        number=int(m["number"]),
        plan_version=int(m["plan_version"]),
        totals=json.loads(m["totals"]),
        final=bool(m["final"]),
        decision=m["decision"],
        analysis=json.loads(m["analysis"]),
        recorded_at=m["recorded_at"],
        recorded_by=m["recorded_by"],
    )


# ----------------------------------------------------------- statements on the hot path
# Built once with bound parameters: a look is a handful of statements, and
# building them anew each time costs more than running them on SQLite.

_AUTH = (
    select(
        tables.api_keys.c.id, tables.api_keys.c.label, tables.api_keys.c.team_id,
        tables.teams.c.name,
    )
    .join(tables.teams, tables.teams.c.id == tables.api_keys.c.team_id)
    .where(
        tables.api_keys.c.key_hash == bindparam("key_hash"),
        tables.api_keys.c.revoked_at.is_(None),
    )
)
_LOCK_EXPERIMENT = (
    select(tables.experiments)
    .where(
        tables.experiments.c.id == bindparam("exp_id"),
        tables.experiments.c.team_id == bindparam("team_id"),
    )
    .with_for_update()
)
_LOOK_TOTALS = (
    select(tables.looks.c.totals)
    .where(tables.looks.c.experiment_id == bindparam("exp_id"))
    .order_by(tables.looks.c.number)
)
_PLAN = select(tables.plan_versions).where(
    tables.plan_versions.c.experiment_id == bindparam("exp_id"),
    tables.plan_versions.c.version == bindparam("version"),
)
_REPLAY = select(
    tables.idempotency_keys.c.request_hash,
    tables.idempotency_keys.c.status_code,
    tables.idempotency_keys.c.response,
).where(
    tables.idempotency_keys.c.team_id == bindparam("team_id"),
    tables.idempotency_keys.c.key == bindparam("key"),
)
_INSERT_LOOK = insert(tables.looks)
_UPDATE_AFTER_LOOK = (
    update(tables.experiments)
    .where(tables.experiments.c.id == bindparam("exp_id"))
    .values(
        look_count=bindparam("look_count"),
        state=bindparam("state"),
        decision=bindparam("decision"),
        updated_at=bindparam("updated_at"),
    )
)


# --------------------------------------------------------------------------- storage


class Storage:
    """All reads and writes of the service, on one SQLAlchemy engine."""

    def __init__(self, database_url: str | None = None, *, migrate: bool = True) -> None:
        self.url = resolve_database_url(database_url)
        self.engine = make_engine(self.url)
        self.schema_version = migrations.migrate(self.engine) if migrate else 0

    @property
    def dialect(self) -> str:
        return self.engine.dialect.name

    def close(self) -> None:
        self.engine.dispose()

    # -- transactions -------------------------------------------------------------

    @contextmanager
    def _read(self) -> Iterator[Connection]:
        with self.engine.connect() as conn:
            if self.dialect == "postgresql":
                # one snapshot for every statement of the read
                conn = conn.execution_options(isolation_level="REPEATABLE READ")
            with conn.begin():
                yield conn

    @contextmanager
    def _write(self) -> Iterator[Connection]:
        try:
            with self.engine.connect() as conn:
                conn = conn.execution_options(seqtest_write=True)
                with conn.begin():
                    yield conn
        except OperationalError as exc:
            if self.dialect == "sqlite" and "locked" in str(exc).lower():
                raise Unavailable(
                    "The database stayed busy for "
                    f"{SQLITE_BUSY_TIMEOUT_S:.0f} s; nothing was stored. Retry the request.",
                    headers={"Retry-After": "1"},
                ) from exc
            raise

    def ping(self) -> None:
        """Run one trivial query; :class:`Unavailable` when the database is unreachable."""
        try:
            with self.engine.connect() as conn:
                conn.execute(text("SELECT 1"))
                conn.rollback()
        except SQLAlchemyError as exc:
            raise Unavailable(
                f"The {self.dialect} database cannot be reached: {type(exc).__name__}."
            ) from exc

    # -- teams and keys -----------------------------------------------------------

    def create_key(self, team_name: str, label: str = "") -> tuple[KeyRecord, str]:
        """Create an API key for ``team_name`` (creating the team if new).

        Returns the record and the token; the token is shown only here, the
        database keeps only its hash.
        """
        team_name = team_name.strip()
        if not team_name or len(team_name) > 200:
            raise ValueError(f"team name {team_name!r}: give 1 to 200 characters")
        if len(label) > 200:
            raise ValueError("label: give at most 200 characters")
        token = "sqt_" + secrets.token_urlsafe(32)
        ts = now()
        with self._write() as conn:
            team = conn.execute(
                select(tables.teams).where(tables.teams.c.name == team_name)
            ).first()
            if team is None:
                team_id = new_id("team")
                conn.execute(
                    insert(tables.teams).values(id=team_id, name=team_name, created_at=ts)
                )
            else:
                team_id = team._mapping["id"]
            key_id = new_id("key")
            conn.execute(
                insert(tables.api_keys).values(
                    id=key_id,
                    team_id=team_id,
                    key_hash=hash_token(token),
                    label=label,
                    created_at=ts,
                    revoked_at=None,
                )
            )
        return KeyRecord(key_id, team_id, team_name, label, ts, None), token

    def revoke_key(self, key_id: str) -> KeyRecord | None:
        """Revoke a key (idempotent); ``None`` when no key has that id."""
        with self._write() as conn:
            conn.execute(
                update(tables.api_keys)
                .where(
                    and_(tables.api_keys.c.id == key_id, tables.api_keys.c.revoked_at.is_(None))
                )
                .values(revoked_at=now())
            )
            rows = self._keys(conn, key_id=key_id)
        return rows[0] if rows else None

    def list_keys(self, team_name: str | None = None) -> list[KeyRecord]:
        with self._read() as conn:
            return self._keys(conn, team_name=team_name)

    @staticmethod
    def _keys(
        conn: Connection, *, key_id: str | None = None, team_name: str | None = None
    ) -> list[KeyRecord]:
        k, t = tables.api_keys, tables.teams
        q = select(k, t.c.name.label("team_name")).join(t, t.c.id == k.c.team_id)
        if key_id is not None:
            q = q.where(k.c.id == key_id)
        if team_name is not None:
            q = q.where(t.c.name == team_name)
        q = q.order_by(k.c.created_at, k.c.id)
        out = []
        for row in conn.execute(q):
            m = row._mapping
            out.append(
                KeyRecord(
                    m["id"], m["team_id"], m["team_name"], m["label"], m["created_at"],
                    m["revoked_at"],
                )
            )
        return out

    def authenticate(self, token: str) -> Principal | None:
        """The principal for a live token, or ``None``."""
        with self.engine.connect() as conn:
            row = conn.execute(_AUTH, {"key_hash": hash_token(token)}).first()
            conn.rollback()
        if row is None:
            return None
        return Principal(team_id=row[2], team_name=row[3], key_id=row[0], key_label=row[1])

    # -- idempotency --------------------------------------------------------------

    @staticmethod
    def _replay(conn: Connection, team_id: str, idem: Idempotency) -> Stored | None:
        row = conn.execute(_REPLAY, {"team_id": team_id, "key": idem.key}).first()
        if row is None:
            return None
        if row[0] != idem.request_hash:
            raise IdempotencyConflict(
                f"The Idempotency-Key {idem.key!r} was already used for a different request "
                "(another body or route). Use a new key for a new request, or resend the "
                "original request unchanged to get its answer again."
            )
        return Stored(int(row[1]), json.loads(row[2]), replayed=True)

    def _experiment_write(
        self,
        principal: Principal,
        exp_id: str,
        idem: Idempotency | None,
        work: Callable[[Connection, Experiment], tuple[int, dict[str, Any]]],
    ) -> Stored:
        """:meth:`_idempotent_write` of ``work`` on one experiment, locked first."""
        locked: dict[str, Experiment] = {}

        def lock(conn: Connection) -> None:
            locked["exp"] = self._lock_experiment(conn, principal.team_id, exp_id)

        return self._idempotent_write(principal.team_id, idem,
                                      lambda conn: work(conn, locked["exp"]), lock=lock)

    def _idempotent_write(
        self,
        team_id: str,
        idem: Idempotency | None,
        work: Callable[[Connection], tuple[int, dict[str, Any]]],
        lock: Callable[[Connection], Any] | None = None,
    ) -> Stored:
        """Run ``work`` in one write transaction, guarded by ``idem``.

        ``lock`` (optional) runs first in the transaction; the stored answers
        are checked again after it, so that a retry which waited for the lock
        behind its own first attempt gets that attempt's answer.
        """
        if idem is not None:
            with self.engine.connect() as conn:
                prior = self._replay(conn, team_id, idem)
                conn.rollback()
            if prior is not None:
                return prior
        try:
            with self._write() as conn:
                if lock is not None:
                    lock(conn)
                if idem is not None:
                    prior = self._replay(conn, team_id, idem)
                    if prior is not None:
                        return prior
                status, body = work(conn)
                if idem is not None:
                    conn.execute(
                        insert(tables.idempotency_keys).values(
                            team_id=team_id,
                            key=idem.key,
                            request_hash=idem.request_hash,
                            status_code=status,
                            # key order kept, so a replay is byte-for-byte the first answer
                            response=json.dumps(body, separators=(",", ":"), allow_nan=False),
                            created_at=now(),
                        )
                    )
            return Stored(status, body)
        except IntegrityError:
            # Another request with the same key committed between our check and
            # our insert (possible on PostgreSQL, where writers to different
            # experiments run side by side). Our transaction is rolled back;
            # answer with what the first one stored.
            if idem is None:
                raise
            with self.engine.connect() as conn:
                prior = self._replay(conn, team_id, idem)
                conn.rollback()
            if prior is None:
                raise
            return prior

    # -- experiments --------------------------------------------------------------

    def create_experiment(
        self,
        principal: Principal,
        new: NewExperiment,
        plan: NewPlan,
        render: Callable[[Experiment, PlanVersion], dict[str, Any]],
        idem: Idempotency | None = None,
    ) -> Stored:
        def work(conn: Connection) -> tuple[int, dict[str, Any]]:
            ts = now()
            exp_id = new_id("exp")
            conn.execute(
                insert(tables.experiments).values(
                    id=exp_id,
                    team_id=principal.team_id,
                    name=new.name,
                    description=new.description,
                    metric=new.metric,
                    control_arm=new.control_arm,
                    treatment_arm=new.treatment_arm,
                    allocation=new.allocation,
                    max_n=new.max_n,
                    fraction=new.fraction,
                    plan_version=1,
                    look_count=0,
                    state="planned",
                    decision=None,
                    created_at=ts,
                    created_by=principal.key_id,
                    updated_at=ts,
                )
            )
            conn.execute(
                insert(tables.plan_versions).values(
                    experiment_id=exp_id,
                    version=1,
                    kind=plan.kind,
                    document=dump_json(plan.document),
                    source=dump_json(plan.source),
                    reason=None,
                    after_look=0,
                    recorded_at=ts,
                    recorded_by=principal.key_id,
                )
            )
            exp = self._lock_experiment(conn, principal.team_id, exp_id)
            pv = self._plan(conn, exp_id, 1)
            return 201, render(exp, pv)

        return self._idempotent_write(principal.team_id, idem, work)

    @staticmethod
    def _lock_experiment(conn: Connection, team_id: str, exp_id: str) -> Experiment:
        row = conn.execute(_LOCK_EXPERIMENT, {"exp_id": exp_id, "team_id": team_id}).first()
        if row is None:
            raise NotFound(
                f"No experiment {exp_id!r} for your team; list yours with GET /v1/experiments."
            )
        return _experiment(row)

    @staticmethod
    def _plan(conn: Connection, exp_id: str, version: int) -> PlanVersion:
        row = conn.execute(_PLAN, {"exp_id": exp_id, "version": version}).one()
        return _plan_version(row)

    @staticmethod
    def _plans(conn: Connection, exp_id: str) -> list[PlanVersion]:
        p = tables.plan_versions
        rows = conn.execute(
            select(p).where(p.c.experiment_id == exp_id).order_by(p.c.version)
        ).all()
        return [_plan_version(r) for r in rows]

    @staticmethod
    def _look_totals(conn: Connection, exp_id: str) -> list[dict[str, Any]]:
        """The totals of every stored look, in order (without their analyses)."""
        rows = conn.execute(_LOOK_TOTALS, {"exp_id": exp_id}).scalars().all()
        return [json.loads(r) for r in rows]

    @staticmethod
    def _looks(conn: Connection, exp_id: str) -> list[Look]:
        lk = tables.looks
        rows = conn.execute(
            select(lk).where(lk.c.experiment_id == exp_id).order_by(lk.c.number)
        ).all()
        return [_look(r) for r in rows]

    def get_experiment(
        self, team_id: str, exp_id: str
    ) -> tuple[Experiment, list[PlanVersion], list[Look]]:
        e = tables.experiments
        with self._read() as conn:
            row = conn.execute(
                select(e).where(and_(e.c.id == exp_id, e.c.team_id == team_id))
            ).first()
            if row is None:
                raise NotFound(
                    f"No experiment {exp_id!r} for your team; "
                    "list yours with GET /v1/experiments."
                )
            return _experiment(row), self._plans(conn, exp_id), self._looks(conn, exp_id)

    def list_experiments(
        self, team_id: str, *, state: str | None = None, limit: int = 50, offset: int = 0
    ) -> tuple[list[Experiment], int]:
        e = tables.experiments
        cond = e.c.team_id == team_id
        if state is not None:
            cond = and_(cond, e.c.state == state)
        with self._read() as conn:
            total = conn.execute(select(func.count()).select_from(e).where(cond)).scalar_one()
            rows = conn.execute(
                select(e)
                .where(cond)
                .order_by(e.c.created_at.desc(), e.c.id.desc())
                .limit(limit)
                .offset(offset)
            ).all()
        return [_experiment(r) for r in rows], int(total)

    # -- looks --------------------------------------------------------------------

    def append_look(
        self,
        principal: Principal,
        exp_id: str,
        compute: Callable[[Experiment, PlanVersion, list[dict[str, Any]]], NewLook],
        render: Callable[[Experiment, Look], dict[str, Any]],
        idem: Idempotency | None = None,
    ) -> Stored:
        """Append the next look of ``exp_id``.

        ``compute`` gets the experiment, its current plan and the totals of every
        stored look, in order (under the lock), and returns what to store; it may raise a
        :class:`service.errors.ServiceError`, which stores nothing.
        """

        def work(conn: Connection, exp: Experiment) -> tuple[int, dict[str, Any]]:
            if exp.state in ("stopped", "completed"):
                raise Conflict(
                    f"Experiment {exp_id!r} is {exp.state} (decision {exp.decision!r} at look "
                    f"{exp.look_count}); it accepts no further looks."
                )
            prior = self._look_totals(conn, exp_id)
            if len(prior) != exp.look_count:  # pragma: no cover - guarded by the lock
                raise RuntimeError("look count out of step with stored looks")
            plan = self._plan(conn, exp_id, exp.plan_version)
            new = compute(exp, plan, prior)
            if new.state not in STATES:
                raise ValueError(f"unknown experiment state {new.state!r}")
            ts = now()
            number = exp.look_count + 1
            conn.execute(
                _INSERT_LOOK,
                {
                    "experiment_id": exp_id,
                    "number": number,
                    "plan_version": plan.version,
                    "totals": dump_json(new.totals),
                    "final": new.final,
                    "decision": new.decision,
                    "analysis": dump_json(new.analysis),
                    "recorded_at": ts,
                    "recorded_by": principal.key_id,
                },
            )
            conn.execute(
                _UPDATE_AFTER_LOOK,
                {
                    "exp_id": exp_id,
                    "look_count": number,
                    "state": new.state,
                    "decision": new.decision,
                    "updated_at": ts,
                },
            )
            exp_after = replace(
                exp, look_count=number, state=new.state, decision=new.decision, updated_at=ts
            )
            look = Look(
                number=number,
                plan_version=plan.version,
                totals=new.totals,
                final=new.final,
                decision=new.decision,
                analysis=new.analysis,
                recorded_at=ts,
                recorded_by=principal.key_id,
            )
            return 201, render(exp_after, look)

        return self._experiment_write(principal, exp_id, idem, work)

    # -- amendments ---------------------------------------------------------------

    def amend_plan(
        self,
        principal: Principal,
        exp_id: str,
        plan: NewPlan,
        reason: str,
        render: Callable[[Experiment, PlanVersion], dict[str, Any]],
        idem: Idempotency | None = None,
        check: Callable[[Experiment], None] | None = None,
    ) -> Stored:
        """Record a new plan version for ``exp_id``; earlier versions stay as they were.

        ``check`` (optional) sees the experiment under the lock and may refuse
        the amendment by raising.
        """

        def work(conn: Connection, exp: Experiment) -> tuple[int, dict[str, Any]]:
            if exp.state in ("stopped", "completed"):
                raise Conflict(
                    f"Experiment {exp_id!r} is {exp.state}; its plan can no longer be amended."
                )
            if check is not None:
                check(exp)
            ts = now()
            version = exp.plan_version + 1
            conn.execute(
                insert(tables.plan_versions).values(
                    experiment_id=exp_id,
                    version=version,
                    kind=plan.kind,
                    document=dump_json(plan.document),
                    source=dump_json(plan.source),
                    reason=reason,
                    after_look=exp.look_count,
                    recorded_at=ts,
                    recorded_by=principal.key_id,
                )
            )
            e = tables.experiments
            conn.execute(
                update(e).where(e.c.id == exp_id).values(plan_version=version, updated_at=ts)
            )
            exp_after = replace(exp, plan_version=version, updated_at=ts)
            return 201, render(exp_after, self._plan(conn, exp_id, version))

        return self._experiment_write(principal, exp_id, idem, work)
