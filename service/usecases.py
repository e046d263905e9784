"""What the service does, one function per action, each in the transactions it opens
(a look and an amendment read first, outside the write lock, then write).

The write path of a look: in a read transaction, read the experiment, its stored
looks and its plan in force (the parsed plan comes from a process-local cache of
immutable plan versions) and ask the library for the analysis, outside any write
lock; then open the write transaction (the experiment locked), check the idempotency
key, check that the experiment row is unchanged since the read (else analyse again),
store the new look's own result once, update the experiment, render the answer,
remember the key, commit. No callbacks go into storage; storage knows no statistics.

Requests arrive here as plain dataclasses (the HTTP layer's schemas are above this
module and are not imported by it).
"""

from __future__ import annotations

import json
import secrets
import threading
import time
from dataclasses import dataclass, field, replace
from typing import Any

from sqlalchemy import Connection
from sqlalchemy.exc import IntegrityError

from service import library, views
from service.db import repository as repo
from service.db.engine import Database
from service.db.records import Experiment, KeyRecord, Look, PlanVersion, Principal
from service.errors import (
    IdempotencyConflict,
    NotFound,
    StateConflict,
    Unavailable,
    Unprocessable,
)

# ----------------------------------------------------------------------- requests


@dataclass(frozen=True)
class Idem:
    """An ``Idempotency-Key`` and the fingerprint of the request it came with."""

    key: str
    request_hash: str


@dataclass(frozen=True)
class PlanRequest:
    """A plan as posted: a document, or inputs to design it."""

    document: dict[str, Any] | None = None
    design_kind: str | None = None  # None: the previous version's kind (amendments)
    design_inputs: dict[str, Any] | None = None


@dataclass(frozen=True)
class CreateRequest:
    name: str
    description: str
    metric_kind: str | None
    control_arm: str
    treatment_arm: str
    allocation: float
    max_n: float | None
    fraction_basis: str | None
    plan: PlanRequest
    deprecations: list[str] = field(default_factory=list)
    # the request's own fields as given (an experiment plan checks them against its own):
    # metric_kind, arms (an object or a list), allocation, max_n, fraction_basis
    given: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class AmendRequest:
    reason: str
    plan: PlanRequest
    max_n: float | None = None
    deprecations: list[str] = field(default_factory=list)


@dataclass(frozen=True)
class LookRequest:
    totals: dict[str, dict[str, Any]]
    final: bool = False
    daily_traffic: float | None = None


@dataclass(frozen=True)
class Answer:
    """The answer of a write: status, JSON body, and whether it is a replay."""

    status_code: int
    body: dict[str, Any]
    replayed: bool = False


# ----------------------------------------------------------------------- idempotency

_PURGE_EVERY_S = 60.0
_purge_lock = threading.Lock()
_last_purge = 0.0


def _maybe_purge(conn: Connection, ttl_s: float) -> None:
    """Delete expired idempotency keys, at most once a minute per process (indexed by
    age, at most 1000 rows at a time, inside a write that holds the lock anyway)."""
    global _last_purge
    now = time.monotonic()
    with _purge_lock:
        if now - _last_purge < _PURGE_EVERY_S:
            return
        _last_purge = now
    repo.purge_keys(conn, repo.ago(ttl_s))


def _replay(db: Database, conn: Connection, team_id: str, idem: Idem) -> Answer | None:
    """The stored answer for ``idem``, or None (never used, or expired and forgotten)."""
    stored = repo.find_replay(conn, team_id, idem.key)
    if stored is None:
        return None
    if stored.created_at < repo.ago(db.settings.idempotency_ttl_s):
        return None  # expired: the caller forgets it in its write
    if stored.request_hash != idem.request_hash:
        raise IdempotencyConflict(
            f"The Idempotency-Key {idem.key!r} was already used for a different request "
            "(another body or route). Use a new key for a new request, or resend the "
            "original request unchanged to get its answer again."
        )
    if stored.body is not None:
        return Answer(stored.status_code, stored.body, replayed=True)
    assert stored.experiment_id is not None and stored.look_number is not None
    exp = repo.get_experiment(conn, team_id, stored.experiment_id)
    lk = repo.look(conn, stored.experiment_id, stored.look_number)
    if exp is None or lk is None:  # pragma: no cover - looks are append-only
        return None
    rows = repo.look_results(conn, exp.id, lk.number)
    return Answer(stored.status_code, views.look(exp, lk, rows, lk.state or exp.state),
                  replayed=True)


