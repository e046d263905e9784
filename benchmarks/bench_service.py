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
import time
from pathlib import Path

import httpx

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

from service import usecases  # noqa: E402
from service.config import Settings  # noqa: E402
from service.db.engine import Database  # noqa: E402

RUNNING = re.compile(r"Uvicorn running on http://127\.0\.0\.1:(\d+)")


def start_server(database_url: str, log: Path, plain_uvicorn: bool = False,
                 extra: tuple[str, ...] = ()) -> tuple[subprocess.Popen, str]:
    """``python -m service serve`` (or, with ``plain_uvicorn``, the same app under
    uvicorn's own command line, without the service's header deadline)."""
    env = dict(os.environ, PYTHONPATH=str(REPO), SEQTEST_DATABASE_URL=database_url,
               SEQTEST_ACCESS_LOG="false")
    if plain_uvicorn:
        cmd = [sys.executable, "-m", "uvicorn", "--factory", "service.api:create_app",
               "--host", "127.0.0.1", "--port", "0", "--no-access-log", "--http", "h11"]
    else:
        cmd = [sys.executable, "-m", "service", "serve", "--host", "127.0.0.1", "--port", "0",
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
    args = ap.parse_args()
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
                closed, last = unfinished_headers(b2, 200, args.header_limit)
            finally:
                os.killpg(p2.pid, signal.SIGTERM)
                p2.wait(timeout=30)
            header_rows.append((name, closed, last))

    sync = os.environ.get("SEQTEST_SQLITE_SYNCHRONOUS", "FULL").upper()
    database = "PostgreSQL" if url.startswith("postgres") else f"SQLite (WAL, synchronous={sync})"
    print(f"seqtest service on {database}; {len(looks)} looks over {n_exp} experiments "
          f"(1..{per_exp} looks per analysis), one client, loopback")
    print(f"{'route':<22}{'p50 ms':>10}{'p99 ms':>10}{'req/s':>10}")
    rows = {}
    for name, xs in (("GET /v1/health", health), ("POST .../looks", looks),
                     ("(seqtest.analyze)", library)):
        p50, p99 = pct(xs, 0.50) * 1e3, pct(xs, 0.99) * 1e3
        rate = len(xs) / sum(xs)
        rows[name] = (p50, p99, rate)
        print(f"{name:<22}{p50:>10.2f}{p99:>10.2f}{rate:>10.0f}")
    h, lk = rows["GET /v1/health"], rows["POST .../looks"]
    print(f"ratio look/health: p50 {lk[0] / h[0]:.1f}x, p99 {lk[1] / h[1]:.1f}x, "
          f"throughput {h[2] / lk[2]:.1f}x fewer looks per second (goal: <= 3x)")
    print(f"mean look latency {statistics.fmean(looks) * 1e3:.2f} ms, of which the "
          f"monitor's analysis alone takes {statistics.fmean(library) * 1e3:.2f} ms "
          "(same analyses, in this process)")
    if bytes_per_look:
        print(bytes_per_look)
    for name, closed, last in header_rows:
        print(f"200 unfinished headers, {name}: {closed} closed within "
              f"{args.header_limit:g} s (last at {last:.1f} s)")
    print(f"look minus monitor, p50: {(pct(looks, 0.5) - pct(library, 0.5)) * 1e3:.2f} ms "
          f"= {(pct(looks, 0.5) - pct(library, 0.5)) / pct(health, 0.5):.1f}x health")
    return 0


if __name__ == "__main__":
    sys.exit(main())
