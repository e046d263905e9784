"""Regression tests of issue 10, one (or a few) per defect, named after it.

Most run in process (TestClient over the app) on SQLite and PostgreSQL; those about
connections, timeouts and logs run against a real ``python -m service serve``.
Tests that need the library to verify plan documents against their inputs are
marked xfail (strict): they turn red the day the library does it, and the marker
must then go.
"""

from __future__ import annotations

import copy
import json
import re
import socket
import threading
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import pytest
from fastapi.testclient import TestClient
from service_helpers import Server, app_client, auth, new_key, open_db
from sqlalchemy import func, select, text, update

import seqtest
from service import usecases
from service.api import create_app
from service.config import Settings
from service.db import migrations, tables
from service.db.engine import Database
from service.library import json_safe

BINARY = {"kind": "binary", "baseline": 0.1, "mde": 0.02}
ARMS = {"control": "classic", "treatment": "large"}


@pytest.fixture
def world(database_url: str) -> Iterator[tuple[TestClient, dict[str, str], Database]]:
    db = open_db(database_url)
    key = auth(usecases.create_key(db, "juniper-bakery")[1])
    with app_client(db) as client:
        yield client, key, db
    db.close()


def design_doc(**kw: Any) -> dict[str, Any]:
    kw.setdefault("looks", 4)
    kw.setdefault("metric", BINARY)
    return json_safe(seqtest.design(**kw).to_dict())


def raw_post(client: TestClient, url: str, body: Any, key: dict[str, str],
             **headers: str) -> httpx.Response:
    """POST ``body`` as JSON text written by Python (lone surrogates escaped as \\udxxx,
    NaN and Infinity as bare words, as a careless client would)."""
    raw = json.dumps(body, allow_nan=True)
    return client.post(url, content=raw.encode("utf-8"),
                       headers={**key, "content-type": "application/json", **headers})


def create_body(**over: Any) -> dict[str, Any]:
    body: dict[str, Any] = {"name": "checkout button", "arms": ARMS,
                            "design": {"looks": 4, "metric": BINARY}}
    body.update(over)
    return body


def totals(c: tuple[int, int], t: tuple[int, int]) -> dict[str, Any]:
    return {"totals": {"classic": {"n": c[0], "successes": c[1]},
                       "large": {"n": t[0], "successes": t[1]}}}


def count(db: Database, table: Any) -> int:
    with db.engine.connect() as conn:
        return int(conn.execute(select(func.count()).select_from(table)).scalar_one())


def error(r: httpx.Response, status: int, *words: str) -> dict[str, Any]:
    assert r.status_code == status, r.text
    err = r.json()["error"]
    for w in words:
        assert w in err["message"], (w, err["message"])
    return err


# ------------------------------------------------------------------ 10.1 lone surrogates


@pytest.mark.parametrize("where", ["plan.inputs.metric", "name", "description", "key"])
def test_10_1_lone_surrogates_are_refused_before_anything_is_stored(world, where):
    client, key, db = world
    doc = design_doc()
    body = create_body()
    if where == "plan.inputs.metric":
        doc["inputs"]["metric"]["note"] = "\udfff\ud800"
        body = create_body(design=None, plan=doc)
        location = ["body", "plan", "inputs", "metric", "note"]
    elif where == "key":
        doc["inputs"]["metric"]["\ud800"] = 1
        body = create_body(design=None, plan=doc)
        location = ["body", "plan", "inputs", "metric", "\\ud800"]
    else:
        body[where] = "bakery \ud800 test"
        location = ["body", where]
    for _ in range(2):  # a retry with the same key gets the same refusal, not a 500
        r = raw_post(client, "/v1/experiments", body, key, **{"Idempotency-Key": "k-10-1"})
        err = error(r, 422, "surrogate")
        assert err["details"][0]["location"] == location
    assert count(db, tables.experiments) == 0 and count(db, tables.idempotency_keys) == 0
    assert client.get("/v1/experiments", headers=key).json()["total"] == 0


def test_10_1_lone_surrogates_in_paths_reasons_and_totals(world):
    client, key, db = world
    exp_id = client.post("/v1/experiments", json=create_body(), headers=key).json()["id"]
    r = raw_post(client, f"/v1/experiments/{exp_id}/amendments",
                 {"reason": "x\udfff", "design": {"looks": 5}}, key)
    assert error(r, 422, "surrogate")["details"][0]["location"] == ["body", "reason"]
    r = raw_post(client, f"/v1/experiments/{exp_id}/looks",
                 {"totals": {"classic\ud800": {"n": 1}}}, key)
    error(r, 422, "surrogate")
    # a surrogate in the path arrives as bytes that are not UTF-8: an unknown id
    r = client.get("/v1/experiments/exp_%ED%A0%80", headers=key)
    assert r.status_code in (404, 422), r.text
    got = client.get(f"/v1/experiments/{exp_id}", headers=key).json()
    assert got["plan_version"] == 1 and got["look_count"] == 0


# ------------------------------------------------------------------ 10.2 poisoned plans