def _replay_before(db: Database, team_id: str, idem: Idem | None) -> Answer | None:
    """A cheap check before taking any lock."""
    if idem is None:
        return None
    with db.read() as conn:
        return _replay(db, conn, team_id, idem)


def _claim(db: Database, conn: Connection, team_id: str, idem: Idem | None
           ) -> Answer | None:
    """Inside the write, after the lock: a retry that waited behind its own first
    attempt gets that attempt's answer; an expired key is forgotten."""
    if idem is None:
        return None
    prior = _replay(db, conn, team_id, idem)
    if prior is not None:
        return prior
    repo.forget_key(conn, team_id, idem.key)  # expired, if present at all
    _maybe_purge(conn, db.settings.idempotency_ttl_s)
    return None


def _after_race(db: Database, team_id: str, idem: Idem | None, exc: IntegrityError
                ) -> Answer:
    """Another request with the same key committed between our check and our insert
    (possible on PostgreSQL, where writers to different experiments run side by
    side); ours was rolled back: answer with what the first one stored."""
    if idem is None:
        raise exc
    prior = _replay_before(db, team_id, idem)
    if prior is None:
        raise exc
    return prior


# ----------------------------------------------------------------------- plans


def _build_plan(req: PlanRequest, previous: PlanVersion | None, location: str
                ) -> tuple[library.PlanInfo, dict[str, Any]]:
    """The plan of a request, read or designed once; and its ``source`` record."""
    if req.document is not None:
        return library.read_plan(req.document, ["body", "plan"]), {"from": "document"}
    assert req.design_inputs is not None
    inputs = dict(req.design_inputs)
    kind = req.design_kind
    if previous is not None:
        base_kind, base = library_defaults(previous)
        if kind is None or kind == base_kind:
            kind = base_kind
            inputs = merge_inputs(base, inputs)
    kind = kind or "group_sequential"
    info = library.design_plan(kind, inputs, ["body", "design"])
    return info, {"from": "design", "kind": kind, "inputs": library.json_safe(inputs)}


def library_defaults(pv: PlanVersion) -> tuple[str, dict[str, Any]]:
    """The design inputs a version was made from (an amendment starts from them)."""
    if pv.source.get("from") == "design" and isinstance(pv.source.get("inputs"), dict):
        inputs = dict(pv.source["inputs"])
        if "info_fractions" in inputs:  # stored by the first release of the service
            inputs["information_fractions"] = inputs.pop("info_fractions")
        return str(pv.source.get("kind", pv.kind)), inputs
    return pv.kind, library.inputs_of_document(pv.document)


def merge_inputs(base: dict[str, Any], given: dict[str, Any]) -> dict[str, Any]:
    """``given`` over ``base``; a new number of looks drops inherited fractions and new
    fractions drop an inherited number of looks (the two must agree); new arms drop
    inherited allocations, and new arms or metrics the inherited graph."""
    merged = {**base, **given}
    if "looks" in given and "information_fractions" not in given:
        merged.pop("information_fractions", None)
    if "information_fractions" in given and "looks" not in given:
        merged.pop("looks", None)
    # experiment plans: allocations are per treatment, the graph per hypothesis
    if "arms" in given and "allocations" not in given:
        merged.pop("allocations", None)
    if ("arms" in given or "metrics" in given) and "weights" not in given:
        merged.pop("weights", None)
        if "transitions" not in given:
            merged.pop("transitions", None)
    return merged


