"""Where a look's server CPU goes: HTTP and framework, storage, the analysis.

One run, side by side, the same sequence of looks each way (20 experiments of a
5-look design, 10 looks each, cumulative totals as in ``bench_service.py``):

1. the server (``python -m service serve``, SQLite, one client): CPU per health
   request and per look, in alternating blocks (``bench_service.server_cpu``);
2. the look's use case in this process, without HTTP: the caller's key and first
   snapshot read together, the analysis, the write (``usecases.read_for_look`` and
   ``usecases.append_look``, on a SQLite file of its own);
3. the analysis within it, timed where the use case calls it
   (``service.library.analyze_look``: ``seqtest.analyze`` on the stored plan and
   looks, with the options the service passes, and its JSON).

4. the route alone: the same server and looks, with the look's reads, analysis and
   storage answered from memory (``--canned``: each look number's answer is computed
   once, for the first experiment, and repeated for the others, so the answers keep
   their sizes; the caller's key and snapshot are read once). What is left is the
   cost of the HTTP exchange, the request guard, FastAPI's dependencies and body
   check, the two thread hops and the answer's JSON: the floor of a look's CPU on
   this stack, whatever the analysis and the storage cost.

The differences give the parts: HTTP and framework (1 - 2; uvicorn, the request
guard, FastAPI's dependencies and body check, two thread hops, the answer's JSON),
storage and the service's glue (2 - 3; two transactions, the JSON stored, the
answer's view), the analysis (3). Each is also shown in units of the health
route's CPU, the baseline of the service's speed goal (a look within 4x of health).

    python benchmarks/bench_look_parts.py [--looks 400] [--rounds 3]
"""

from __future__ import annotations

import argparse
import os
import signal
import statistics
import sys
import tempfile
import time
from pathlib import Path

import httpx

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "benchmarks"))

from bench_service import look_body, server_cpu, start_server  # noqa: E402

from service import usecases  # noqa: E402
from service.api.schemas import LookCreate  # noqa: E402
from service.config import Settings  # noqa: E402
from service.db.engine import Database  # noqa: E402

EXPERIMENTS, PER_EXPERIMENT = 20, 10
DESIGN = {"name": "bench", "metric_kind": "binary", "max_n": 10**9, "design": {"looks": 5}}