def test_10_2_a_plan_whose_metric_is_not_an_object_is_refused(world):
    client, key, db = world
    doc = design_doc()
    doc["inputs"]["metric"] = "binary"
    r = client.post("/v1/experiments", json=create_body(design=None, plan=doc), headers=key)
    err = error(r, 422, "inputs.metric")
    assert err["code"] == "invalid_plan"
    assert err["details"][0]["location"] == ["body", "plan", "inputs", "metric"]
    exp_id = client.post("/v1/experiments", json=create_body(), headers=key).json()["id"]
    r = client.post(f"/v1/experiments/{exp_id}/amendments", headers=key,
                    json={"reason": "try a poisoned plan", "plan": doc})
    error(r, 422, "inputs.metric")
    ok = client.post(f"/v1/experiments/{exp_id}/looks", json=totals((1000, 100), (1000, 104)),
                     headers=key)
    assert ok.status_code == 201, ok.text
    assert count(db, tables.plan_versions) == 1


# ------------------------------------------------------------------ 10.3 NUL characters


def test_10_3_nul_characters_are_refused_with_422(world):
    client, key, db = world
    exp_id = client.post("/v1/experiments", json=create_body(), headers=key).json()["id"]
    cases = [
        ("POST", "/v1/experiments", create_body(name="a\x00b"), ["body", "name"]),
        ("POST", "/v1/experiments", create_body(description="\x00"), ["body", "description"]),
        ("POST", f"/v1/experiments/{exp_id}/amendments",
         {"reason": "holiday\x00", "design": {"looks": 5}}, ["body", "reason"]),
        ("POST", f"/v1/experiments/{exp_id}/looks",
         {"totals": {"classic\x00": {"n": 1}}}, ["body", "totals", "classic\\x00"]),
    ]
    for _method, url, body, location in cases:
        r = raw_post(client, url, body, key)
        err = error(r, 422, "NUL")
        assert err["details"][0]["location"] == location
    for url in (f"/v1/experiments/exp%00{exp_id}", f"/v1/experiments/{exp_id}/looks/1%00",
                "/v1/experiments?state=running%00"):
        r = client.get(url, headers=key)
        error(r, 422, "NUL")
    assert count(db, tables.experiments) == 1 and count(db, tables.plan_versions) == 1


# ------------------------------------------------------------------ 10.4 unchecked plans


def _with(doc: dict[str, Any], path: str, value: Any) -> dict[str, Any]:
    d = copy.deepcopy(doc)
    *parents, last = path.split(".")
    node = d
    for p in parents:
        node = node[p]
    if isinstance(node, list):
        node[int(last)] = value
    else:
        node[last] = value
    return d


_GS = design_doc()
_FUT = design_doc(futility="pocock-type")
_HSD = design_doc(efficacy="hsd:-4")
_WT = design_doc(efficacy="wang-tsiatis:0.25")
del _HSD["inputs"]["efficacy"]["gamma"]
del _WT["inputs"]["efficacy"]["delta"]

# (name, the raw body text of "plan" or a document, the field the answer must name)
HOSTILE_PLANS: list[tuple[str, Any, str]] = [
    ("grid_r_infinity", json.dumps(_GS).replace('"grid_r": 24', '"grid_r": Infinity'),
     "grid_r"),
    ("grid_r_200", _with(_GS, "inputs.grid_r", 200), "grid_r"),
    # below the library's smallest grid: the same bounds for every kind of plan
    ("grid_r_5", _with(_GS, "inputs.grid_r", 5), "grid_r"),
    ("alpha_300_digits", json.dumps(_GS).replace('"alpha": 0.05', '"alpha": 1' + "0" * 300),
     "alpha"),
    ("efficacy_z_10e400", json.dumps(_GS).replace('"efficacy_z": [',
                                                  '"efficacy_z": [1' + "0" * 400 + ", "),
     "efficacy_z"),
    ("futility_z_short", _with(_FUT, "computed.futility_z", _FUT["computed"]["futility_z"][:2]),
     "futility_z"),
    ("cumulative_alpha_short", _with(_GS, "computed.cumulative_alpha",
                                     _GS["computed"]["cumulative_alpha"][:2]),
     "cumulative_alpha"),
    ("hsd_without_gamma", _HSD, "gamma"),
    ("wang_tsiatis_without_delta", _WT, "delta"),
    ("sides_0", _with(_GS, "inputs.sides", 0), "sides"),
    ("drift_1e200", _with(_GS, "computed.drift", 1e200), "drift"),
]
def _post_plan(client: TestClient, key: dict[str, str], plan: Any) -> httpx.Response:
    plan_text = plan if isinstance(plan, str) else json.dumps(plan)
    raw = '{"name": "hostile plan", "plan": ' + plan_text + "}"
    return client.post("/v1/experiments", content=raw.encode(),
                       headers={**key, "content-type": "application/json"})


@pytest.mark.parametrize("name, plan, field", HOSTILE_PLANS, ids=[c[0] for c in HOSTILE_PLANS])
def test_10_4_hostile_plan_documents_never_give_500(world, name, plan, field):
    """Refused with 422, nothing stored."""
    client, key, db = world
    r = _post_plan(client, key, plan)
    assert r.status_code == 422, r.text
    assert count(db, tables.experiments) == 0


@pytest.mark.parametrize("name, plan, field", HOSTILE_PLANS, ids=[c[0] for c in HOSTILE_PLANS])
def test_10_4_hostile_plan_documents_are_refused_naming_the_field(world, name, plan, field):
    client, key, db = world
    r = _post_plan(client, key, plan)
    err = error(r, 422, field)
    assert err["code"] in ("invalid_plan", "invalid_request")
    assert count(db, tables.experiments) == 0