def _metric_kind(given: str | None, plan: library.PlanInfo, field_name: str) -> str:
    """The experiment's metric kind: as given, else the plan's; the two must agree."""
    planned = plan.metric_kind
    if given is None:
        if planned is None:
            raise Unprocessable(
                f"{field_name}: give the metric kind of the totals (binary, continuous or "
                "rate); the plan does not name one",
                details=[{"location": ["body", field_name], "message": "missing"}],
            )
        return planned
    if planned is not None and planned != given:
        raise Unprocessable(
            f"{field_name}: got {given!r} but the plan was sized for a {planned!r} metric; "
            f"give the same kind, or leave {field_name} out",
            details=[{"location": ["body", field_name], "message": "differs from the plan"}],
        )
    return given


def _check_sizing(plan: library.PlanInfo, max_n: float | None) -> None:
    """A group-sequential plan is monitored on sample fractions: it needs a size,
    from the plan's metric or from ``max_n``."""
    if plan.kind != "group_sequential" or max_n is not None or plan.metric_kind is not None:
        return
    raise Unprocessable(
        "max_n: the plan has no metric to size it, so give max_n, the maximum total "
        "sample over both arms (exposure for rates), or design the plan with a metric",
        details=[{"location": ["body", "max_n"], "message": "missing"}],
    )


def _check_two_arms(given: dict[str, Any]) -> None:
    """Arms given as a list name a two-arm plan's two arms, the control first."""
    names = given.get("arms")
    if isinstance(names, list) and len(names) != 2:
        raise Unprocessable(
            f"arms: got {len(names)} arms but the plan is a two-arm plan; give "
            "{control, treatment} or two names, the control first (an experiment with "
            "more arms needs a plan of kind experiment)",
            details=[{"location": ["body", "arms"], "message": "two arms for a two-arm plan"}])


def _closed(exp: Experiment, what: str) -> StateConflict:
    decision = f"decision {exp.decision!r} at look {exp.look_count}" if exp.decision \
        else "no decision"
    return StateConflict(
        f"Experiment {exp.id!r} is {exp.state} ({decision}), so it takes no more {what}. "
        f"Its record stays readable at GET /v1/experiments/{exp.id}; to go on testing, "
        "create a new experiment with POST /v1/experiments.",
        details=[{"location": ["path", "experiment_id"], "message": exp.state,
                  "state": exp.state, "decision": exp.decision}],
    )


def _not_found(exp_id: str) -> NotFound:
    return NotFound(
        f"No experiment {exp_id!r} for your team; list yours with GET /v1/experiments.")


# ----------------------------------------------------------------------- writes


def create_experiment(db: Database, principal: Principal, req: CreateRequest,
                      idem: Idem | None = None) -> Answer:
    prior = _replay_before(db, principal.team_id, idem)
    if prior is not None:
        return prior
    plan, source = _build_plan(req.plan, None, "plan")
    control_arm, treatment_arm, allocation = req.control_arm, req.treatment_arm, \
        req.allocation
    if plan.layout is not None:  # many arms, several metrics: the plan names them
        library.check_experiment_create(plan.layout, req.given)
        metric_kind = plan.layout["metric_kind"]
        control_arm, treatment_arm = (a["name"] for a in plan.layout["arms"][:2])
        allocation = plan.layout["arms"][1]["allocation"]
    else:
        _check_two_arms(req.given)
        _check_sizing(plan, req.max_n)
        metric_kind = _metric_kind(req.metric_kind, plan, "metric_kind")
    try:
        with db.write() as conn:
            prior = _claim(db, conn, principal.team_id, idem)
            if prior is not None:
                return prior
            ts = repo.now()
            exp = Experiment(
                id=repo.new_id("exp"), team_id=principal.team_id, name=req.name,
                description=req.description, metric_kind=metric_kind,
                control_arm=control_arm, treatment_arm=treatment_arm,
                allocation=allocation, max_n=req.max_n,
                fraction_basis=req.fraction_basis, plan_version=1, look_count=0,
                state="planned", decision=None, created_at=ts, created_by=principal.key_id,
                updated_at=ts,
                arms=None if plan.layout is None else plan.layout["arms"],
                metrics=None if plan.layout is None else plan.layout["metrics"],
            )
            pv = PlanVersion(
                version=1, kind=plan.kind, document=plan.document, source=source,
                reason=None, after_look=0, recorded_at=ts, recorded_by=principal.key_id,
                boundaries=plan.boundaries, boundaries_stored=True,
            )
            repo.insert_experiment(conn, exp)
            repo.insert_plan_version(conn, exp.id, pv)
            body = views.created(exp, pv, req.deprecations)
            if idem is not None:
                repo.remember_key(conn, principal.team_id, idem.key, idem.request_hash, 201,
                                  body)
        return Answer(201, body)
    except IntegrityError as exc:
        return _after_race(db, principal.team_id, idem, exc)


