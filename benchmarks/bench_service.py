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

from service.storage import Storage  # noqa: E402

RUNNING = re.compile(r"Uvicorn running on http://127\.0\.0\.1:(\d+)")


def start_server(database_url: str, log: Path) -> tuple[subprocess.Popen, str]:
    env = dict(os.environ, PYTHONPATH=str(REPO))
    with open(log, "w") as out:
        proc = subprocess.Popen(
            [sys.executable, "-m", "service", "serve", "--host", "127.0.0.1", "--port", "0",
             "--database-url", database_url, "--no-access-log"],
            cwd=REPO, env=env, stdout=out, stderr=subprocess.STDOUT, start_new_session=True,
        )
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


def pct(values: list[float], q: float) -> float:
    s = sorted(values)
    return s[min(len(s) - 1, int(round(q * (len(s) - 1))))]


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--requests", type=int, default=300, help="per kind (max 5000)")
    ap.add_argument("--seconds", type=float, default=60.0, help="measuring time limit")
    ap.add_argument("--looks-per-experiment", type=int, default=10)
    ap.add_argument("--database-url", default=None,
                    help="default: a fresh SQLite file; a PostgreSQL URL must name an "
                    "existing, empty schema (?options=-csearch_path%%3Dname)")
    args = ap.parse_args()
    requests = max(10, min(args.requests, 5000))
    per_exp = max(1, min(args.looks_per_experiment, 40))

    tmp = Path(tempfile.mkdtemp(prefix="seqtest-bench-"))
    url = args.database_url or f"sqlite:///{tmp / 'bench.db'}"
    store = Storage(url)
    token = store.create_key("bench-bakery", "benchmark")[1]
    store.close()
    proc, base = start_server(url, tmp / "server.log")
    headers = {"Authorization": f"Bearer {token}"}
    try:
        with httpx.Client(base_url=base, timeout=60, headers=headers) as client:
            n_exp = -(-requests // per_exp)
            experiments = []
            for i in range(n_exp):
                r = client.post("/v1/experiments", json={
                    "name": f"bench {i}", "metric": "binary", "max_n": 10**9,
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
    from seqtest import monitor

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
        monitor.analyze(plan, history, metric="binary", allocation=1.0, max_n=10**9)
        library.append(time.perf_counter() - t0)

    sync = os.environ.get("SEQTEST_SQLITE_SYNCHRONOUS", "FULL").upper()
    database = "PostgreSQL" if url.startswith("postgres") else f"SQLite (WAL, synchronous={sync})"
    print(f"seqtest service on {database}; {len(looks)} looks over {n_exp} experiments "
          f"(1..{per_exp} looks per analysis), one client, loopback")
    print(f"{'route':<22}{'p50 ms':>10}{'p99 ms':>10}{'req/s':>10}")
    rows = {}
    for name, xs in (("GET /v1/health", health), ("POST .../looks", looks),
                     ("(monitor.analyze)", library)):
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
    print(f"look minus monitor, p50: {(pct(looks, 0.5) - pct(library, 0.5)) * 1e3:.2f} ms "
          f"= {(pct(looks, 0.5) - pct(library, 0.5)) / pct(health, 0.5):.1f}x health")
    return 0


if __name__ == "__main__":
    sys.exit(main())
