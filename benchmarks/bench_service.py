"""Look posting against the health route, on one server, measured side by side.

Starts ``python -m service serve`` on 127.0.0.1 (port picked by the OS) with a
fresh SQLite file (or ``--database-url``), creates a team key and a few
experiments, then sends, alternately, a health request and a look (cumulative
totals, a new look number each time, spread over the experiments so that each
analysis covers 1 to ``--looks-per-experiment`` looks). One keep-alive client,
one request at a time: latency is per request, throughput is requests per
second of wall time spent on each kind.

Bounded: at most ``--requests`` of each kind and ``--seconds`` of measuring.
Loopback only. Prints p50/p99 latency, throughput, and the ratios look/health.

    python benchmarks/bench_service.py [--requests 300] [--seconds 60]
    SEQTEST_SQLITE_SYNCHRONOUS=NORMAL python benchmarks/bench_service.py

``--compare`` measures, in one run and side by side, on SQLite (synchronous FULL and
NORMAL) and on PostgreSQL (a fresh schema in ``--postgres-url``, dropped after):

- server CPU per request: the server process's own CPU time (its threads' time on
  a CPU, /proc/PID/task/*/schedstat) over N health requests and over N look posts,
  one client, in alternating blocks of N/10 of each kind;
- latency under load: 50 concurrent clients (threads, one keep-alive connection
  each), first all asking for health, then all posting looks (each client to its own
  experiment, cumulative totals); p50 and p99 of each, and their ratio.

    python benchmarks/bench_service.py --compare [--requests 300] [--clients 50] [--each 20]
"""

from __future__ import annotations

import argparse
import os
import re
import signal
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path

import httpx

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

from service import usecases  # noqa: E402
from service.config import Settings  # noqa: E402
from service.db.engine import Database  # noqa: E402

RUNNING = re.compile(r"Uvicorn running on http://127\.0\.0\.1:(\d+)")


def start_server(database_url: str, log: Path, plain_uvicorn: bool = False,
                 extra: tuple[str, ...] = (), launcher: tuple[str, ...] = ("-m", "service")
                 ) -> tuple[subprocess.Popen, str]:
    """``python -m service serve`` (or, with ``plain_uvicorn``, the same app under
    uvicorn's own command line, without the service's header deadline; with
    ``launcher``, ``python *launcher serve ...``, a script that runs the service's
    command line)."""
    env = dict(os.environ, PYTHONPATH=str(REPO), SEQTEST_DATABASE_URL=database_url,
               SEQTEST_ACCESS_LOG="false")
    if plain_uvicorn:
        cmd = [sys.executable, "-m", "uvicorn", "--factory", "service.api:create_app",
               "--host", "127.0.0.1", "--port", "0", "--no-access-log", "--http", "h11"]
    else:
        cmd = [sys.executable, *launcher, "serve", "--host", "127.0.0.1", "--port", "0",
               "--database-url", database_url, "--no-access-log", *extra]
    with open(log, "w") as out:
        proc = subprocess.Popen(cmd, cwd=REPO, env=env, stdout=out, stderr=subprocess.STDOUT,
                                start_new_session=True)
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise SystemExit(f"server exited:\n{log.read_text()}")
        found = RUNNING.findall(log.read_text())
        if found:
            base = f"http://127.0.0.1:{found[-1]}"
            try:
                if httpx.get(base + "/v1/health", timeout=5).status_code == 200:
                    return proc, base
            except httpx.TransportError:
                pass
        time.sleep(0.05)
    os.killpg(proc.pid, signal.SIGKILL)
    raise SystemExit("server did not start in 60 s")


def unfinished_headers(base: str, connections: int = 200, limit_s: float = 15.0
                       ) -> tuple[int, float]:
    """Open ``connections`` sockets that send half a request's headers and nothing
    more; return how many the server closed within ``limit_s`` and when the last of
    those closed (seconds)."""
    import socket

    port = int(base.rsplit(":", 1)[1])
    socks = []
    for _ in range(connections):
        s = socket.create_connection(("127.0.0.1", port), timeout=10)
        s.sendall(b"GET /v1/health HTTP/1.1\r\nHost: x\r\n")
        socks.append(s)
    t0 = time.monotonic()
    closed, last = 0, 0.0
    for s in socks:
        s.settimeout(max(0.01, t0 + limit_s - time.monotonic()))
        try:
            if s.recv(1024) == b"":
                closed += 1
                last = time.monotonic() - t0
        except OSError:
            pass
        s.close()
    return closed, last