# ----------------------------------------------------------------------- looks

_SNAPSHOT_TRIES = 3  # snapshots analysed; the last, if stale, is redone under the lock
_PLAN_CACHE_SIZE = 256


class PlanCache(library.Recent[tuple[str, str, int], library.PlanInfo]):
    """Plans read from stored versions, most recently used first, at most ``size``.

    Keyed by (database URL, experiment id, plan version): a stored version is never
    changed (plan versions are append-only, their rows refuse UPDATE and DELETE), so
    an entry never goes stale, and a look neither reads nor parses the plan document
    again. Process-local and thread-safe (the library's bounded memo; the plans
    themselves are immutable)."""

    def __init__(self, size: int = _PLAN_CACHE_SIZE) -> None:
        super().__init__(size)


PLANS = PlanCache()


def _stored_plan(db: Database, conn: Connection, exp: Experiment) -> library.PlanInfo:
    """The plan version in force, read (and parsed) once per process."""
    key = (db.url, exp.id, exp.plan_version)
    info = PLANS.get(key)
    if info is None:
        pv = repo.plan_version(conn, exp.id, exp.plan_version)
        info = library.read_plan(pv.document, ["plan"], trust=True)
        PLANS.put(key, info)
    return info


@dataclass
class _Snapshot:
    """What a look is analysed on: the experiment row as read, its stored looks and
    its plan in force; then the outcome (or the refusal) of the analysis."""

    exp: Experiment
    totals: list[dict[str, Any]]
    results: list[dict[str, Any] | None]
    plan: library.PlanInfo | None = None
    roles: dict[str, dict[str, Any]] | None = None
    outcome: library.LookOutcome | None = None
    error: Exception | None = None


def _read_state(db: Database, conn: Connection, exp: Experiment) -> _Snapshot:
    """The stored looks and the plan in force of ``exp``, read on ``conn``."""
    totals, results = repo.look_history(conn, exp.id)
    if len(totals) != exp.look_count:  # pragma: no cover - one transaction's snapshot
        raise RuntimeError("look count out of step with stored looks")
    snap = _Snapshot(exp, totals, results)
    try:
        snap.plan = _stored_plan(db, conn, exp)
    except Unprocessable as exc:  # a stored plan the library cannot read
        snap.error = exc
    return snap


def _analyse(snap: _Snapshot, req: LookRequest) -> _Snapshot:
    """The new look analysed on ``snap``. A refusal (bad totals, a plan or an analysis
    that fails) is kept, not raised: it belongs to this snapshot and is raised only
    once the snapshot is known to hold."""
    if snap.error is not None:
        return snap
    assert snap.plan is not None
    try:
        snap.roles = library.to_roles(snap.exp, req.totals)
        snap.outcome = library.analyze_look(snap.exp, snap.plan, snap.totals, snap.roles,
                                            req.final, req.daily_traffic)
    except Unprocessable as exc:  # InvalidTotals, InvalidPlan, AnalysisFailed, ...
        snap.error = exc
    return snap


def _read_snapshot(db: Database, conn: Connection, team_id: str, exp_id: str
                   ) -> _Snapshot | None:
    """The experiment's snapshot, read on ``conn`` (not analysed yet); None when the
    experiment is closed (the write path answers that, after the idempotency check)."""
    exp = repo.get_experiment(conn, team_id, exp_id)
    if exp is None:
        raise _not_found(exp_id)
    if exp.state in ("stopped", "completed"):
        return None
    return _read_state(db, conn, exp)


