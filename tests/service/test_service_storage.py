"""The database layer and the use cases' transactions, on SQLite and PostgreSQL.

Transactions, locking, idempotency and the schema, called in process (no HTTP). The
same properties are checked again through a real server in test_service_server.py.
"""

from __future__ import annotations

import threading

import pytest
from service_helpers import open_db
from sqlalchemy import select, text, update
from sqlalchemy.exc import DBAPIError

from service import usecases
from service.db import migrations, tables
from service.db.engine import Database, resolve_database_url
from service.db.repository import hash_token, request_hash
from service.errors import IdempotencyConflict, InvalidTotals, NotFound, StateConflict

CREATE = usecases.CreateRequest(
    name="checkout button", description="", metric_kind="binary", control_arm="classic",
    treatment_arm="large", allocation=1.0, max_n=10**9, fraction_basis=None,
    plan=usecases.PlanRequest(design_kind="group_sequential", design_inputs={"looks": 5}),
)


def look_of(n: int, extra: int = 0) -> usecases.LookRequest:
    """Equal arms at 10% (z = 0: continue), unless ``extra`` successes are added."""
    return usecases.LookRequest(totals={"classic": {"n": n, "successes": n // 10},
                                        "large": {"n": n, "successes": n // 10 + extra}})


def _principal(db: Database, team: str):
    _, token = usecases.create_key(db, team)
    p = usecases.authenticate(db, token)
    assert p is not None
    return p


def _new(db: Database, p) -> str:
    return usecases.create_experiment(db, p, CREATE).body["id"]


def test_schema_is_versioned_and_migration_is_repeatable(storage: Database, database_url: str):
    assert storage.schema_version == migrations.LATEST == 5
    again = open_db(database_url)  # a second start applies nothing new
    try:
        assert again.schema_version == migrations.LATEST
        with again.engine.connect() as conn:
            rows = conn.execute(
                select(tables.schema_version.c.version).order_by(tables.schema_version.c.version)
            ).scalars().all()
        assert rows == list(range(1, migrations.LATEST + 1))
    finally:
        again.close()


def test_a_version_4_database_upgrades_in_place(database_url: str):
    """Migration 5 adds an experiment plan's arms and metrics beside the rows already
    there: a two-arm experiment recorded at version 4 reads the same after the upgrade,
    takes looks, and its looks stay append-only."""
    import json

    from sqlalchemy import create_engine
    url = resolve_database_url(database_url)
    eng = create_engine(url)
    try:
        assert migrations.migrate(eng, target=4) == 4
        with eng.begin() as conn:
            conn.execute(text(
                "INSERT INTO teams (id, name, created_at) VALUES ('team_old', 'old', "
                "'2024-01-01T00:00:00.000000Z')"))
            conn.execute(text(
                "INSERT INTO experiments (id, team_id, name, description, metric, "
                "control_arm, treatment_arm, allocation, max_n, fraction, plan_version, "
                "look_count, state, decision, created_at, created_by, updated_at) VALUES "
                "('exp_old', 'team_old', 'recorded at v4', '', 'binary', 'classic', "
                "'large', 1.0, NULL, NULL, 1, 0, 'planned', NULL, "
                "'2024-01-01T00:00:00.000000Z', 'key_old', '2024-01-01T00:00:00.000000Z')"))
            conn.execute(tables.plan_versions.insert().values(
                experiment_id="exp_old", version=1, kind="group_sequential",
                document=json.dumps(json_plan()), source='{"from": "document"}',
                reason=None, after_look=0, recorded_at="2024-01-01T00:00:00.000000Z",
                recorded_by="key_old", boundaries=None))
    finally:
        eng.dispose()
    db = open_db(database_url)
    try:
        assert db.schema_version == 5
        got = usecases.read_experiment(db, "team_old", "exp_old")
        assert got["arms"] == {"control": "classic", "treatment": "large"}
        assert got["metrics"] is None and got["allocations"] is None
        _, token = usecases.create_key(db, "old")
        p = usecases.authenticate(db, token)
        assert p is not None
        usecases.append_look(db, p, "exp_old", look_of(1000))
        with pytest.raises(DBAPIError, match="append-only"):
            with db.engine.begin() as conn:
                conn.execute(update(tables.looks).values(decision="stop_efficacy"))
    finally:
        db.close()


def json_plan() -> dict:
    import seqtest
    from service.library import json_safe
    return json_safe(seqtest.design(looks=3, metric={"kind": "binary", "baseline": 0.1,
                                                     "mde": 0.02}).to_dict())


def test_database_from_a_newer_service_is_refused(storage: Database, database_url: str):
    with storage.engine.begin() as conn:
        conn.execute(tables.schema_version.insert().values(
            version=migrations.LATEST + 1, description="future", applied_at="x"))
    with pytest.raises(migrations.SchemaTooNew, match="upgrade the service"):
        open_db(database_url)


def test_keys_are_hashed_at_rest_and_revocation_is_immediate(storage: Database):
    record, token = usecases.create_key(storage, "juniper-bakery", "pipeline")
    assert token.startswith("sqt_") and len(token) > 40
    with storage.engine.connect() as conn:
        stored = conn.execute(select(tables.api_keys.c.key_hash)).scalars().all()
    assert stored == [hash_token(token)] and token not in stored[0]
    principal = usecases.authenticate(storage, token)
    assert principal is not None and principal.team_name == "juniper-bakery"
    assert usecases.authenticate(storage, token + "x") is None
    revoked = usecases.revoke_key(storage, record.id)
    assert revoked is not None and revoked.revoked_at is not None
    assert usecases.authenticate(storage, token) is None
    assert usecases.revoke_key(storage, "key_nonexistent") is None
    assert [k.id for k in usecases.list_keys(storage, "juniper-bakery")] == [record.id]


def test_looks_and_plan_versions_refuse_update_and_delete(storage: Database):
    p = _principal(storage, "t")
    exp_id = _new(storage, p)
    usecases.append_look(storage, p, exp_id, look_of(1000))
    for stmt in (
        update(tables.looks).values(decision="stop_efficacy"),
        tables.looks.delete(),
        update(tables.plan_versions).values(reason="rewritten"),
        tables.plan_versions.delete(),
    ):
        with pytest.raises(DBAPIError, match="append-only"):
            with storage.engine.begin() as conn:
                conn.execute(stmt)
    got = usecases.read_experiment(storage, p.team_id, exp_id)
    assert [lk["decision"] for lk in got["looks_recorded"]] == ["continue"]


def test_team_isolation(storage: Database):
    a, b = _principal(storage, "team-a"), _principal(storage, "team-b")
    exp_id = _new(storage, a)
    with pytest.raises(NotFound):
        usecases.read_experiment(storage, b.team_id, exp_id)
    with pytest.raises(NotFound):
        usecases.append_look(storage, b, exp_id, look_of(100))
    assert usecases.list_experiments(storage, b.team_id, state=None, limit=50,
                                     offset=0)["total"] == 0
    assert usecases.list_experiments(storage, a.team_id, state=None, limit=50,
                                     offset=0)["total"] == 1


def test_idempotent_append_replays_and_stores_once(storage: Database):
    p = _principal(storage, "t")
    exp_id = _new(storage, p)
    idem = usecases.Idem("k-1", request_hash("POST", "/x", {"n": 10}))
    first = usecases.append_look(storage, p, exp_id, look_of(1000), idem)
    again = usecases.append_look(storage, p, exp_id, look_of(1000), idem)
    assert (first.replayed, again.replayed) == (False, True)
    assert again.body == first.body and again.status_code == 201
    other = usecases.Idem("k-1", request_hash("POST", "/x", {"n": 11}))
    with pytest.raises(IdempotencyConflict):
        usecases.append_look(storage, p, exp_id, look_of(1100), other)
    assert usecases.read_experiment(storage, p.team_id, exp_id)["look_count"] == 1


def test_failed_write_stores_nothing_and_frees_the_key(storage: Database):
    p = _principal(storage, "t")
    exp_id = _new(storage, p)
    idem = usecases.Idem("k-2", request_hash("POST", "/x", {}))
    bad = usecases.LookRequest(totals={"classic": {"n": 10, "successes": 11},
                                       "large": {"n": 10, "successes": 1}})
    with pytest.raises(InvalidTotals):
        usecases.append_look(storage, p, exp_id, bad, idem)
    assert usecases.read_experiment(storage, p.team_id, exp_id)["look_count"] == 0
    assert usecases.append_look(storage, p, exp_id, look_of(500), idem).body["look"] == 1


def test_stopped_experiment_takes_no_more_looks(storage: Database):
    # 10% vs 30% at a fifth of max_n: z far beyond any boundary (fact of the trade)
    p = _principal(storage, "t")
    exp_id = _new(storage, p)
    stop = usecases.append_look(storage, p, exp_id, look_of(10**8, extra=2 * 10**7))
    assert stop.body["state"] == "stopped"
    with pytest.raises(StateConflict, match="create a new experiment"):
        usecases.append_look(storage, p, exp_id, look_of(2 * 10**8))


def test_concurrent_appends_are_serialised(storage: Database):
    """16 threads x 5 looks on one experiment: numbers 1..80, each seen once, and every
    analysis covered exactly the looks committed before it (its stored row's fraction
    is that of its own totals)."""
    p = _principal(storage, "t")
    exp_id = _new(storage, p)
    answers: list[dict] = []
    errors: list[BaseException] = []
    lock = threading.Lock()
    counter = iter(range(1000, 10**7, 1000))

    def worker() -> None:
        done = 0
        while done < 5:
            with lock:
                n = next(counter)
            try:
                a = usecases.append_look(storage, p, exp_id, look_of(n))
            except InvalidTotals:  # lost a race: our totals are below a stored look
                continue
            except BaseException as exc:  # noqa: BLE001 - surfaced below
                errors.append(exc)
                return
            done += 1
            with lock:
                answers.append(a.body)

    threads = [threading.Thread(target=worker) for _ in range(16)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert not errors
    assert sorted(a["look"] for a in answers) == list(range(1, 81))
    got = usecases.read_experiment(storage, p.team_id, exp_id, looks_limit=1000)
    assert [lk["look"] for lk in got["looks_recorded"]] == list(range(1, 81))
    for a in answers:
        assert len(a["analysis"]["looks"]) == a["look"]


def test_concurrent_same_key_stores_once(storage: Database):
    p = _principal(storage, "t")
    exp_id = _new(storage, p)
    idem = usecases.Idem("same", request_hash("POST", "/x", {"n": 1}))
    results = []
    barrier = threading.Barrier(8)

    def worker() -> None:
        barrier.wait()
        results.append(usecases.append_look(storage, p, exp_id, look_of(1000), idem))

    threads = [threading.Thread(target=worker) for _ in range(8)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert len(results) == 8
    assert sum(not r.replayed for r in results) == 1
    assert {r.body["look"] for r in results} == {1}
    assert len({str(r.body) for r in results}) == 1
    assert usecases.read_experiment(storage, p.team_id, exp_id)["look_count"] == 1


def test_sqlite_runs_in_wal_mode(sqlite_url: str):
    s = open_db(sqlite_url)
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
    s = open_db(sqlite_url)
    try:
        with s.engine.connect() as conn:
            # PRAGMA synchronous reads 2 for FULL, 1 for NORMAL (SQLite docs, from memory)
            assert conn.execute(text("PRAGMA synchronous")).scalar() == {"FULL": 2,
                                                                        "NORMAL": 1}[setting]
    finally:
        s.close()
    monkeypatch.setenv("SEQTEST_SQLITE_SYNCHRONOUS", "OFF")
    with pytest.raises(ValueError, match="SEQTEST_SQLITE_SYNCHRONOUS"):
        open_db(sqlite_url)