@pytest.mark.parametrize(
    "design, field",
    [
        ({"looks": 51, "metric": BINARY}, "looks"),
        ({"looks": 4, "grid_r": 200, "metric": BINARY}, "grid_r"),
        ({"alpha": 1e-400 if False else 10**300, "metric": BINARY}, "alpha"),
        ({"kind": "mixture", "mde": float("inf")}, "mde"),
        ({"information_fractions": [0.5] * 60, "metric": BINARY}, "information_fractions"),
        ({"efficacy": "wang-tsiatis", "metric": BINARY}, "wang-tsiatis"),
        ({"efficacy": "hsd", "metric": BINARY}, "efficacy"),
        ({"sides": 0, "metric": BINARY}, "sides"),
    ],
)
def test_10_4_design_inputs_are_capped_and_checked(world, design, field):
    client, key, db = world
    r = raw_post(client, "/v1/experiments", create_body(design=design), key)
    error(r, 422, field)
    assert count(db, tables.experiments) == 0


# ------------------------------------------------------------------ 10.5 tampered plans


def _haybittle_peto_tampered() -> dict[str, Any]:
    doc = design_doc(efficacy="haybittle-peto")
    doc["computed"]["cumulative_alpha"] = [0.05] * 4
    return doc


def test_10_5_a_tampered_cumulative_alpha_is_refused_naming_the_field(world):
    client, key, db = world
    r = client.post("/v1/experiments", headers=key,
                    json=create_body(design=None, plan=_haybittle_peto_tampered()))
    error(r, 422, "cumulative_alpha")


def test_10_5_a_halved_drift_is_refused_naming_the_field(world):
    client, key, db = world
    doc = design_doc()
    doc["computed"]["drift"] /= 2
    r = client.post("/v1/experiments", headers=key, json=create_body(design=None, plan=doc))
    error(r, 422, "drift")


# ------------------------------------------------------------------ 10.6 after a 500


def _break_looks_table(database_url: str, broken: bool) -> None:
    names = ("looks", "looks_gone") if broken else ("looks_gone", "looks")
    db = open_db(database_url, access_log=False)
    try:
        with db.engine.begin() as conn:
            conn.execute(text(f"ALTER TABLE {names[0]} RENAME TO {names[1]}"))
    finally:
        db.close()


def test_10_6_after_a_500_the_connection_closes_and_the_next_request_works(
        module_database_url: str, tmp_path: Path):
    """A database missing a table (an unexpected failure, not a storage outage) gives
    a 500 with Connection: close and the request id; the next request works; the
    error is logged once, with the id and without SQL."""
    srv = Server(module_database_url, tmp_path / "server.log").start()
    try:
        h = auth(new_key(module_database_url, "team-10-6"))
        with httpx.Client(base_url=srv.base_url, timeout=30) as c:
            exp_id = c.post("/v1/experiments", json=create_body(), headers=h).json()["id"]
            _break_looks_table(module_database_url, True)
            try:
                r = c.post(f"/v1/experiments/{exp_id}/looks",
                           json=totals((1000, 100), (1000, 104)), headers=h)
            finally:
                _break_looks_table(module_database_url, False)
            assert r.status_code == 500, r.text
            assert r.headers["connection"] == "close"
            rid = r.headers["seqtest-request-id"]
            body = r.json()["error"]
            assert rid in body["message"] and "nothing was stored" not in body["message"]
            # the client reconnects; the next request on it is answered
            ok = c.post(f"/v1/experiments/{exp_id}/looks",
                        json=totals((1000, 100), (1000, 104)), headers=h)
            assert ok.status_code == 201, ok.text
        time.sleep(0.2)
        assert srv.log_file is not None
        log = srv.log_file.read_text()
        assert log.count(f"unexpected error (request {rid})") == 1
        assert "Exception in ASGI application" not in log
        assert "INSERT INTO" not in log and "[SQL" not in log and "[parameters" not in log
    finally:
        srv.stop()


# ------------------------------------------------------------------ 10.7 storage failures


def _sqlite_app(path: Path, **settings: Any) -> tuple[TestClient, dict[str, str], Database]:
    s = Settings.from_env({"database_url": f"sqlite:///{path}", "access_log": False,
                           **settings})
    db = Database(s)
    key = auth(usecases.create_key(db, "juniper-bakery")[1])
    return TestClient(create_app(settings=s, db=db), raise_server_exceptions=False), key, db