def _snapshot(db: Database, principal: Principal, exp_id: str, req: LookRequest
              ) -> _Snapshot | None:
    """The look analysed on a read snapshot, outside the write lock and after the read
    transaction ended (it holds no connection while it computes); None when the
    experiment is closed."""
    with db.read() as conn:
        snap = _read_snapshot(db, conn, principal.team_id, exp_id)
    return None if snap is None else _analyse(snap, req)


@dataclass
class LookRead:
    """What a look's request reads before its body is checked, in the transaction
    that checks the caller's key (:func:`read_for_look`): the caller, and the
    snapshot of the experiment the look is for (not analysed yet). It serves as the
    look's first snapshot, which :func:`append_look` checks under the lock like any
    other."""

    principal: Principal
    exp_id: str | None = None
    snapshot: _Snapshot | None = None
    missing: NotFound | None = None

    def analysed(self, req: LookRequest) -> _Snapshot | None:
        """The snapshot analysed for ``req`` (as :func:`_snapshot` gives it)."""
        if self.missing is not None:
            raise self.missing
        return None if self.snapshot is None else _analyse(self.snapshot, req)


def read_for_look(db: Database, token: str, exp_id: str | None) -> LookRead | None:
    """The caller's key checked and, when it is valid and ``exp_id`` is given, the
    experiment's snapshot read, in one read transaction (a look's request makes one
    transaction fewer); None when the key is not valid. An unknown experiment is
    answered later, by :func:`append_look` (after the body is checked, as for any
    refusal of the experiment)."""
    with db.read() as conn:
        principal = repo.authenticate(conn, token)
        if principal is None or exp_id is None:
            return None if principal is None else LookRead(principal)
        try:
            snap = _read_snapshot(db, conn, principal.team_id, exp_id)
        except NotFound as exc:
            return LookRead(principal, exp_id, missing=exc)
    return LookRead(principal, exp_id, snap)


def append_look(db: Database, principal: Principal, exp_id: str, req: LookRequest,
                idem: Idem | None = None, *, read: LookRead | None = None) -> Answer:
    """Record a look (``read``: the first snapshot, already read with the caller's key
    by :func:`read_for_look`, else it is read here).

    The analysis (the dear part) runs outside the write lock, on a read snapshot:
    the experiment row, its stored looks and its plan in force. The write then locks
    the experiment, checks the idempotency key, and stores the look only if the
    experiment row is still the one the snapshot read (no look and no amendment came
    in meanwhile: looks and plan versions are append-only, and every look and every
    amendment rewrites the row, so an unchanged row means unchanged looks and plan).
    Otherwise it analyses again on a new snapshot; when the last of
    ``_SNAPSHOT_TRIES`` snapshots is stale too, it analyses under the lock, as a last
    resort, so a look to a busy experiment still gets through. A refusal found on a
    snapshot is raised only under the lock once the snapshot is known to hold, so
    the order of answers (404, idempotency replay or 409, closed 409, then 422) is
    that of an analysis under the lock.
    """
    prior = _replay_before(db, principal.team_id, idem)
    if prior is not None:
        return prior
    try:
        for attempt in range(_SNAPSHOT_TRIES):
            if attempt == 0 and read is not None and read.exp_id == exp_id \
                    and read.principal == principal:
                snap = read.analysed(req)
            else:
                snap = _snapshot(db, principal, exp_id, req)
            with db.write() as conn:
                exp = repo.lock_experiment(conn, principal.team_id, exp_id)
                if exp is None:
                    raise _not_found(exp_id)
                prior = _claim(db, conn, principal.team_id, idem)
                if prior is not None:
                    return prior
                if exp.state in ("stopped", "completed"):
                    raise _closed(exp, "looks")
                if snap is None or snap.exp != exp:
                    if attempt < _SNAPSHOT_TRIES - 1:
                        continue  # a look or an amendment came in: analyse again
                    snap = _analyse(_read_state(db, conn, exp), req)  # under the lock
                if snap.error is not None:
                    raise snap.error
                assert snap.outcome is not None and snap.roles is not None
                body = _store_look(conn, principal, exp, snap.roles, snap.outcome,
                                   snap.results, req.final, idem)
            return Answer(201, body)
    except IntegrityError as exc:
        return _after_race(db, principal.team_id, idem, exc)
    raise AssertionError("unreachable: the last attempt analyses under the lock")


