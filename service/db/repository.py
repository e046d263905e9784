"""Plain reads and writes of the service's tables, on a connection the caller holds.

No statistics and no callbacks: the use cases open one transaction
(:meth:`service.db.engine.Database.write`), call these functions and the library
adapter in turn, and commit. Locking:

- SQLite: the write transaction began with ``BEGIN IMMEDIATE``, so it holds the
  database's write lock from its first statement;
- PostgreSQL: :func:`lock_experiment` takes ``SELECT ... FOR UPDATE`` on the
  experiment's row; writers to one experiment queue, others run side by side.
"""

from __future__ import annotations

import hashlib
import json
import secrets
from datetime import datetime, timedelta, timezone
from typing import Any

from sqlalchemy import (
    Connection,
    and_,
    bindparam,
    case,
    delete,
    func,
    insert,
    select,
    tuple_,
    update,
)

from service.db import tables
from service.db.records import Experiment, KeyRecord, Look, PlanVersion, Principal, Replay

# --------------------------------------------------------------------------- helpers


def now() -> str:
    """Current UTC time as sortable ISO 8601 text."""
    return datetime.now(timezone.utc).strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def ago(seconds: float) -> str:
    """The UTC time ``seconds`` ago, as sortable ISO 8601 text."""
    t = datetime.now(timezone.utc) - timedelta(seconds=seconds)
    return t.strftime("%Y-%m-%dT%H:%M:%S.%fZ")


def dump_json(obj: Any) -> str:
    """Canonical JSON text (sorted keys, no NaN/Infinity) used for everything stored."""
    return json.dumps(obj, sort_keys=True, separators=(",", ":"), allow_nan=False)


def dump_answer(obj: Any) -> str:
    """JSON text of an answer with its key order kept (a replay is byte-for-byte)."""
    return json.dumps(obj, separators=(",", ":"), allow_nan=False)


def request_hash(method: str, path: str, body: Any) -> str:
    """Fingerprint of a request for idempotency (method, path and parsed body)."""
    payload = f"{method.upper()} {path}\n{dump_json(body)}"
    return hashlib.sha256(payload.encode("utf-8")).hexdigest()


def hash_token(token: str) -> str:
    """How an API key is kept at rest: hex SHA-256 of the token."""
    return hashlib.sha256(token.encode("utf-8", "surrogatepass")).hexdigest()


def new_id(prefix: str) -> str:
    return f"{prefix}_{secrets.token_hex(12)}"


# --------------------------------------------------------------------------- rows


def _experiment(row: Any) -> Experiment:
    m = row._mapping
    return Experiment(
        id=m["id"], team_id=m["team_id"], name=m["name"], description=m["description"],
        metric_kind=m["metric"], control_arm=m["control_arm"],
        treatment_arm=m["treatment_arm"], allocation=float(m["allocation"]),
        max_n=None if m["max_n"] is None else float(m["max_n"]),
        fraction_basis=m["fraction"], plan_version=int(m["plan_version"]),
        look_count=int(m["look_count"]), state=m["state"], decision=m["decision"],
        created_at=m["created_at"], created_by=m["created_by"], updated_at=m["updated_at"],
        arms=_json_or_none(m, "arms"), metrics=_json_or_none(m, "metrics"),
    )


def _json_or_none(m: Any, name: str) -> Any:
    value = m.get(name)
    return None if value is None else json.loads(value)


def _plan_version(row: Any) -> PlanVersion:
    m = row._mapping
    stored = m["boundaries"]
    return PlanVersion(
        version=int(m["version"]), kind=m["kind"], document=json.loads(m["document"]),
        source=json.loads(m["source"]), reason=m["reason"], after_look=int(m["after_look"]),
        recorded_at=m["recorded_at"], recorded_by=m["recorded_by"],
        boundaries=None if stored is None else json.loads(stored),
        boundaries_stored=stored is not None,
    )