def pct(values: list[float], q: float) -> float:
    s = sorted(values)
    return s[min(len(s) - 1, int(round(q * (len(s) - 1))))]


def cpu_seconds(pid: int) -> float:
    """CPU time of process ``pid``, in seconds: the sum over its threads of the time
    on a CPU from /proc/PID/task/TID/schedstat (nanoseconds; the clock ticks of
    /proc/PID/stat are 10 ms, too coarse for a few hundred requests of 1 ms), else
    user + system from /proc/PID/stat (fields 14-17, with its waited-for children)."""
    total, seen = 0, False
    try:
        tasks = list(Path(f"/proc/{pid}/task").iterdir())
    except OSError:
        tasks = []
    for task in tasks:
        try:
            total += int((task / "schedstat").read_text().split()[0])
            seen = True
        except (OSError, ValueError, IndexError):
            continue
    if seen:
        return total / 1e9
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    ticks = sum(int(x) for x in fields[11:15])
    return ticks / os.sysconf("SC_CLK_TCK")


def server_cpu(pid: int) -> float:
    """CPU seconds of the server: its process and every live descendant (worker
    processes of ``--workers``)."""
    total = cpu_seconds(pid)
    for child in Path("/proc").iterdir():
        if not child.name.isdigit() or int(child.name) == pid:
            continue
        try:
            stat = (child / "stat").read_text()
        except OSError:
            continue
        if int(stat.rsplit(")", 1)[1].split()[1]) == pid:  # ppid
            total += server_cpu(int(child.name))
    return total


