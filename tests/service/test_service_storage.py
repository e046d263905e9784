"""The storage layer on its own, on SQLite and PostgreSQL.

The look computations here are plain callables that stand in for the monitor:
these tests are about transactions, locking, idempotency and the schema, which
know nothing of statistics. The same properties are checked again through the
real service and the real monitor in test_server.py.
"""

from __future__ import annotations

import threading

import pytest
from sqlalchemy import select, text, update
from sqlalchemy.exc import DBAPIError

from service import migrations, tables
from service.errors import Conflict, IdempotencyConflict, NotFound
from service.storage import (
    Idempotency,
    NewExperiment,
    NewLook,
    NewPlan,
    Storage,
    hash_token,
    request_hash,
    resolve_database_url,
)

EXP = NewExperiment(
    name="checkout button", description="", metric="binary",
    control_arm="classic", treatment_arm="large", allocation=1.0,
)
PLAN = NewPlan(kind="group_sequential", document={"kind": "group_sequential"}, source={})


def _render_exp(exp, pv):
    return {"id": exp.id, "plan_version": pv.version}


def _render_look(exp, look):
    return {"id": exp.id, "look": look.number, "n": look.totals["control"]["n"]}


def _look_of(n: int, decision: str = "continue", state: str = "running"):
    def compute(exp, plan, prior):
        return NewLook(
            totals={"control": {"n": n}, "treatment": {"n": n}},
            final=False, decision=decision, state=state,
            analysis={"decision": decision, "prior_looks": len(prior)},
        )
    return compute


def _principal(storage: Storage, team: str):
    _, token = storage.create_key(team)
    p = storage.authenticate(token)
    assert p is not None
    return p


def test_schema_is_versioned_and_migration_is_repeatable(storage: Storage, database_url: str):
    assert storage.schema_version == migrations.LATEST
    again = Storage(database_url)  # a second start applies nothing new
    try:
        assert again.schema_version == migrations.LATEST
        with again.engine.connect() as conn:
            rows = conn.execute(
                select(tables.schema_version.c.version).order_by(tables.schema_version.c.version)
            ).scalars().all()
        assert rows == list(range(1, migrations.LATEST + 1))
    finally:
        again.close()


def test_database_from_a_newer_service_is_refused(storage: Storage, database_url: str):
    with storage.engine.begin() as conn:
        conn.execute(tables.schema_version.insert().values(
            version=migrations.LATEST + 1, description="future", applied_at="x"))
    with pytest.raises(migrations.SchemaTooNew, match="upgrade the service"):
        Storage(database_url)


def test_keys_are_hashed_at_rest_and_revocation_is_immediate(storage: Storage):
    record, token = storage.create_key("juniper-bakery", "pipeline")
    assert token.startswith("sqt_") and len(token) > 40
    with storage.engine.connect() as conn:
        stored = conn.execute(select(tables.api_keys.c.key_hash)).scalars().all()
    assert stored == [hash_token(token)] and token not in stored[0]
    assert storage.authenticate(token).team_name == "juniper-bakery"
    assert storage.authenticate(token + "x") is None
    assert storage.revoke_key(record.id).revoked_at is not None
    assert storage.authenticate(token) is None
    assert storage.revoke_key("key_nonexistent") is None
    assert [k.id for k in storage.list_keys("juniper-bakery")] == [record.id]


def test_looks_and_plan_versions_refuse_update_and_delete(storage: Storage):
    p = _principal(storage, "t")
    exp_id = storage.create_experiment(p, EXP, PLAN, _render_exp).body["id"]
    storage.append_look(p, exp_id, _look_of(10), _render_look)
    for stmt in (
        update(tables.looks).values(decision="stop_efficacy"),
        tables.looks.delete(),
        update(tables.plan_versions).values(reason="rewritten"),
        tables.plan_versions.delete(),
    ):
        with pytest.raises(DBAPIError, match="append-only"):
            with storage.engine.begin() as conn:
                conn.execute(stmt)
    _, _, looks = storage.get_experiment(p.team_id, exp_id)
    assert [lk.decision for lk in looks] == ["continue"]


def test_team_isolation(storage: Storage):
    a, b = _principal(storage, "team-a"), _principal(storage, "team-b")
    exp_id = storage.create_experiment(a, EXP, PLAN, _render_exp).body["id"]
    with pytest.raises(NotFound):
        storage.get_experiment(b.team_id, exp_id)
    with pytest.raises(NotFound):
        storage.append_look(b, exp_id, _look_of(1), _render_look)
    assert storage.list_experiments(b.team_id) == ([], 0)
    assert storage.list_experiments(a.team_id)[1] == 1


def test_idempotent_append_replays_and_stores_once(storage: Storage):
    p = _principal(storage, "t")
    exp_id = storage.create_experiment(p, EXP, PLAN, _render_exp).body["id"]
    idem = Idempotency("k-1", request_hash("POST", "/x", {"n": 10}))
    first = storage.append_look(p, exp_id, _look_of(10), _render_look, idem)
    again = storage.append_look(p, exp_id, _look_of(10), _render_look, idem)
    assert (first.replayed, again.replayed) == (False, True)
    assert again.body == first.body and again.status_code == 201
    other = Idempotency("k-1", request_hash("POST", "/x", {"n": 11}))
    with pytest.raises(IdempotencyConflict):
        storage.append_look(p, exp_id, _look_of(11), _render_look, other)
    exp, _, looks = storage.get_experiment(p.team_id, exp_id)
    assert exp.look_count == 1 and len(looks) == 1


