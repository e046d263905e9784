"""Several server processes against one PostgreSQL database: two ``serve`` instances
with two worker processes each (four uvicorn processes, real ones, on loopback),
started at the same moment on an empty schema.

What must hold (common practice for a serialised append-only log): the schema's
migrations applied once; every acknowledged look stored exactly once, numbered
1..n without gap, its totals cumulative and as posted, and analysed over exactly
the looks before it; a retry with the same Idempotency-Key, sent at the same time
through the other instance, answered with the first outcome and storing nothing.
"""

from __future__ import annotations

import itertools
import threading
import time
from pathlib import Path

import httpx
import pytest
from service_helpers import Server, auth, new_key, open_db
from sqlalchemy import select

from service.db import migrations, tables

pytestmark = pytest.mark.postgres

PLAN = {"name": "checkout button", "metric": "binary", "max_n": 10**9,
        "arms": {"control": "classic", "treatment": "large"},
        "design": {"looks": 5}}
WRITERS, EXPERIMENTS, LOOKS_EACH = 16, 4, 2


def totals(n: int) -> dict:
    """Equal arms at 10% (z = 0: continue), far from the end of the plan."""
    return {"totals": {"classic": {"n": n, "successes": n // 10},
                       "large": {"n": n, "successes": n // 10}}}


def test_sixteen_writers_across_four_processes(postgres_url: str, tmp_path: Path):
    servers = [Server(postgres_url, tmp_path / f"serve{i}.log", workers=2)
               for i in range(2)]
    failures: list[BaseException] = []

    def start(srv: Server) -> None:
        try:
            srv.start(timeout=120)
        except BaseException as exc:  # noqa: BLE001 - surfaced below
            failures.append(exc)

    starters = [threading.Thread(target=start, args=(s,)) for s in servers]
    for t in starters:
        t.start()
    for t in starters:
        t.join()
    try:
        assert not failures, failures
        for srv in servers:  # each instance runs two worker processes
            assert srv.log_file is not None
            # an instance answers as soon as one worker is up; on a busy machine the
            # second may log its start a few seconds later
            deadline = time.monotonic() + 120
            while (srv.log_file.read_text().count("Started server process") < 2
                   and time.monotonic() < deadline):
                time.sleep(0.2)
            assert srv.log_file.read_text().count("Started server process") == 2
        db = open_db(postgres_url)
        try:
            with db.engine.connect() as conn:
                applied = conn.execute(select(tables.schema_version.c.version)).scalars().all()
        finally:
            db.close()
        assert sorted(applied) == list(range(1, migrations.LATEST + 1))  # each once

        h = auth(new_key(postgres_url, "team-processes"))
        with httpx.Client(base_url=servers[0].base_url, timeout=60) as c:
            exp_ids = []
            for _ in range(EXPERIMENTS):
                r = c.post("/v1/experiments", json=PLAN, headers=h)
                assert r.status_code == 201, r.text
                exp_ids.append(r.json()["id"])
        run_writers(servers, exp_ids, h)
    finally:
        for srv in servers:
            srv.stop()


def run_writers(servers: list[Server], exp_ids: list[str], h: dict[str, str]) -> None:
    counters = {e: itertools.count(1000, 1000) for e in exp_ids}
    lock = threading.Lock()
    acked: dict[str, dict[int, dict]] = {e: {} for e in exp_ids}
    posted: dict[str, int] = {}  # Idempotency-Key -> posted n
    errors: list[str] = []
    keys = itertools.count()

    def twice(w: int, exp_id: str, clients: list[httpx.Client]) -> str:
        """One look sent at the same time through both instances with one key;
        'ok', 'behind' (lost a race: totals below a stored look) or 'error'."""
        with lock:
            n = next(counters[exp_id])
            key = f"writer-{w}-look-{next(keys)}"
            posted[key] = n
        answers: list[httpx.Response | None] = [None, None]
        go = threading.Barrier(2)

        def send(i: int) -> None:
            go.wait()
            answers[i] = clients[i].post(f"/v1/experiments/{exp_id}/looks", json=totals(n),
                                         headers={**h, "Idempotency-Key": key})

        pair = [threading.Thread(target=send, args=(i,)) for i in range(2)]
        for t in pair:
            t.start()
        for t in pair:
            t.join()
        a, b = answers
        assert a is not None and b is not None
        if a.status_code == b.status_code == 201:
            replayed = sorted(r.headers.get("Seqtest-Replayed") == "true" for r in (a, b))
            if replayed != [False, True] or a.json() != b.json():
                return f"error: same key, answers differ: {a.text[:300]} / {b.text[:300]}"
            body = a.json()
            with lock:
                if body["look"] in acked[exp_id]:
                    return f"error: look {body['look']} acknowledged twice"
                acked[exp_id][body["look"]] = {**body, "key": key}
            return "ok"
        if a.status_code == b.status_code == 422 and all("backwards" in r.text
                                                         for r in (a, b)):
            return "behind"
        return f"error: {a.status_code} {a.text[:300]} / {b.status_code} {b.text[:300]}"

    def writer(w: int) -> None:
        exp_id = exp_ids[w % len(exp_ids)]
        order = servers if w % 2 == 0 else servers[::-1]
        with httpx.Client(base_url=order[0].base_url, timeout=60) as c0, \
                httpx.Client(base_url=order[1].base_url, timeout=60) as c1:
            done = tries = 0
            while done < LOOKS_EACH and tries < 50:
                tries += 1
                outcome = twice(w, exp_id, [c0, c1])
                if outcome == "ok":
                    done += 1
                elif outcome != "behind":
                    errors.append(outcome)
                    return
            if done < LOOKS_EACH:
                errors.append(f"writer {w}: {done} looks after {tries} tries")

    pool = [threading.Thread(target=writer, args=(w,)) for w in range(WRITERS)]
    for t in pool:
        t.start()
    for t in pool:
        t.join()
    assert not errors, errors[:3]

    per_experiment = WRITERS // len(exp_ids) * LOOKS_EACH
    with httpx.Client(base_url=servers[1].base_url, timeout=60) as c:
        for exp_id in exp_ids:
            got = c.get(f"/v1/experiments/{exp_id}", headers=h).json()
            stored = got["looks_recorded"]
            mine = acked[exp_id]
            assert sorted(mine) == list(range(1, per_experiment + 1))
            assert [lk["look"] for lk in stored] == list(range(1, per_experiment + 1))
            assert got["look_count"] == per_experiment
            ns = [lk["totals"]["classic"]["n"] for lk in stored]
            assert ns == sorted(ns) and len(set(ns)) == len(ns)  # cumulative
            for lk in stored:
                a = mine[lk["look"]]
                assert lk["totals"] == a["totals"] == totals(posted[a["key"]])["totals"]
                assert lk["recorded_at"] == a["recorded_at"]
                assert len(a["analysis"]["looks"]) == lk["look"]