def look_body(k: int, n: int) -> dict:
    return {"totals": {"control": {"n": n, "successes": n // 10},
                       "treatment": {"n": n, "successes": n // 10 + k % 7}}}


def new_experiments(client: httpx.Client, count: int) -> list[str]:
    ids = []
    for i in range(count):
        r = client.post("/v1/experiments", json={
            "name": f"bench {i}", "metric_kind": "binary", "max_n": 10**9,
            "design": {"looks": 5}})
        r.raise_for_status()
        ids.append(r.json()["id"])
    return ids


def concurrent(base: str, headers: dict, clients: int, each: int,
               request: Callable[[httpx.Client, int, int], httpx.Response],
               pid: int | None = None) -> tuple[list[float], float, float]:
    """``clients`` threads, each with its own keep-alive connection, each sending
    ``each`` requests back to back (``request(client, thread, i)``); the latencies,
    and the CPU seconds the server (process ``pid``) and this process spent from the
    start (every client connected) to the last answer."""
    latencies: list[float] = []
    errors: list[str] = []
    lock = threading.Lock()
    ready = threading.Barrier(clients + 1)

    def run(t: int) -> None:
        mine = []
        with httpx.Client(base_url=base, timeout=120, headers=headers) as c:
            c.get("/v1/health")  # connect before the start
            ready.wait()
            for i in range(each):
                t0 = time.perf_counter()
                r = request(c, t, i)
                mine.append(time.perf_counter() - t0)
                if r.status_code >= 300:
                    errors.append(f"{r.status_code} {r.text[:200]}")
        with lock:
            latencies.extend(mine)

    threads = [threading.Thread(target=run, args=(t,)) for t in range(clients)]
    for th in threads:
        th.start()
    ready.wait()
    s0, b0 = (server_cpu(pid) if pid else 0.0), time.process_time()
    for th in threads:
        th.join()
    server_s = (server_cpu(pid) - s0) if pid else 0.0
    client_s = time.process_time() - b0
    if errors:
        raise SystemExit(f"{len(errors)} requests failed under load, e.g. {errors[0]}")
    return latencies, server_s, client_s


def compare_one(label: str, url: str, tmp: Path, requests: int, clients: int, each: int,
                env: dict[str, str]) -> dict[str, float]:
    """One database: CPU per request (one client) and p99 at ``clients`` clients."""
    store = Database(Settings.from_env({"database_url": url}))
    token = usecases.create_key(store, "bench-bakery", "benchmark")[1]
    store.close()
    saved = {k: os.environ.get(k) for k in env}
    os.environ.update(env)
    try:
        proc, base = start_server(url, tmp / f"server-{label.split()[0]}.log")
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v
    headers = {"Authorization": f"Bearer {token}"}
    out: dict[str, float] = {}
    try:
        with httpx.Client(base_url=base, timeout=60, headers=headers) as client:
            per_exp = 10
            n_exp = -(-requests // per_exp)
            exps = new_experiments(client, n_exp + clients)
            seq, load = exps[:n_exp], exps[n_exp:]
            for _ in range(20):
                client.get("/v1/health").raise_for_status()
            # (a) server CPU per request, one client, one request at a time, in
            # alternating blocks of each kind (a machine that slows down or speeds
            # up during the run weighs on both alike)
            cpu = {"health": 0.0, "look": 0.0}
            one: list[float] = []
            block = max(10, requests // 10)
            for start in range(0, requests, block):
                size = min(block, requests - start)
                c0 = server_cpu(proc.pid)
                for _ in range(size):
                    client.get("/v1/health").raise_for_status()
                c1 = server_cpu(proc.pid)
                for j in range(start, start + size):
                    t0 = time.perf_counter()
                    r = client.post(f"/v1/experiments/{seq[j % n_exp]}/looks",
                                    json=look_body(j, 1000 * (j // n_exp + 1)))
                    one.append(time.perf_counter() - t0)
                    if r.status_code != 201:
                        raise SystemExit(f"look refused: {r.status_code} {r.text}")
                c2 = server_cpu(proc.pid)
                cpu["health"] += c1 - c0
                cpu["look"] += c2 - c1
        out["cpu_health_ms"] = cpu["health"] / requests * 1e3
        out["cpu_look_ms"] = cpu["look"] / requests * 1e3
        out["one_look_ms"] = pct(one, 0.5) * 1e3
        # (b) latency at `clients` concurrent clients: health, then looks
        # (and the CPU each request costs the server and these clients: on a machine
        # that runs both, the slower of the two paces the queue)
        runs: dict[str, tuple[list[float], float, float]] = {}
        for name, request in (
                ("health", lambda c, t, i: c.get("/v1/health")),
                ("look", lambda c, t, i: c.post(f"/v1/experiments/{load[t]}/looks",
                                                json=look_body(i, 1000 * (i + 1))))):
            runs[name] = concurrent(base, headers, clients, each, request, proc.pid)
        for name, (xs, server_s, client_s) in runs.items():
            out[f"p50_{name}_ms"] = pct(xs, 0.50) * 1e3
            out[f"p99_{name}_ms"] = pct(xs, 0.99) * 1e3
            out[f"load_server_{name}_ms"] = server_s / len(xs) * 1e3
            out[f"load_client_{name}_ms"] = client_s / len(xs) * 1e3
    finally:
        os.killpg(proc.pid, signal.SIGTERM)
        proc.wait(timeout=30)
    return out


@contextmanager
def postgres_schema(base: str) -> Iterator[str]:
    """A fresh schema on ``base`` (a PostgreSQL URL), dropped afterwards."""
    import psycopg

    libpq = base.replace("postgresql+psycopg://", "postgresql://", 1)
    schema = f"seqtest_bench_{os.getpid()}"
    with psycopg.connect(libpq, autocommit=True) as conn:
        conn.execute(f'CREATE SCHEMA "{schema}"')
    sep = "&" if "?" in base else "?"
    try:
        yield f"{base}{sep}options=-csearch_path%3D{schema}"
    finally:
        with psycopg.connect(libpq, autocommit=True) as conn:
            conn.execute(f'DROP SCHEMA IF EXISTS "{schema}" CASCADE')


def compare(args: argparse.Namespace) -> int:
    requests = max(20, min(args.requests, 5000))
    clients = max(1, min(args.clients, 200))
    each = max(2, min(args.each, 100))
    tmp = Path(tempfile.mkdtemp(prefix="seqtest-bench-"))
    rows: list[tuple[str, dict[str, float]]] = []
    for sync in ("FULL", "NORMAL"):
        label = f"SQLite synchronous={sync}"
        url = f"sqlite:///{tmp / f'bench-{sync.lower()}.db'}"
        rows.append((label, compare_one(label, url, tmp, requests, clients, each,
                                        {"SEQTEST_SQLITE_SYNCHRONOUS": sync})))
    if args.postgres_url:
        with postgres_schema(args.postgres_url) as url:
            rows.append(("PostgreSQL", compare_one("PostgreSQL", url, tmp, requests, clients,
                                                   each, {})))
    print(f"one server process (uvicorn, 1 worker) on loopback; {os.cpu_count()} CPUs "
          "shared with the clients and anything else running")
    print(f"(a) server CPU per request, {requests} of each, one client; "
          f"(b) {clients} concurrent clients x {each} requests of each kind")
    head = (f"{'database':<26}{'look 1 client':>14}{'CPU health':>11}{'CPU look':>10}"
            f"{'ratio':>7}"
            f"{'p50 health':>12}{'p50 look':>10}{'p99 health':>12}{'p99 look':>10}"
            f"{'ratio':>7}")
    print(head)
    print(f"{'':<26}{'p50 ms':>14}{'ms':>11}{'ms':>10}{'':>7}{'ms':>12}{'ms':>10}"
          f"{'ms':>12}{'ms':>10}")
    for label, r in rows:
        print(f"{label:<26}{r['one_look_ms']:>14.2f}"
              f"{r['cpu_health_ms']:>11.2f}{r['cpu_look_ms']:>10.2f}"
              f"{r['cpu_look_ms'] / r['cpu_health_ms']:>6.1f}x"
              f"{r['p50_health_ms']:>12.1f}{r['p50_look_ms']:>10.1f}"
              f"{r['p99_health_ms']:>12.1f}{r['p99_look_ms']:>10.1f}"
              f"{r['p99_look_ms'] / r['p99_health_ms']:>6.1f}x")
    print("goals: CPU ratio look/health <= 4x; p99 ratio look/health <= 2x")
    print(f"(b) CPU per request under load, ms: {'server health':>14}{'clients health':>15}"
          f"{'server look':>12}{'clients look':>13}")
    for label, r in rows:
        print(f"{label:<26}{'':>9}{r['load_server_health_ms']:>14.2f}"
              f"{r['load_client_health_ms']:>15.2f}{r['load_server_look_ms']:>12.2f}"
              f"{r['load_client_look_ms']:>13.2f}")
    return 0


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--requests", type=int, default=300, help="per kind (max 5000)")
    ap.add_argument("--seconds", type=float, default=60.0, help="measuring time limit")
    ap.add_argument("--looks-per-experiment", type=int, default=10)
    ap.add_argument("--unfinished-headers", action="store_true",
                    help="also hold 200 connections with unfinished headers against this "
                    "server and against plain uvicorn, and count how many get closed")
    ap.add_argument("--header-limit", type=float, default=15.0,
                    help="seconds to wait for those connections to be closed")
    ap.add_argument("--database-url", default=None,
                    help="default: a fresh SQLite file; a PostgreSQL URL must name an "
                    "existing, empty schema (?options=-csearch_path%%3Dname)")
    ap.add_argument("--compare", action="store_true",
                    help="CPU per request and p99 under load, look vs health, on SQLite "
                    "(FULL and NORMAL) and PostgreSQL side by side")
    ap.add_argument("--clients", type=int, default=50, help="concurrent clients (--compare)")
    ap.add_argument("--each", type=int, default=20,
                    help="requests of each kind per concurrent client (--compare; with 50 "
                    "clients, 20 make the p99 the 10th slowest of 1000)")
    ap.add_argument("--postgres-url", default="postgresql://postgres@127.0.0.1:5432/test",
                    help="PostgreSQL server for --compare (a schema is created and dropped); "
                    "empty: SQLite only")
    args = ap.parse_args()
    if args.compare:
        return compare(args)
    requests = max(10, min(args.requests, 5000))
    per_exp = max(1, min(args.looks_per_experiment, 40))

    tmp = Path(tempfile.mkdtemp(prefix="seqtest-bench-"))
    url = args.database_url or f"sqlite:///{tmp / 'bench.db'}"
    store = Database(Settings.from_env({"database_url": url}))
    token = usecases.create_key(store, "bench-bakery", "benchmark")[1]
    store.close()
    proc, base = start_server(url, tmp / "server.log")
    headers = {"Authorization": f"Bearer {token}"}
    try:
        with httpx.Client(base_url=base, timeout=60, headers=headers) as client:
            n_exp = -(-requests // per_exp)
            experiments = []
            for i in range(n_exp):
                r = client.post("/v1/experiments", json={
                    "name": f"bench {i}", "metric_kind": "binary", "max_n": 10**9,
                    "design": {"looks": 5}})
                r.raise_for_status()
                experiments.append(r.json()["id"])
            for _ in range(20):  # warm up both routes
                client.get("/v1/health").raise_for_status()

            health: list[float] = []
            looks: list[float] = []
            start = time.perf_counter()
            k = 0
            while len(looks) < requests and time.perf_counter() - start < args.seconds:
                t0 = time.perf_counter()
                client.get("/v1/health").raise_for_status()
                health.append(time.perf_counter() - t0)

                exp_id = experiments[k % n_exp]
                n = 1000 * (k // n_exp + 1)
                body = {"totals": {"control": {"n": n, "successes": n // 10},
                                   "treatment": {"n": n, "successes": n // 10 + k % 7}}}
                t0 = time.perf_counter()
                r = client.post(f"/v1/experiments/{exp_id}/looks", json=body)
                looks.append(time.perf_counter() - t0)
                if r.status_code != 201:
                    raise SystemExit(f"look refused: {r.status_code} {r.text}")
                k += 1
    finally:
        os.killpg(proc.pid, signal.SIGTERM)
        proc.wait(timeout=30)

    # The library's share: the same analyses, in this process, without HTTP or
    # storage (the service runs exactly this call for each look).
    import seqtest

    plan = seqtest.design(looks=5)
    library: list[float] = []
    for j in range(len(looks)):
        history = []
        for i in range(j // n_exp + 1):
            n = 1000 * (i + 1)
            kk = i * n_exp + j % n_exp
            history.append({"control": {"n": n, "successes": n // 10},
                            "treatment": {"n": n, "successes": n // 10 + kk % 7}})
        t0 = time.perf_counter()
        seqtest.analyze(plan, history, metric="binary", allocation=1.0, max_n=10**9)
        library.append(time.perf_counter() - t0)

    # bytes stored per look: the looks table's text, first and last looks
    bytes_per_look = ""
    if url.startswith("sqlite"):
        import sqlite3

        con = sqlite3.connect(url.split("sqlite:///", 1)[1])
        rows = con.execute("SELECT number, length(analysis) + length(result) + length(totals) "
                           "FROM looks ORDER BY number").fetchall()
        con.close()
        first = [b for n, b in rows if n == 1]
        last = [b for n, b in rows if n == max(n for n, _ in rows)]
        bytes_per_look = (f"stored per look: {statistics.fmean(first):.0f} bytes at look 1, "
                          f"{statistics.fmean(last):.0f} at look {max(n for n, _ in rows)}")

    # 200 connections that never finish their headers: the service's server against
    # the same app under uvicorn's own command line (h11), side by side
    header_rows = []
    if args.unfinished_headers:
        for name, plain in (("seqtest serve (10 s header deadline)", False),
                            ("plain uvicorn, h11", True)):
            p2, b2 = start_server(url, tmp / f"hdr-{plain}.log", plain_uvicorn=plain)
            try:
                closed, took = unfinished_headers(b2, 200, args.header_limit)
            finally:
                os.killpg(p2.pid, signal.SIGTERM)
                p2.wait(timeout=30)
            header_rows.append((name, closed, took))

    sync = os.environ.get("SEQTEST_SQLITE_SYNCHRONOUS", "FULL").upper()
    database = "PostgreSQL" if url.startswith("postgres") else f"SQLite (WAL, synchronous={sync})"
    print(f"seqtest service on {database}; {len(looks)} looks over {n_exp} experiments "
          f"(1..{per_exp} looks per analysis), one client, loopback")
    print(f"{'route':<22}{'p50 ms':>10}{'p99 ms':>10}{'req/s':>10}")
    by_route: dict[str, tuple[float, float, float]] = {}
    for name, xs in (("GET /v1/health", health), ("POST .../looks", looks),
                     ("(seqtest.analyze)", library)):
        p50, p99 = pct(xs, 0.50) * 1e3, pct(xs, 0.99) * 1e3
        rate = len(xs) / sum(xs)
        by_route[name] = (p50, p99, rate)
        print(f"{name:<22}{p50:>10.2f}{p99:>10.2f}{rate:>10.0f}")
    h, lk = by_route["GET /v1/health"], by_route["POST .../looks"]
    print(f"ratio look/health: p50 {lk[0] / h[0]:.1f}x, p99 {lk[1] / h[1]:.1f}x, "
          f"throughput {h[2] / lk[2]:.1f}x fewer looks per second (goal: <= 3x)")
    print(f"mean look latency {statistics.fmean(looks) * 1e3:.2f} ms, of which the "
          f"monitor's analysis alone takes {statistics.fmean(library) * 1e3:.2f} ms "
          "(same analyses, in this process)")
    if bytes_per_look:
        print(bytes_per_look)
    for name, closed, took in header_rows:
        print(f"200 unfinished headers, {name}: {closed} closed within "
              f"{args.header_limit:g} s (last at {took:.1f} s)")
    print(f"look minus monitor, p50: {(pct(looks, 0.5) - pct(library, 0.5)) * 1e3:.2f} ms "
          f"= {(pct(looks, 0.5) - pct(library, 0.5)) / pct(health, 0.5):.1f}x health")
    return 0


if __name__ == "__main__":
    sys.exit(main())