def test_10_7_sqlite_disk_full_gives_503_and_health_says_so(tmp_path: Path):
    """SQLite's own disk-full error (SQLITE_FULL), raised by capping the database's
    pages at what it holds (PRAGMA max_page_count): a write gets 503 with
    Retry-After and stores nothing; health reports it until a write succeeds."""
    client, key, db = _sqlite_app(tmp_path / "full.db")
    with client:
        exp_id = client.post("/v1/experiments", json=create_body(), headers=key).json()["id"]
        from sqlalchemy import event

        @event.listens_for(db.engine, "connect")
        def _cap(dbapi_conn: Any, _rec: Any) -> None:
            cur = dbapi_conn.cursor()
            pages = cur.execute("PRAGMA page_count").fetchone()[0]
            cur.execute(f"PRAGMA max_page_count={pages}")
            cur.close()

        db.engine.dispose()  # new connections, capped
        big = create_body(description="x" * 1900)
        for _ in range(30):  # fill the free pages, until the disk is "full"
            r = client.post("/v1/experiments", json=big, headers=key)
            if r.status_code != 201:
                break
        err = error(r, 503, "no space", "Nothing was stored")
        assert r.headers["retry-after"].isdigit()
        assert err["details"][0]["message"] == "full"
        h = client.get("/v1/health")
        error(h, 503, "full")
        assert client.get(f"/v1/experiments/{exp_id}", headers=key).status_code == 200
    db.close()


@pytest.fixture
def tmpfs(tmp_path: Path) -> Iterator[Path]:
    """A 1 MiB tmpfs (needs permission to mount; skipped where there is none)."""
    import subprocess

    mnt = tmp_path / "mnt"
    mnt.mkdir()
    r = subprocess.run(["mount", "-t", "tmpfs", "-o", "size=1m", "tmpfs", str(mnt)],
                       capture_output=True, text=True)
    if r.returncode != 0:
        pytest.skip(f"cannot mount a tmpfs here: {r.stderr.strip()}")
    try:
        yield mnt
    finally:
        subprocess.run(["umount", "-l", str(mnt)], capture_output=True)


def test_10_7_sqlite_on_a_full_filesystem_gives_503(tmpfs: Path):
    client, key, db = _sqlite_app(tmpfs / "seqtest.db")
    with client:
        exp_id = client.post("/v1/experiments", json=create_body(), headers=key).json()["id"]
        filler = tmpfs / "filler"
        with open(filler, "wb") as f:  # take every free block of the filesystem
            try:
                while True:
                    f.write(b"\0" * 65536)
                    f.flush()
            except OSError:
                pass
        statuses = []
        for i in range(20):
            r = client.post(f"/v1/experiments/{exp_id}/looks", headers=key,
                            json=totals((1000 * (i + 1), 100 * (i + 1)),
                                        (1000 * (i + 1), 100 * (i + 1))))
            statuses.append(r.status_code)
            if r.status_code != 201:
                break
        assert statuses[-1] == 503, statuses
        assert 500 not in statuses
        assert r.headers["retry-after"].isdigit()
        filler.unlink()
        r = client.post(f"/v1/experiments/{exp_id}/looks", headers=key,
                        json=totals((10**5, 10**4), (10**5, 10**4)))
        assert r.status_code == 201, r.text
    db.close()


def test_10_7_sqlite_read_only_database_gives_503_and_health_says_so(tmp_path: Path):
    """The database's folder seen through a read-only bind mount (a real read-only
    filesystem; skipped where mounting is not permitted): reads work, writes get 503
    with Retry-After and store nothing, health reports it."""
    import subprocess

    rw, ro = tmp_path / "rw", tmp_path / "ro"
    rw.mkdir()
    ro.mkdir()
    client, key, writer = _sqlite_app(rw / "seqtest.db")
    with client:
        exp_id = client.post("/v1/experiments", json=create_body(), headers=key).json()["id"]
    # the writer stays open, so the WAL's shared-memory file stays (a WAL database is
    # only readable where that file exists)
    r = subprocess.run(["mount", "--bind", str(rw), str(ro)], capture_output=True, text=True)
    if r.returncode != 0:
        pytest.skip(f"cannot bind-mount here: {r.stderr.strip()}")
    try:
        subprocess.run(["mount", "-o", "remount,ro,bind", str(ro)], check=True)
        s = Settings.from_env({"database_url": f"sqlite:///{ro / 'seqtest.db'}",
                               "access_log": False})
        db = Database(s)
        with TestClient(create_app(settings=s, db=db), raise_server_exceptions=False) as c:
            assert c.get(f"/v1/experiments/{exp_id}", headers=key).status_code == 200
            r2 = c.post(f"/v1/experiments/{exp_id}/looks", headers=key,
                        json=totals((1000, 100), (1000, 104)))
            err = error(r2, 503, "read-only", "Nothing was stored")
            assert err["details"][0]["message"] == "read_only"
            assert r2.headers["retry-after"].isdigit()
            error(c.get("/v1/health"), 503, "read_only")
            assert c.get(f"/v1/experiments/{exp_id}", headers=key).json()["look_count"] == 0
        db.close()
    finally:
        subprocess.run(["umount", "-l", str(ro)], capture_output=True)
        writer.close()