def test_failed_write_stores_nothing_and_frees_the_key(storage: Storage):
    p = _principal(storage, "t")
    exp_id = storage.create_experiment(p, EXP, PLAN, _render_exp).body["id"]
    idem = Idempotency("k-2", request_hash("POST", "/x", {}))

    def refuse(exp, plan, prior):
        raise Conflict("refused on purpose")

    with pytest.raises(Conflict):
        storage.append_look(p, exp_id, refuse, _render_look, idem)
    assert storage.get_experiment(p.team_id, exp_id)[0].look_count == 0
    assert storage.append_look(p, exp_id, _look_of(5), _render_look, idem).body["look"] == 1


def test_stopped_experiment_takes_no_more_looks(storage: Storage):
    p = _principal(storage, "t")
    exp_id = storage.create_experiment(p, EXP, PLAN, _render_exp).body["id"]
    storage.append_look(p, exp_id, _look_of(10, "stop_efficacy", "stopped"), _render_look)
    with pytest.raises(Conflict, match="accepts no further looks"):
        storage.append_look(p, exp_id, _look_of(20), _render_look)


def test_concurrent_appends_are_serialised(storage: Storage):
    """16 threads x 5 looks on one experiment: numbers 1..80, each seen once,
    and every computation saw exactly the looks committed before it."""
    p = _principal(storage, "t")
    exp_id = storage.create_experiment(p, EXP, PLAN, _render_exp).body["id"]
    answers: list[dict] = []
    errors: list[BaseException] = []
    lock = threading.Lock()

    def worker(w: int) -> None:
        try:
            for i in range(5):
                s = storage.append_look(p, exp_id, _look_of(100 * w + i), _render_look)
                with lock:
                    answers.append(s.body)
        except BaseException as exc:  # noqa: BLE001 - surfaced below
            errors.append(exc)

    threads = [threading.Thread(target=worker, args=(w,)) for w in range(16)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert not errors
    assert sorted(a["look"] for a in answers) == list(range(1, 81))
    _, _, looks = storage.get_experiment(p.team_id, exp_id)
    assert [lk.number for lk in looks] == list(range(1, 81))
    # each computation saw the looks before it, no more and no fewer
    assert [lk.analysis["prior_looks"] for lk in looks] == list(range(80))


def test_concurrent_same_key_stores_once(storage: Storage):
    p = _principal(storage, "t")
    exp_id = storage.create_experiment(p, EXP, PLAN, _render_exp).body["id"]
    idem = Idempotency("same", request_hash("POST", "/x", {"n": 1}))
    results = []
    barrier = threading.Barrier(8)

    def worker() -> None:
        barrier.wait()
        results.append(storage.append_look(p, exp_id, _look_of(1), _render_look, idem))

    threads = [threading.Thread(target=worker) for _ in range(8)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert len(results) == 8
    assert sum(not r.replayed for r in results) == 1
    assert {r.body["look"] for r in results} == {1}
    assert storage.get_experiment(p.team_id, exp_id)[0].look_count == 1


def test_sqlite_runs_in_wal_mode(sqlite_url: str):
    s = Storage(sqlite_url)
    try:
        with s.engine.connect() as conn:
            assert conn.execute(text("PRAGMA journal_mode")).scalar() == "wal"
    finally:
        s.close()


@pytest.mark.parametrize(
    "url, expected",
    [
        ("postgresql://u@h/db", "postgresql+psycopg://u@h/db"),
        ("postgres://u@h/db", "postgresql+psycopg://u@h/db"),
        ("sqlite:///x.db", "sqlite:///x.db"),
    ],
)
def test_database_urls(url: str, expected: str):
    assert resolve_database_url(url) == expected


@pytest.mark.parametrize(
    "url, words",
    [
        ("sqlite://", "in-memory"),
        ("sqlite:///:memory:", "in-memory"),
        ("mysql://u@h/db", "SQLite"),
        ("postgresql+asyncpg://u@h/db", "psycopg"),
        ("sqlite:////no/such/dir/x.db", "does not exist"),
    ],
)
def test_bad_database_urls_say_why(url: str, words: str):
    with pytest.raises(ValueError, match=words):
        resolve_database_url(url)


def test_default_database_url_comes_from_env(monkeypatch, tmp_path):
    monkeypatch.setenv("SEQTEST_DATABASE_URL", f"sqlite:///{tmp_path}/e.db")
    assert resolve_database_url(None) == f"sqlite:///{tmp_path}/e.db"
    monkeypatch.delenv("SEQTEST_DATABASE_URL")
    assert resolve_database_url(None) == "sqlite:///./seqtest.db"


@pytest.mark.parametrize("setting", ["FULL", "NORMAL"])
def test_sqlite_synchronous_setting(monkeypatch, sqlite_url: str, setting: str):
    monkeypatch.setenv("SEQTEST_SQLITE_SYNCHRONOUS", setting.lower())
    s = Storage(sqlite_url)
    try:
        with s.engine.connect() as conn:
            # PRAGMA synchronous reads 2 for FULL, 1 for NORMAL (SQLite docs, from memory)
            assert conn.execute(text("PRAGMA synchronous")).scalar() == {"FULL": 2,
                                                                        "NORMAL": 1}[setting]
    finally:
        s.close()
    monkeypatch.setenv("SEQTEST_SQLITE_SYNCHRONOUS", "OFF")
    with pytest.raises(ValueError, match="SEQTEST_SQLITE_SYNCHRONOUS"):
        Storage(sqlite_url)