def _look(row: Any) -> Look:
    m = row._mapping
    number = int(m["number"])
    analysis = json.loads(m["analysis"])
    if m["result"] is not None:
        result, summary = json.loads(m["result"]), analysis
    else:  # a v2 row: the full analysis of every look up to this one
        rows = analysis.get("looks") if isinstance(analysis, dict) else None
        ok = isinstance(rows, list) and 0 < number <= len(rows)
        result = rows[number - 1] if ok else None  # type: ignore[index]
        summary = {k: v for k, v in analysis.items() if k != "looks"}
    return Look(
        number=number, plan_version=int(m["plan_version"]), totals=json.loads(m["totals"]),
        final=bool(m["final"]), decision=m["decision"], state=m["state"], result=result,
        summary=summary, recorded_at=m["recorded_at"], recorded_by=m["recorded_by"],
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
_GET_EXPERIMENT = select(tables.experiments).where(
    tables.experiments.c.id == bindparam("exp_id"),
    tables.experiments.c.team_id == bindparam("team_id"),
)
_lk = tables.looks
# Totals and own result of every stored look (v2 rows: the full analysis instead).
_LOOK_HISTORY = (
    select(_lk.c.number, _lk.c.totals, _lk.c.result,
           case((_lk.c.result.is_(None), _lk.c.analysis), else_=None).label("legacy"))
    .where(_lk.c.experiment_id == bindparam("exp_id"))
    .order_by(_lk.c.number)
)
_PLAN = select(tables.plan_versions).where(
    tables.plan_versions.c.experiment_id == bindparam("exp_id"),
    tables.plan_versions.c.version == bindparam("version"),
)
_REPLAY = select(tables.idempotency_keys).where(
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


# --------------------------------------------------------------------------- keys


def authenticate(conn: Connection, token: str) -> Principal | None:
    row = conn.execute(_AUTH, {"key_hash": hash_token(token)}).first()
    if row is None:
        return None
    return Principal(team_id=row[2], team_name=row[3], key_id=row[0], key_label=row[1])


def create_key(conn: Connection, team_name: str, label: str, token: str) -> KeyRecord:
    ts = now()
    team = conn.execute(select(tables.teams).where(tables.teams.c.name == team_name)).first()
    if team is None:
        team_id = new_id("team")
        conn.execute(insert(tables.teams).values(id=team_id, name=team_name, created_at=ts))
    else:
        team_id = team._mapping["id"]
    key_id = new_id("key")
    conn.execute(insert(tables.api_keys).values(
        id=key_id, team_id=team_id, key_hash=hash_token(token), label=label,
        created_at=ts, revoked_at=None,
    ))
    return KeyRecord(key_id, team_id, team_name, label, ts, None)


def revoke_key(conn: Connection, key_id: str) -> KeyRecord | None:
    conn.execute(
        update(tables.api_keys)
        .where(and_(tables.api_keys.c.id == key_id, tables.api_keys.c.revoked_at.is_(None)))
        .values(revoked_at=now())
    )
    rows = list_keys(conn, key_id=key_id)
    return rows[0] if rows else None


def list_keys(conn: Connection, *, key_id: str | None = None,
              team_name: str | None = None) -> list[KeyRecord]:
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
        out.append(KeyRecord(m["id"], m["team_id"], m["team_name"], m["label"],
                             m["created_at"], m["revoked_at"]))
    return out


# --------------------------------------------------------------------------- idempotency


def find_replay(conn: Connection, team_id: str, key: str) -> Replay | None:
    row = conn.execute(_REPLAY, {"team_id": team_id, "key": key}).first()
    if row is None:
        return None
    m = row._mapping
    return Replay(
        request_hash=m["request_hash"], status_code=int(m["status_code"]),
        body=None if m["look_number"] is not None else json.loads(m["response"]),
        experiment_id=m["experiment_id"],
        look_number=None if m["look_number"] is None else int(m["look_number"]),
        created_at=m["created_at"],
    )


def forget_key(conn: Connection, team_id: str, key: str) -> None:
    ik = tables.idempotency_keys
    conn.execute(delete(ik).where(and_(ik.c.team_id == team_id, ik.c.key == key)))


def remember_key(conn: Connection, team_id: str, key: str, request_hash_: str, status: int,
                 body: dict[str, Any] | None, *, experiment_id: str | None = None,
                 look_number: int | None = None) -> None:
    conn.execute(insert(tables.idempotency_keys).values(
        team_id=team_id, key=key, request_hash=request_hash_, status_code=status,
        response="" if body is None else dump_answer(body), created_at=now(),
        experiment_id=experiment_id, look_number=look_number,
    ))


def purge_keys(conn: Connection, older_than: str, limit: int = 1000) -> int:
    """Delete up to ``limit`` idempotency keys created before ``older_than`` (indexed)."""
    ik = tables.idempotency_keys
    old = (select(ik.c.team_id, ik.c.key).where(ik.c.created_at < older_than)
           .order_by(ik.c.created_at).limit(limit))
    if conn.dialect.name == "sqlite":
        victims = conn.execute(old).all()
        for team_id, key in victims:
            conn.execute(delete(ik).where(and_(ik.c.team_id == team_id, ik.c.key == key)))
        return len(victims)
    res = conn.execute(delete(ik).where(tuple_(ik.c.team_id, ik.c.key).in_(old.subquery()
                                                                           .select())))
    return int(res.rowcount or 0)


# --------------------------------------------------------------------------- experiments


def insert_experiment(conn: Connection, exp: Experiment) -> None:
    conn.execute(insert(tables.experiments).values(
        id=exp.id, team_id=exp.team_id, name=exp.name, description=exp.description,
        metric=exp.metric_kind, control_arm=exp.control_arm, treatment_arm=exp.treatment_arm,
        allocation=exp.allocation, max_n=exp.max_n, fraction=exp.fraction_basis,
        plan_version=exp.plan_version, look_count=exp.look_count, state=exp.state,
        decision=exp.decision, created_at=exp.created_at, created_by=exp.created_by,
        updated_at=exp.updated_at,
        arms=None if exp.arms is None else dump_json(exp.arms),
        metrics=None if exp.metrics is None else dump_json(exp.metrics),
    ))


def lock_experiment(conn: Connection, team_id: str, exp_id: str) -> Experiment | None:
    """The experiment, locked for this transaction (``FOR UPDATE`` on PostgreSQL)."""
    row = conn.execute(_LOCK_EXPERIMENT, {"exp_id": exp_id, "team_id": team_id}).first()
    return None if row is None else _experiment(row)


def get_experiment(conn: Connection, team_id: str, exp_id: str) -> Experiment | None:
    row = conn.execute(_GET_EXPERIMENT, {"exp_id": exp_id, "team_id": team_id}).first()
    return None if row is None else _experiment(row)


def list_experiments(conn: Connection, team_id: str, *, state: str | None, limit: int,
                     offset: int) -> tuple[list[Experiment], int]:
    e = tables.experiments
    cond = e.c.team_id == team_id
    if state is not None:
        cond = and_(cond, e.c.state == state)
    total = conn.execute(select(func.count()).select_from(e).where(cond)).scalar_one()
    rows = conn.execute(
        select(e).where(cond).order_by(e.c.created_at.desc(), e.c.id.desc())
        .limit(limit).offset(offset)
    ).all()
    return [_experiment(r) for r in rows], int(total)


def update_after_look(conn: Connection, exp_id: str, look_count: int, state: str,
                      decision: str, updated_at: str) -> None:
    conn.execute(_UPDATE_AFTER_LOOK, {"exp_id": exp_id, "look_count": look_count,
                                      "state": state, "decision": decision,
                                      "updated_at": updated_at})


def update_after_amendment(conn: Connection, exp_id: str, version: int, max_n: float | None,
                           updated_at: str, layout: dict[str, Any] | None = None) -> None:
    """The plan version in force; ``layout`` (``arms``, ``metrics`` and ``metric_kind``
    of an experiment plan) when an amendment before the first look changed them."""
    e = tables.experiments
    values: dict[str, Any] = {"plan_version": version, "max_n": max_n,
                              "updated_at": updated_at}
    if layout is not None:
        values.update(arms=dump_json(layout["arms"]), metrics=dump_json(layout["metrics"]),
                      metric=layout["metric_kind"])
    conn.execute(update(e).where(e.c.id == exp_id).values(**values))


# --------------------------------------------------------------------------- plan versions


def insert_plan_version(conn: Connection, exp_id: str, pv: PlanVersion) -> None:
    conn.execute(insert(tables.plan_versions).values(
        experiment_id=exp_id, version=pv.version, kind=pv.kind,
        document=dump_json(pv.document), source=dump_json(pv.source), reason=pv.reason,
        after_look=pv.after_look, recorded_at=pv.recorded_at, recorded_by=pv.recorded_by,
        boundaries=dump_json(pv.boundaries),
    ))


def plan_version(conn: Connection, exp_id: str, version: int) -> PlanVersion:
    return _plan_version(conn.execute(_PLAN, {"exp_id": exp_id, "version": version}).one())


def plan_versions(conn: Connection, exp_id: str, *, offset: int = 0,
                  limit: int | None = None) -> list[PlanVersion]:
    p = tables.plan_versions
    q = select(p).where(p.c.experiment_id == exp_id).order_by(p.c.version).offset(offset)
    if limit is not None:
        q = q.limit(limit)
    return [_plan_version(r) for r in conn.execute(q).all()]


# --------------------------------------------------------------------------- looks


def look_history(conn: Connection, exp_id: str) -> tuple[list[dict[str, Any]],
                                                         list[dict[str, Any] | None]]:
    """Totals (keyed by role) and own results of every stored look, in order."""
    totals, results = [], []
    for number, t, result, legacy in conn.execute(_LOOK_HISTORY, {"exp_id": exp_id}):
        totals.append(json.loads(t))
        if result is not None:
            results.append(json.loads(result))
        else:
            rows = json.loads(legacy).get("looks") or []
            results.append(rows[number - 1] if 0 < number <= len(rows) else None)
    return totals, results


def insert_look(conn: Connection, exp_id: str, look: Look,
                texts: dict[str, str] | None = None) -> None:
    """``texts``: the ``result`` and ``analysis`` columns already written by
    :func:`dump_json` (of ``look.result`` and ``look.summary``), not written again."""
    done = texts or {}
    conn.execute(_INSERT_LOOK, {
        "experiment_id": exp_id, "number": look.number, "plan_version": look.plan_version,
        "totals": dump_json(look.totals), "final": look.final, "decision": look.decision,
        "analysis": done.get("analysis") or dump_json(look.summary),
        "result": done.get("result") or dump_json(look.result),
        "state": look.state, "recorded_at": look.recorded_at,
        "recorded_by": look.recorded_by,
    })


def looks(conn: Connection, exp_id: str, *, offset: int = 0,
          limit: int | None = None) -> list[Look]:
    q = select(_lk).where(_lk.c.experiment_id == exp_id).order_by(_lk.c.number).offset(offset)
    if limit is not None:
        q = q.limit(limit)
    return [_look(r) for r in conn.execute(q).all()]


def look(conn: Connection, exp_id: str, number: int) -> Look | None:
    row = conn.execute(select(_lk).where(and_(_lk.c.experiment_id == exp_id,
                                              _lk.c.number == number))).first()
    return None if row is None else _look(row)


def look_results(conn: Connection, exp_id: str, upto: int) -> list[dict[str, Any] | None]:
    """The own results of looks 1..``upto``, in order."""
    _totals, results = look_history(conn, exp_id)
    return results[:upto]