class SilentProxy:
    """A TCP proxy to PostgreSQL that can go silent: it keeps accepting connections
    and reading, and never answers again (a wedged server)."""

    def __init__(self, target: tuple[str, int]) -> None:
        self.target = target
        self.silent = threading.Event()
        self.sock = socket.socket()
        self.sock.bind(("127.0.0.1", 0))
        self.sock.listen(200)
        self.port = self.sock.getsockname()[1]
        self.conns: list[socket.socket] = []
        threading.Thread(target=self._accept, daemon=True).start()

    def _accept(self) -> None:
        while True:
            try:
                c, _ = self.sock.accept()
            except OSError:
                return
            self.conns.append(c)
            if self.silent.is_set():
                threading.Thread(target=self._drain, args=(c,), daemon=True).start()
                continue
            up = socket.create_connection(self.target)
            self.conns.append(up)
            threading.Thread(target=self._pipe, args=(c, up), daemon=True).start()
            threading.Thread(target=self._pipe, args=(up, c), daemon=True).start()

    def _drain(self, c: socket.socket) -> None:
        try:
            while c.recv(65536):
                pass
        except OSError:
            pass

    def _pipe(self, a: socket.socket, b: socket.socket) -> None:
        try:
            while True:
                data = a.recv(65536)
                if not data:
                    return
                if self.silent.is_set():
                    self._drain(a)
                    return
                b.sendall(data)
        except OSError:
            return

    def close(self) -> None:
        self.sock.close()
        for c in self.conns:
            try:
                c.close()
            except OSError:
                pass


@pytest.mark.postgres
def test_10_7_a_silent_postgresql_gives_503_within_the_statement_timeout(postgres_url: str):
    from sqlalchemy.engine import make_url

    url = make_url(postgres_url.replace("postgresql://", "postgresql+psycopg://", 1))
    proxy = SilentProxy((url.host or "127.0.0.1", url.port or 5432))
    proxied = url.set(host="127.0.0.1", port=proxy.port).render_as_string(hide_password=False)
    s = Settings.from_env({"database_url": proxied, "statement_timeout_s": 1,
                           "connect_timeout_s": 2, "access_log": False})
    db = Database(s)
    try:
        key = auth(usecases.create_key(db, "juniper-bakery")[1])
        with TestClient(create_app(settings=s, db=db), raise_server_exceptions=False) as c:
            exp_id = c.post("/v1/experiments", json=create_body(), headers=key).json()["id"]
            proxy.silent.set()
            for url_, body in [(f"/v1/experiments/{exp_id}/looks",
                                totals((1000, 100), (1000, 104))), ("/v1/health", None)]:
                t0 = time.monotonic()
                r = c.post(url_, json=body, headers=key) if body else c.get(url_)
                took = time.monotonic() - t0
                assert r.status_code == 503, r.text
                assert r.headers["retry-after"].isdigit()
                assert took < 2 * (s.statement_timeout_s + 1) + s.connect_timeout_s, took
            assert "did not answer" in r.text or "cannot be reached" in r.text \
                or "no_answer" in r.text or "unreachable" in r.text
    finally:
        proxy.close()
        db.close()


# ------------------------------------------------------------------ 10.8 futility


@pytest.mark.parametrize("binding", [False, True])
def test_10_8_non_binding_futility_keeps_running_binding_stops(world, binding):
    """Treatment 8% against control 12% at the first of four looks: z about -3, below
    a Pocock-type futility boundary (futility stops for effects in the wrong
    direction; fact of the trade)."""
    client, key, db = world
    exp = client.post("/v1/experiments", headers=key, json=create_body(design={
        "looks": 4, "sides": 1, "futility": "pocock-type", "binding": binding,
        "metric": BINARY})).json()
    r = client.post(f"/v1/experiments/{exp['id']}/looks", headers=key,
                    json=totals((1500, 180), (1500, 120)))
    assert r.status_code == 201, r.text
    assert r.json()["decision"] == "stop_futility"
    nxt = client.post(f"/v1/experiments/{exp['id']}/looks", headers=key,
                      json=totals((3000, 360), (3000, 250)))
    if binding:
        assert r.json()["state"] == "stopped"
        error(nxt, 409, "stopped", "stop_futility", "create a new experiment")
    else:
        assert r.json()["state"] == "running"
        assert nxt.status_code == 201, nxt.text
        assert nxt.json()["look"] == 2


# ------------------------------------------------------------------ 10.9 amendments


def test_10_9_an_amendment_changes_one_input_and_keeps_the_rest(world):
    client, key, db = world
    exp = client.post("/v1/experiments", headers=key, json=create_body(design={
        "looks": 4, "efficacy": "pocock-type", "metric": BINARY})).json()
    r = client.post(f"/v1/experiments/{exp['id']}/amendments", headers=key,
                    json={"reason": "one more look", "design": {"looks": 8}})
    assert r.status_code == 201, r.text
    plan = r.json()["plan"]
    assert len(plan["boundaries"]) == 8
    assert plan["source"]["inputs"] == {"looks": 8, "efficacy": "pocock-type",
                                        "metric": BINARY}
    expected = seqtest.design(looks=8, efficacy="pocock-type", metric=BINARY)
    assert plan["document"]["computed"]["efficacy_z"] == pytest.approx(
        list(expected.efficacy_z), abs=1e-9)


def test_10_9_an_amendment_may_give_max_n(world):
    client, key, db = world
    exp = client.post("/v1/experiments", headers=key, json=create_body(
        design={"looks": 4}, metric_kind="binary", max_n=4000)).json()
    r = client.post(f"/v1/experiments/{exp['id']}/amendments", headers=key,
                    json={"reason": "more traffic than planned", "design": {"looks": 5},
                          "max_n": 6000})
    assert r.status_code == 201, r.text
    assert r.json()["max_n"] == 6000
    look = client.post(f"/v1/experiments/{exp['id']}/looks", headers=key,
                       json=totals((600, 60), (600, 61)))
    assert look.json()["result"]["information_fraction"] == pytest.approx(0.2)