def sequence(count: int) -> list[tuple[int, int]]:
    """(experiment index, look index) of each look posted, in order."""
    return [(k % EXPERIMENTS, k // EXPERIMENTS % PER_EXPERIMENT) for k in range(count)]


def body(exp: int, i: int) -> dict:
    k = i * EXPERIMENTS + exp
    return look_body(k, 1000 * (i + 1))


def server_part(looks: int, tmp: Path, canned: bool = False) -> tuple[float, float]:
    """Server CPU (ms) per health request and per look (``canned``: the route alone,
    the server started by :func:`serve_canned`)."""
    name = "canned" if canned else "server"
    url = f"sqlite:///{tmp / f'{name}.db'}"
    store = Database(Settings.from_env({"database_url": url}))
    token = usecases.create_key(store, "bench-bakery", "benchmark")[1]
    store.close()
    if canned:
        proc, base = start_server(url, tmp / f"{name}.log",
                                  launcher=(str(Path(__file__).resolve()), "--canned"))
    else:
        proc, base = start_server(url, tmp / f"{name}.log")
    cpu = {"health": 0.0, "look": 0.0}
    try:
        with httpx.Client(base_url=base, timeout=60,
                          headers={"Authorization": f"Bearer {token}"}) as client:
            for _ in range(20):
                client.get("/v1/health").raise_for_status()
            order = sequence(looks)
            ids: list[str] = []
            for start in range(0, looks, 50):
                c0 = server_cpu(proc.pid)
                for _ in range(50):
                    client.get("/v1/health").raise_for_status()
                c1 = server_cpu(proc.pid)
                cpu["health"] += c1 - c0
                for exp, i in order[start:start + 50]:
                    if exp == 0 and i == 0:  # a new round of experiments
                        ids = [client.post("/v1/experiments", json=DESIGN).json()["id"]
                               for _ in range(EXPERIMENTS)]
                    c1 = server_cpu(proc.pid)
                    r = client.post(f"/v1/experiments/{ids[exp]}/looks", json=body(exp, i))
                    cpu["look"] += server_cpu(proc.pid) - c1
                    if r.status_code != 201:
                        raise SystemExit(f"look refused: {r.status_code} {r.text}")
    finally:
        os.killpg(proc.pid, signal.SIGTERM)
        proc.wait(timeout=30)
    return cpu["health"] / looks * 1e3, cpu["look"] / looks * 1e3


def serve_canned(argv: list[str]) -> int:
    """The service's command line (``argv``: ``serve ...``) with a look's reads,
    analysis and storage answered from memory (part 4, the route alone): the answer
    to each look number is computed once, for the first experiment posted to, and
    repeated for every other experiment; the caller's key and the snapshot are read
    once. Nothing else of the service changes."""
    from service.cli import main as cli

    real_read, real_append = usecases.read_for_look, usecases.append_look
    reads: list[usecases.LookRead | None] = []
    answers: dict[float, usecases.Answer] = {}

    def read_for_look(db: Database, token: str, exp_id: str | None
                      ) -> usecases.LookRead | None:
        if not reads:
            reads.append(real_read(db, token, exp_id))
        return reads[0]

    def append_look(db: Database, principal: object, exp_id: str,
                    req: usecases.LookRequest, idem: object = None, *,
                    read: object = None) -> usecases.Answer:
        n = req.totals["control"]["n"]  # 1000 per look number in these looks
        if n not in answers:  # the first experiment's look: computed and stored
            answers[n] = real_append(db, principal, exp_id, req, idem)  # type: ignore[arg-type]
        return answers[n]

    usecases.read_for_look = read_for_look
    usecases.append_look = append_look
    return cli(argv)


def usecase_part(looks: int, tmp: Path) -> tuple[float, float]:
    """CPU (ms) per look of the use case, in this process, without HTTP, and of the
    analysis within it (``service.library.analyze_look``, timed where the use case
    calls it: the plan, the stored looks and the options the service passes)."""
    from fastapi.testclient import TestClient

    from service import library
    from service.api.app import create_app

    db = Database(Settings.from_env({"database_url": f"sqlite:///{tmp / 'inproc.db'}"}))
    _, token = usecases.create_key(db, "bench-bakery", "benchmark")
    maker = TestClient(create_app(db=db), headers={"Authorization": f"Bearer {token}"})
    analysis = [0.0]
    analyze_look = library.analyze_look

    def timed(*args: object, **kwargs: object) -> library.LookOutcome:
        t0 = time.process_time()
        try:
            return analyze_look(*args, **kwargs)  # type: ignore[arg-type]
        finally:
            analysis[0] += time.process_time() - t0

    total, ids = 0.0, []
    library.analyze_look = timed
    try:
        for exp, i in sequence(looks):
            if exp == 0 and i == 0:
                ids = [maker.post("/v1/experiments", json=DESIGN).json()["id"]
                       for _ in range(EXPERIMENTS)]  # (not counted)
            t0 = time.process_time()
            given = LookCreate.model_validate(body(exp, i))
            req = usecases.LookRequest(totals=given.totals, final=given.final,
                                       daily_traffic=given.daily_traffic)
            read = usecases.read_for_look(db, token, ids[exp])
            assert read is not None
            answer = usecases.append_look(db, read.principal, ids[exp], req, read=read)
            total += time.process_time() - t0
            if answer.status_code != 201:
                raise SystemExit(f"look refused: {answer.status_code} {answer.body}")
    finally:
        library.analyze_look = analyze_look
        db.close()
    return total / looks * 1e3, analysis[0] / looks * 1e3


def main() -> int:
    if sys.argv[1:2] == ["--canned"]:
        return serve_canned(sys.argv[2:])
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--looks", type=int, default=400, help="looks per part and round")
    ap.add_argument("--rounds", type=int, default=3,
                    help="rounds of the four parts, one after the other (medians shown)")
    args = ap.parse_args()
    looks = max(50, min(args.looks, 5000)) // 50 * 50
    rows: dict[str, list[float]] = {"health": [], "look": [], "usecase": [], "library": [],
                                    "route": []}
    for _ in range(max(1, args.rounds)):
        tmp = Path(tempfile.mkdtemp(prefix="seqtest-parts-"))
        health, look = server_part(looks, tmp)
        rows["health"].append(health)
        rows["look"].append(look)
        health_canned, route = server_part(looks, tmp, canned=True)
        # in units of the first server's health: the ratio to its own run's health
        rows["route"].append(route * health / health_canned)
        usecase, analysis = usecase_part(looks, tmp)
        rows["usecase"].append(usecase)
        rows["library"].append(analysis)
    m = {k: statistics.median(v) for k, v in rows.items()}
    h = m["health"]
    parts = [
        ("health route (server)", m["health"]),
        ("look (server)", m["look"]),
        ("  HTTP and framework", m["look"] - m["usecase"]),
        ("  storage and the service's glue", m["usecase"] - m["library"]),
        ("  analysis (as the service runs it)", m["library"]),
        ("the route alone (answered from memory)", m["route"]),
    ]
    sync = os.environ.get("SEQTEST_SQLITE_SYNCHRONOUS", "FULL")
    print(f"CPU per request, SQLite (synchronous={sync}), {looks} looks per part, "
          f"median of {len(rows['look'])} rounds; {os.cpu_count()} CPUs")
    print(f"{'part':<42}{'ms':>8}{'x health':>10}")
    for name, ms in parts:
        print(f"{name:<42}{ms:>8.2f}{ms / h:>9.1f}x")
    print("goal: look within 4x of health; the route alone is the floor of a look on "
          "this stack")
    return 0


if __name__ == "__main__":
    sys.exit(main())
