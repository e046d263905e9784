"""End to end through a real uvicorn process on 127.0.0.1, on SQLite and PostgreSQL:
the full flow, concurrent posts to one experiment, idempotent retries, team
isolation, and durability of acknowledged looks across kill -9.
"""

from __future__ import annotations

import json
import subprocess
import sys
import threading
from pathlib import Path

import httpx
import pytest
from service_helpers import REPO, Server, auth, new_key

# No metric in the plan: sized by max_n. A large max_n keeps every look far from
# the end of the plan, so many looks can be posted without the plan completing.
PLAN = {"name": "checkout button", "metric": "binary", "max_n": 10**9,
        "arms": {"control": "classic", "treatment": "large"},
        "design": {"looks": 5, "efficacy": "obrien-fleming-type"}}


def totals(n: int) -> dict:
    """Cumulative totals of equal arms (10% conversion in both: z = 0, continue)."""
    return {"totals": {"classic": {"n": n, "successes": n // 10},
                       "large": {"n": n, "successes": n // 10}}}


def cli(*args: str, database_url: str) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "service", *args, "--database-url", database_url],
        cwd=REPO, capture_output=True, text=True, timeout=60,
    )


def new_experiment(client: httpx.Client, headers: dict, **over) -> str:
    r = client.post("/v1/experiments", json={**PLAN, **over}, headers=headers)
    assert r.status_code == 201, r.text
    return r.json()["id"]


@pytest.fixture
def client(server: Server):
    with httpx.Client(base_url=server.base_url, timeout=60) as c:
        yield c


def test_full_flow_with_a_key_from_the_command_line(server: Server, client: httpx.Client):
    made = cli("keys", "create", "--team", "juniper-bakery", "--label", "pipeline", "--json",
               database_url=server.database_url)
    assert made.returncode == 0, made.stderr
    key = json.loads(made.stdout)
    h = auth(key["key"])
    listed = cli("keys", "list", "--team", "juniper-bakery", "--json",
                 database_url=server.database_url)
    assert [k["id"] for k in json.loads(listed.stdout)] == [key["id"]]
    assert key["key"] not in listed.stdout  # tokens are never listed

    r = client.post("/v1/experiments", headers=h, json={
        "name": "checkout button", "arms": {"control": "classic", "treatment": "large"},
        "design": {"looks": 4, "metric": {"kind": "binary", "baseline": 0.12, "mde": 0.02}}})
    assert r.status_code == 201, r.text
    exp_id = r.json()["id"]
    assert len(r.json()["plan"]["boundaries"]) == 4
    first = client.post(f"/v1/experiments/{exp_id}/looks", headers=h, json={"totals": {
        "classic": {"n": 1500, "successes": 180}, "large": {"n": 1500, "successes": 200}}})
    assert first.status_code == 201, first.text
    assert first.json()["look"] == 1 and first.json()["decision"] == "continue"
    # 10% vs 30% at 3000 per arm: z far beyond any boundary (fact of the trade)
    stop = client.post(f"/v1/experiments/{exp_id}/looks", headers=h, json={"totals": {
        "classic": {"n": 3000, "successes": 300}, "large": {"n": 3000, "successes": 900}}})
    assert stop.status_code == 201, stop.text
    assert stop.json()["decision"] == "stop_efficacy"
    got = client.get(f"/v1/experiments/{exp_id}", headers=h).json()
    assert got["state"] == "stopped" and [lk["look"] for lk in got["looks_recorded"]] == [1, 2]
    assert client.get("/v1/experiments", params={"state": "stopped"},
                      headers=h).json()["total"] == 1

    revoked = cli("keys", "revoke", key["id"], database_url=server.database_url)
    assert revoked.returncode == 0, revoked.stderr
    assert client.get("/v1/experiments", headers=h).status_code == 401


def test_team_isolation(server: Server, client: httpx.Client):
    a = auth(new_key(server.database_url, "team-isolation-a"))
    b = auth(new_key(server.database_url, "team-isolation-b"))
    exp_id = new_experiment(client, a)
    assert client.get(f"/v1/experiments/{exp_id}", headers=b).status_code == 404
    assert client.post(f"/v1/experiments/{exp_id}/looks", json=totals(100),
                       headers=b).status_code == 404
    assert client.get(f"/v1/experiments/{exp_id}").status_code == 401
    assert client.get(f"/v1/experiments/{exp_id}",
                      headers=auth("sqt_" + "x" * 43)).status_code == 401
    assert exp_id not in client.get("/v1/experiments", headers=b).text
    assert client.get(f"/v1/experiments/{exp_id}", headers=a).status_code == 200


def race(base_url: str, database_url: str, team: str, threads: int = 8, each: int = 4) -> None:
    """``threads`` clients each record ``each`` looks on one experiment, taking ever
    larger totals from a shared counter. Whoever loses a race posts totals below a
    look already stored and is refused (422, totals going backwards) and tries
    again with newer totals; so exactly threads x each looks are acknowledged. They
    must be numbered 1, 2, ... with no gap or repeat, stored exactly as
    acknowledged, and each analysed over all the looks before it."""
    h = auth(new_key(database_url, team))
    with httpx.Client(base_url=base_url, timeout=60) as client:
        exp_id = new_experiment(client, h)
    counter = iter(range(1000, 10**7, 1000))
    lock = threading.Lock()
    acked: list[dict] = []
    refused: list[str] = []
    errors: list[str] = []

    def worker() -> None:
        with httpx.Client(base_url=base_url, timeout=60) as c:
            done = 0
            while done < each and len(refused) < 500:
                with lock:
                    n = next(counter)
                r = c.post(f"/v1/experiments/{exp_id}/looks", json=totals(n), headers=h)
                if r.status_code == 201:
                    done += 1
                    with lock:
                        acked.append(r.json())
                elif r.status_code == 422 and "backwards" in r.text:
                    with lock:
                        refused.append(r.text)
                else:
                    errors.append(f"{r.status_code} {r.text}")
                    return

    pool = [threading.Thread(target=worker) for _ in range(threads)]
    for t in pool:
        t.start()
    for t in pool:
        t.join()
    assert not errors
    total = threads * each
    assert sorted(a["look"] for a in acked) == list(range(1, total + 1))
    with httpx.Client(base_url=base_url, timeout=60) as client:
        got = client.get(f"/v1/experiments/{exp_id}", headers=h).json()
    stored = got["looks_recorded"]
    assert [lk["look"] for lk in stored] == list(range(1, total + 1))
    by_number = {a["look"]: a for a in acked}
    for lk in stored:
        assert lk["totals"] == by_number[lk["look"]]["totals"]
        assert len(by_number[lk["look"]]["analysis"]["looks"]) == lk["look"]
    ns = [lk["totals"]["classic"]["n"] for lk in stored]
    assert ns == sorted(ns) and len(set(ns)) == len(ns)


def test_concurrent_posts_to_one_experiment_are_serialised(server: Server):
    race(server.base_url, server.database_url, "team-concurrency")


def test_concurrent_posts_across_two_worker_processes(sqlite_url: str, tmp_path: Path):
    """The same race against two uvicorn worker processes sharing one SQLite file,
    where only the file lock (BEGIN IMMEDIATE) stands between them. (On PostgreSQL
    every request already has its own connection, as in the race above.)"""
    srv = Server(sqlite_url, tmp_path / "server.log", workers=2).start(timeout=60)
    try:
        race(srv.base_url, sqlite_url, "team-two-workers", threads=6, each=3)
    finally:
        srv.stop()


def test_concurrent_retries_with_one_key_store_one_look(server: Server, client: httpx.Client):
    h = auth(new_key(server.database_url, "team-retries"))
    exp_id = new_experiment(client, h)
    barrier = threading.Barrier(6)
    answers: list[httpx.Response] = []

    def retry() -> None:
        with httpx.Client(base_url=server.base_url, timeout=60) as c:
            barrier.wait()
            answers.append(c.post(f"/v1/experiments/{exp_id}/looks", json=totals(5000),
                                  headers={**h, "Idempotency-Key": "nightly-2024-05-01"}))

    threads = [threading.Thread(target=retry) for _ in range(6)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert [r.status_code for r in answers] == [201] * 6
    assert len({r.text for r in answers}) == 1  # every retry got the first answer
    assert sum(r.headers.get("Seqtest-Replayed") == "true" for r in answers) == 5
    assert client.get(f"/v1/experiments/{exp_id}", headers=h).json()["looks"] == 1
    other = client.post(f"/v1/experiments/{exp_id}/looks", json=totals(6000),
                        headers={**h, "Idempotency-Key": "nightly-2024-05-01"})
    assert other.status_code == 409


def test_acknowledged_looks_survive_kill_9(module_database_url: str, tmp_path: Path):
    """Post looks from two threads, SIGKILL the server mid-stream, restart it on
    the same database: every acknowledged look is there, as acknowledged."""
    srv = Server(module_database_url, tmp_path / "server.log").start()
    h = auth(new_key(module_database_url, "team-durability"))
    try:
        with httpx.Client(base_url=srv.base_url, timeout=60) as c:
            exp_ids = [new_experiment(c, h) for _ in range(2)]
        acked: dict[str, list[dict]] = {e: [] for e in exp_ids}
        started = threading.Barrier(3)

        def poster(exp_id: str) -> None:
            with httpx.Client(base_url=srv.base_url, timeout=60) as c:
                started.wait()
                for i in range(1, 1000):
                    try:
                        r = c.post(f"/v1/experiments/{exp_id}/looks", json=totals(1000 * i),
                                   headers=h)
                    except httpx.TransportError:
                        return  # the server is gone
                    assert r.status_code == 201, r.text
                    acked[exp_id].append(r.json())

        threads = [threading.Thread(target=poster, args=(e,)) for e in exp_ids]
        for t in threads:
            t.start()
        started.wait()
        while min(len(v) for v in acked.values()) < 5:
            threading.Event().wait(0.01)
        srv.kill9()
        for t in threads:
            t.join()

        srv.start()
        with httpx.Client(base_url=srv.base_url, timeout=60) as c:
            for exp_id, answers in acked.items():
                got = c.get(f"/v1/experiments/{exp_id}", headers=h).json()
                stored = got["looks_recorded"]
                numbers = [lk["look"] for lk in stored]
                assert numbers == list(range(1, len(stored) + 1))
                # all acknowledged; at most the one in flight at the kill more
                assert len(answers) <= len(stored) <= len(answers) + 1
                for a in answers:
                    s = stored[a["look"] - 1]
                    assert s["totals"] == a["totals"] and s["recorded_at"] == a["recorded_at"]
                # and the experiment goes on where it stopped
                r = c.post(f"/v1/experiments/{exp_id}/looks", json=totals(10**8), headers=h)
                assert r.status_code == 201 and r.json()["look"] == len(stored) + 1
    finally:
        srv.stop()