def test_10_9_an_amendment_from_a_document_plan_keeps_its_inputs(world):
    client, key, db = world
    exp = client.post("/v1/experiments", headers=key, json=create_body(
        design=None, plan=design_doc(efficacy="hsd:-2"))).json()
    r = client.post(f"/v1/experiments/{exp['id']}/amendments", headers=key,
                    json={"reason": "two more looks", "design": {"looks": 6}})
    assert r.status_code == 201, r.text
    assert r.json()["plan"]["document"]["inputs"]["efficacy"] == \
        exp["plan"]["document"]["inputs"]["efficacy"]


# ------------------------------------------------------------------ 10.10 messages


def test_10_10_extra_fields_are_named_with_what_is_allowed(world):
    client, key, db = world
    r = client.post("/v1/experiments", headers=key, json=create_body(colour="red"))
    err = error(r, 422, "unknown field 'colour'", "allowed here are", "metric_kind")
    assert err["details"][0]["location"] == ["body", "colour"]
    r = client.post("/v1/experiments", headers=key,
                    json=create_body(design={"looks": 4, "metric": BINARY, "grid_r": 30}))
    error(r, 422, "unknown field 'grid_r'", "information_fractions")
    assert "Extra inputs are not permitted" not in r.text


@pytest.mark.parametrize("ctype", [None, "text/plain", "application/x-www-form-urlencoded"])
def test_10_10_a_body_that_is_not_sent_as_json_gets_415(world, ctype):
    client, key, db = world
    headers = dict(key)
    if ctype:
        headers["content-type"] = ctype
    r = client.post("/v1/experiments", content=json.dumps(create_body()).encode(),
                    headers=headers)
    err = error(r, 415, "Content-Type", "application/json")
    assert err["code"] == "unsupported_media_type"


def test_10_10_a_look_after_a_stop_says_the_state_and_what_to_do(world):
    client, key, db = world
    exp = client.post("/v1/experiments", json=create_body(), headers=key).json()
    stop = client.post(f"/v1/experiments/{exp['id']}/looks", headers=key,
                       json=totals((3000, 300), (3000, 900)))
    assert stop.json()["decision"] == "stop_efficacy"
    for url, body in [(f"/v1/experiments/{exp['id']}/looks", totals((4000, 400), (4000, 1200))),
                      (f"/v1/experiments/{exp['id']}/amendments",
                       {"reason": "late change", "design": {"looks": 6}})]:
        err = error(client.post(url, json=body, headers=key), 409, "is stopped",
                    "stop_efficacy", f"GET /v1/experiments/{exp['id']}", "new experiment")
        assert err["code"] == "experiment_closed"


# ------------------------------------------------------------------ 10.11 growth


def test_10_11_each_look_is_stored_once_and_the_history_equals_a_full_reanalysis(world):
    """40 looks: the text stored per look does not grow with the look's number, and
    the stored rows and the last summary equal the library's analysis of all looks."""
    client, key, db = world
    exp = client.post("/v1/experiments", headers=key, json=create_body(
        design={"looks": 5, "futility": "pocock-type", "metric": BINARY},
        metric_kind="binary", max_n=10**7)).json()
    history = []
    for k in range(1, 41):
        body = totals((1000 * k, 100 * k + (k % 3)), (1000 * k, 101 * k))
        r = client.post(f"/v1/experiments/{exp['id']}/looks", json=body, headers=key)
        assert r.status_code == 201, r.text
        history.append({"control": body["totals"]["classic"],
                        "treatment": body["totals"]["large"]})
    with db.engine.connect() as conn:
        sizes = conn.execute(
            select(func.length(tables.looks.c.analysis) + func.length(tables.looks.c.result))
            .order_by(tables.looks.c.number)).scalars().all()
    assert max(sizes) < 1.5 * min(sizes), sizes  # linear storage, not quadratic
    plan = seqtest.plan_from_dict(exp["plan"]["document"])
    full = json_safe(seqtest.analyze(plan, history, metric="binary", allocation=1.0,
                                     max_n=10**7).to_dict())
    got = client.get(f"/v1/experiments/{exp['id']}?looks_limit=1000", headers=key).json()
    assert got["analysis"] == full
    assert [lk["result"] for lk in got["looks_recorded"]] == full["looks"]


def test_10_11_looks_and_plan_versions_are_paged_with_totals(world):
    client, key, db = world
    exp_id = client.post("/v1/experiments", json=create_body(), headers=key).json()["id"]
    for k in range(1, 6):
        client.post(f"/v1/experiments/{exp_id}/looks", headers=key,
                    json=totals((100 * k, 10 * k), (100 * k, 10 * k)))
    for v in range(3):
        client.post(f"/v1/experiments/{exp_id}/amendments", headers=key,
                    json={"reason": f"v{v}", "design": {"looks": 4 + v}})
    got = client.get(f"/v1/experiments/{exp_id}?looks_offset=1&looks_limit=2"
                     "&versions_offset=2&versions_limit=1", headers=key).json()
    assert [lk["look"] for lk in got["looks_recorded"]] == [2, 3]
    assert got["looks_page"] == {"offset": 1, "limit": 2, "total": 5}
    assert [p["version"] for p in got["plan_versions"]] == [3]
    assert got["plan_versions_page"] == {"offset": 2, "limit": 1, "total": 4}
    assert got["plan"]["version"] == 4
    assert got["analysis"]["decision"] == got["decision"]
    assert [row["look"] for row in got["analysis"]["looks"]] == [2, 3]
    error(client.get(f"/v1/experiments/{exp_id}?looks_limit=5000", headers=key), 422,
          "looks_limit")