def _store_look(conn: Connection, principal: Principal, exp: Experiment,
                roles: dict[str, dict[str, Any]], outcome: library.LookOutcome,
                results: list[dict[str, Any] | None], final: bool, idem: Idem | None
                ) -> dict[str, Any]:
    """Store the look (its own result once), update the experiment, remember the key;
    the answer's body."""
    ts = repo.now()
    number = exp.look_count + 1
    result_text, summary_text = repo.dump_json(outcome.result), repo.dump_json(outcome.summary)
    lk = Look(
        number=number, plan_version=exp.plan_version, totals=roles, final=final,
        decision=outcome.decision, state=outcome.state,
        result=json.loads(result_text), summary=json.loads(summary_text),
        recorded_at=ts, recorded_by=principal.key_id,
    )
    # stored as written once, and answered as it reads back (sorted keys), so a
    # rebuilt answer is identical
    repo.insert_look(conn, exp.id, lk, texts={"result": result_text,
                                              "analysis": summary_text})
    repo.update_after_look(conn, exp.id, number, outcome.state, outcome.decision, ts)
    exp_after = replace(exp, look_count=number, state=outcome.state,
                        decision=outcome.decision, updated_at=ts)
    body = views.look(exp_after, lk, [*results, lk.result], outcome.state)
    if idem is not None:
        repo.remember_key(conn, principal.team_id, idem.key, idem.request_hash, 201,
                          None, experiment_id=exp.id, look_number=number)
    return body


def amend_plan(db: Database, principal: Principal, exp_id: str, req: AmendRequest,
               idem: Idem | None = None) -> Answer:
    """A new plan version. The plan is read or designed before the write lock is taken
    (designing can take a while); the write checks that no other amendment came in
    meanwhile, else designs again from the newer version."""
    prior = _replay_before(db, principal.team_id, idem)
    if prior is not None:
        return prior
    for _attempt in range(3):
        with db.read() as conn:
            exp = repo.get_experiment(conn, principal.team_id, exp_id)
            if exp is None:
                raise _not_found(exp_id)
            previous = repo.plan_version(conn, exp_id, exp.plan_version)
        if exp.state in ("stopped", "completed"):
            raise _closed(exp, "amendments")
        plan, source = _build_plan(req.plan, previous, "plan")
        max_n = req.max_n if req.max_n is not None else exp.max_n
        if req.max_n is not None:
            source["max_n"] = req.max_n
        library.amended_layout(exp, plan, "plan" if req.plan.document is not None
                               else "design")  # the kind of plan stays
        if plan.layout is None:
            _metric_kind(exp.metric_kind, plan, "metric_kind")
            _check_sizing(plan, max_n)
        elif req.max_n is not None:
            library.check_experiment_create(plan.layout, {"max_n": req.max_n})
        try:
            with db.write() as conn:
                locked = repo.lock_experiment(conn, principal.team_id, exp_id)
                if locked is None:  # pragma: no cover - experiments are never deleted
                    raise _not_found(exp_id)
                prior = _claim(db, conn, principal.team_id, idem)
                if prior is not None:
                    return prior
                if locked.state in ("stopped", "completed"):
                    raise _closed(locked, "amendments")
                if locked.plan_version != exp.plan_version:
                    continue  # another amendment came first: start from it
                layout = library.amended_layout(
                    locked, plan, "plan" if req.plan.document is not None else "design")
                ts = repo.now()
                pv = PlanVersion(
                    version=locked.plan_version + 1, kind=plan.kind, document=plan.document,
                    source=source, reason=req.reason, after_look=locked.look_count,
                    recorded_at=ts, recorded_by=principal.key_id,
                    boundaries=plan.boundaries, boundaries_stored=True,
                )
                repo.insert_plan_version(conn, exp_id, pv)
                repo.update_after_amendment(conn, exp_id, pv.version, max_n, ts, layout)
                exp_after = replace(locked, plan_version=pv.version, max_n=max_n,
                                    updated_at=ts)
                if layout is not None:
                    exp_after = replace(exp_after, arms=layout["arms"],
                                        metrics=layout["metrics"],
                                        metric_kind=layout["metric_kind"])
                body = views.amendment(exp_after, pv, req.deprecations)
                if idem is not None:
                    repo.remember_key(conn, principal.team_id, idem.key, idem.request_hash,
                                      201, body)
            return Answer(201, body)
        except IntegrityError as exc:
            return _after_race(db, principal.team_id, idem, exc)
    raise Unavailable("Other amendments to this experiment kept arriving; nothing was "
                      "stored. Retry the request.", retry_after=1)