def test_10_11_idempotency_keys_expire_and_are_purged(world, monkeypatch):
    client, key, db = world
    h = {**key, "Idempotency-Key": "nightly-1"}
    first = client.post("/v1/experiments", json=create_body(), headers=h)
    with db.engine.begin() as conn:  # the key is now older than its time to live
        conn.execute(update(tables.idempotency_keys).values(
            created_at="2000-01-01T00:00:00.000000Z"))
        conn.execute(tables.idempotency_keys.insert().values(
            team_id=first.json()["created_by"] and conn.execute(
                select(tables.teams.c.id)).scalar_one(),
            key="old-other", request_hash="x", status_code=201, response="{}",
            created_at="2000-01-01T00:00:00.000000Z"))
    monkeypatch.setattr(usecases, "_last_purge", 0.0)
    again = client.post("/v1/experiments", json=create_body(), headers=h)
    assert again.status_code == 201 and "seqtest-replayed" not in again.headers
    assert again.json()["id"] != first.json()["id"]  # expired: a new request
    with db.engine.connect() as conn:
        keys = conn.execute(select(tables.idempotency_keys.c.key)).scalars().all()
    assert keys == ["nightly-1"]  # the other expired key was purged


def _v2_database(url: str) -> None:
    """A database at schema version 2, with rows as the first release wrote them."""
    s = Settings.from_env({"database_url": url})
    db = Database(s, migrate=False)
    migrations.migrate(db.engine, target=2)
    plan = design_doc()
    looks = [{"control": {"n": 1000 * k, "successes": 100 * k},
              "treatment": {"n": 1000 * k, "successes": 102 * k}} for k in (1, 2)]
    ts = "2024-05-01T12:00:00.000000Z"
    with db.engine.begin() as conn:
        conn.execute(text("INSERT INTO teams (id, name, created_at) VALUES "
                          "('team_1', 'juniper-bakery', :ts)"), {"ts": ts})
        conn.execute(text("INSERT INTO experiments (id, team_id, name, description, metric, "
                          "control_arm, treatment_arm, allocation, max_n, fraction, "
                          "plan_version, look_count, state, decision, created_at, created_by, "
                          "updated_at) VALUES ('exp_v2', 'team_1', 'old one', '', 'binary', "
                          "'classic', 'large', 1.0, NULL, NULL, 1, 2, 'running', 'continue', "
                          ":ts, 'key_1', :ts)"), {"ts": ts})
        conn.execute(text("INSERT INTO plan_versions (experiment_id, version, kind, document, "
                          "source, reason, after_look, recorded_at, recorded_by) VALUES "
                          "('exp_v2', 1, 'group_sequential', :doc, '{\"from\":\"document\"}', "
                          "NULL, 0, :ts, 'key_1')"), {"doc": json.dumps(plan), "ts": ts})
        for k in (1, 2):
            full = json_safe(seqtest.analyze(seqtest.plan_from_dict(plan), looks[:k],
                                             metric="binary").to_dict())
            conn.execute(text("INSERT INTO looks (experiment_id, number, plan_version, totals, "
                              "final, decision, analysis, recorded_at, recorded_by) VALUES "
                              "('exp_v2', :k, 1, :totals, :final, 'continue', :analysis, :ts, "
                              "'key_1')"),
                         {"k": k, "totals": json.dumps(looks[k - 1]), "final": False,
                          "analysis": json.dumps(full), "ts": ts})
    db.close()


def test_10_11_a_version_2_database_upgrades_in_place_and_stays_readable(database_url: str):
    _v2_database(database_url)
    db = open_db(database_url)  # migrates to the latest version
    try:
        assert db.schema_version == migrations.LATEST
        with db.engine.begin() as conn:
            team_id = conn.execute(select(tables.teams.c.id)).scalar_one()
        _, token = usecases.create_key(db, "juniper-bakery")
        key = auth(token)
        assert team_id == "team_1"
        with app_client(db) as client:
            got = client.get("/v1/experiments/exp_v2", headers=key)
            assert got.status_code == 200, got.text
            body = got.json()
            assert [lk["result"]["look"] for lk in body["looks_recorded"]] == [1, 2]
            assert body["analysis"]["decision"] == "continue"
            assert len(body["plan"]["boundaries"]) == 4
            assert client.get("/v1/experiments/exp_v2/looks/1", headers=key).json()[
                "analysis"]["looks"][0]["look"] == 1
            third = client.post("/v1/experiments/exp_v2/looks", headers=key,
                                json=totals((3000, 300), (3000, 306)))
            assert third.status_code == 201, third.text
            assert [row["look"] for row in third.json()["analysis"]["looks"]] == [1, 2, 3]
    finally:
        db.close()


# ------------------------------------------------------------------ 10.12 operations