# ----------------------------------------------------------------------- reads


def read_experiment(db: Database, team_id: str, exp_id: str, *, looks_offset: int = 0,
                    looks_limit: int = 100, versions_offset: int = 0,
                    versions_limit: int = 20) -> dict[str, Any]:
    with db.read() as conn:
        exp = repo.get_experiment(conn, team_id, exp_id)
        if exp is None:
            raise _not_found(exp_id)
        current = repo.plan_version(conn, exp_id, exp.plan_version)
        versions = repo.plan_versions(conn, exp_id, offset=versions_offset,
                                      limit=versions_limit)
        looks = repo.looks(conn, exp_id, offset=looks_offset, limit=looks_limit)
        latest = None
        if exp.look_count:
            latest = looks[-1] if looks and looks[-1].number == exp.look_count else \
                repo.look(conn, exp_id, exp.look_count)
    return views.detail(
        exp, current, versions, looks, latest,
        looks_page=views.page(looks_offset, looks_limit, exp.look_count),
        versions_page=views.page(versions_offset, versions_limit, exp.plan_version),
    )


def read_look(db: Database, team_id: str, exp_id: str, number: int) -> dict[str, Any]:
    with db.read() as conn:
        exp = repo.get_experiment(conn, team_id, exp_id)
        if exp is None:
            raise _not_found(exp_id)
        lk = repo.look(conn, exp_id, number) if number <= exp.look_count else None
        if lk is None:
            raise NotFound(f"Experiment {exp_id!r} has {exp.look_count} look(s); there is "
                           f"no look {number}.")
        rows = repo.look_results(conn, exp_id, number)
    return views.look(exp, lk, rows, lk.state or exp.state)


def list_experiments(db: Database, team_id: str, *, state: str | None, limit: int,
                     offset: int) -> dict[str, Any]:
    with db.read() as conn:
        rows, total = repo.list_experiments(conn, team_id, state=state, limit=limit,
                                            offset=offset)
    return {"experiments": [views.summary(e) for e in rows], "total": total,
            "limit": limit, "offset": offset}


# ----------------------------------------------------------------------- keys


def authenticate(db: Database, token: str) -> Principal | None:
    with db.read() as conn:
        return repo.authenticate(conn, token)


def create_key(db: Database, team_name: str, label: str = "") -> tuple[KeyRecord, str]:
    """An API key for ``team_name`` (the team is created if new); the token is shown
    only here, the database keeps its hash."""
    team_name = team_name.strip()
    if not team_name or len(team_name) > 200 or "\x00" in team_name:
        raise ValueError(f"team name {team_name!r}: give 1 to 200 characters")
    if len(label) > 200 or "\x00" in label:
        raise ValueError("label: give at most 200 characters")
    token = "sqt_" + secrets.token_urlsafe(32)
    with db.write() as conn:
        record = repo.create_key(conn, team_name, label, token)
    return record, token


def revoke_key(db: Database, key_id: str) -> KeyRecord | None:
    with db.write() as conn:
        return repo.revoke_key(conn, key_id)


def list_keys(db: Database, team_name: str | None = None) -> list[KeyRecord]:
    with db.read() as conn:
        return repo.list_keys(conn, team_name=team_name)