def test_10_12_log_lines_have_time_level_request_id_and_team(module_database_url: str,
                                                               tmp_path: Path):
    srv = Server(module_database_url, tmp_path / "server.log").start()
    try:
        h = auth(new_key(module_database_url, "team-logging"))
        r = httpx.get(srv.base_url + "/v1/experiments", headers=h, timeout=10)
        rid = r.headers["seqtest-request-id"]
        time.sleep(0.2)
    finally:
        srv.stop()
    assert srv.log_file is not None
    lines = srv.log_file.read_text().splitlines()
    stamp = re.compile(r"^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{3}Z (DEBUG|INFO|WARNING|ERROR|"
                       r"CRITICAL) \S+ \[[-0-9a-f]+\] ")
    assert lines and all(stamp.match(line) for line in lines if line.strip()), lines[:5]
    access = [line for line in lines if f"[{rid}]" in line and "seqtest.access" in line]
    assert len(access) == 1 and "team=team-logging" in access[0] and " 200 " in access[0]


def test_10_12_unfinished_headers_and_bodies_are_closed_in_time(module_database_url: str,
                                                                 tmp_path: Path):
    """200 connections that never finish their headers are all closed within the
    header timeout (1 s here) plus a margin; a body that stops half way gets 408
    within the body timeout; the server answers normally meanwhile."""
    srv = Server(module_database_url, tmp_path / "server.log",
                 args=["--header-timeout", "1", "--body-timeout", "1"]).start()
    port = int(srv.base_url.rsplit(":", 1)[1])
    socks = []
    try:
        for _ in range(200):
            s = socket.create_connection(("127.0.0.1", port), timeout=10)
            s.sendall(b"GET /v1/health HTTP/1.1\r\nHost: x\r\n")  # no blank line: unfinished
            socks.append(s)
        t0 = time.monotonic()
        assert httpx.get(srv.base_url + "/v1/health", timeout=10).status_code == 200
        closed_at = []
        for s in socks:
            s.settimeout(max(0.1, t0 + 5 - time.monotonic()))
            try:
                data = s.recv(1024)
            except TimeoutError:
                data = b"still open"
            except OSError:
                data = b""
            assert data == b"", data
            closed_at.append(time.monotonic() - t0)
        assert max(closed_at) < 3.0, max(closed_at)
        # a body that stops half way
        s = socket.create_connection(("127.0.0.1", port), timeout=10)
        s.sendall(b"POST /v1/experiments HTTP/1.1\r\nHost: x\r\nContent-Type: application/json"
                  b"\r\nContent-Length: 100\r\n\r\n{\"name\":")
        t1 = time.monotonic()
        answer = s.recv(4096)
        assert answer.startswith(b"HTTP/1.1 408"), answer[:200]
        assert time.monotonic() - t1 < 3.0
        s.close()
    finally:
        for s in socks:
            s.close()
        srv.stop()


# ------------------------------------------------------------------ 10.13 names


def test_10_13_replays_are_marked_with_the_projects_own_header(world):
    client, key, db = world
    h = {**key, "Idempotency-Key": "names-1"}
    first = client.post("/v1/experiments", json=create_body(), headers=h)
    second = client.post("/v1/experiments", json=create_body(), headers=h)
    assert second.headers["seqtest-replayed"] == "true"
    assert "seqtest-replayed" not in first.headers
    old = "idempotent" + "-replayed"
    assert all(old not in name.lower() for name in second.headers)
    row = first.json()["plan"]["boundaries"][0]
    assert row["p_threshold"] == row["nominal_p"]  # the new name, and the old one for now


def test_10_13_old_request_names_are_accepted_with_a_deprecation_notice(world):
    client, key, db = world
    r = client.post("/v1/experiments", headers=key, json=create_body(
        design={"looks": 4}, metric="binary", max_n=4000, fraction="sample"))
    assert r.status_code == 201, r.text
    assert r.headers["deprecation"] == "true"
    notes = " ".join(r.json()["deprecations"])
    assert "metric_kind" in notes and "fraction_basis" in notes
    assert r.json()["metric_kind"] == "binary" and r.json()["look_count"] == 0
    plain = client.post("/v1/experiments", headers=key, json=create_body(
        design={"looks": 4}, metric_kind="binary", max_n=4000))
    assert "deprecation" not in plain.headers and "deprecations" not in plain.json()
    both = client.post("/v1/experiments", headers=key, json=create_body(
        design={"looks": 4}, metric="binary", metric_kind="binary", max_n=4000))
    error(both, 422, "metric_kind")


def test_10_9_an_amendment_names_inputs_that_do_not_fit_the_plans_kind(world):
    client, key, db = world
    exp = client.post("/v1/experiments", headers=key, json=create_body(
        design={"kind": "mixture", "metric": BINARY})).json()
    r = client.post(f"/v1/experiments/{exp['id']}/amendments", headers=key,
                    json={"reason": "planned looks", "design": {"looks": 8}})
    err = error(r, 422, "design.looks", "mixture", "max_n_per_arm")
    assert err["details"][0]["location"] == ["body", "design", "looks"]
    ok = client.post(f"/v1/experiments/{exp['id']}/amendments", headers=key,
                     json={"reason": "stricter error rate", "design": {"alpha": 0.01}})
    assert ok.status_code == 201, ok.text
    assert ok.json()["plan"]["source"]["inputs"] == {"metric": BINARY, "alpha": 0.01}
