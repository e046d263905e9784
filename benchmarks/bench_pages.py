"""An experiment's page against the JSON of the same experiment, measured side by side.

    python benchmarks/bench_pages.py [--looks 50] [--repeat 40] [--database-url URL]

Builds the service's app in this process on a fresh SQLite file (or ``--database-url``),
creates an experiment whose plan has ``--looks`` looks (invented binary totals, every
look posted through the API), signs in, and then requests alternately

- ``GET /v1/experiments/{id}`` (the JSON a pipeline reads),
- ``GET /experiments/{id}`` (the page: the same read, then the summary, both SVG
  charts, the looks table, the plan and its versions, rendered by Jinja2),

and, for the page, once more with the plan's display forgotten before each request
("cold": what the first view of a plan version costs in a process; a plan version is
append-only, so its summary and table are kept afterwards). Prints the median and 90th
percentile of CPU and wall time per request (client and server are in this process,
so CPU counts both; the client's share is the same for the two routes), the ratio
page / JSON, and where the page's time goes. The target is a page under 100 ms of
server CPU at 50 looks. Run it on demand: the machine is shared.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

from _timing import samples

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))

from fastapi.testclient import TestClient  # noqa: E402

from service import library, usecases  # noqa: E402
from service.api import create_app  # noqa: E402
from service.config import Settings  # noqa: E402
from service.db.engine import Database  # noqa: E402
from service.web import data, present  # noqa: E402
from service.web.render import environment  # noqa: E402


def build(client: TestClient, token: str, looks: int) -> str:
    """An experiment with ``looks`` looks, each posted through the API."""
    h = {"Authorization": f"Bearer {token}"}
    r = client.post("/v1/experiments", headers=h, json={
        "name": "Larger Place-order button", "metric_kind": "binary",
        "arms": {"control": "classic", "treatment": "large"},
        "design": {"looks": looks, "futility": "obrien-fleming-type",
                   "metric": {"kind": "binary", "baseline": 0.08, "mde": 0.016}}})
    assert r.status_code == 201, r.text
    exp = r.json()
    sizes = [b["n_control"] for b in exp["plan"]["boundaries"]]
    for k, n in enumerate(sizes, start=1):
        # a small, steady effect: no boundary is crossed before the last look
        body = {"totals": {"classic": {"n": n, "successes": round(0.0800 * n)},
                           "large": {"n": n + k, "successes": round(0.0815 * (n + k))}},
                "daily_traffic": 4000}
        r = client.post(f"/v1/experiments/{exp['id']}/looks", headers=h, json=body)
        assert r.status_code == 201, r.text
    return str(exp["id"])


def measure(fn: Callable[[], object], repeat: int) -> tuple[list[float], list[float]]:
    return samples(fn, repeat)


def cold_plan(document: dict) -> object:
    present._plan_display.cache_clear()
    return present.plan_display(document)


def p90(xs: list[float]) -> float:
    return sorted(xs)[min(len(xs) - 1, int(0.9 * len(xs)))]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--looks", type=int, default=50)
    ap.add_argument("--repeat", type=int, default=40)
    ap.add_argument("--database-url", default=None)
    args = ap.parse_args()
    folder = tempfile.mkdtemp(prefix="seqtest-bench-pages-")
    url = args.database_url or f"sqlite:///{folder}/bench.db"
    db = Database(Settings.from_env({"database_url": url, "access_log": False}))
    record, token = usecases.create_key(db, "juniper-bakery", "bench")
    app = create_app(db=db, settings=db.settings)
    with TestClient(app) as client:
        t0 = time.perf_counter()
        exp_id = build(client, token, args.looks)
        print(f"built an experiment of {args.looks} looks in {time.perf_counter() - t0:.1f} s "
              f"({db.dialect})")
        r = client.post("/signin", data={"key": token}, follow_redirects=False)
        assert r.status_code == 303, r.text
        h = {"Authorization": f"Bearer {token}"}
        page, json_url = f"/experiments/{exp_id}", f"/v1/experiments/{exp_id}"
        assert client.get(page).status_code == 200  # warm the templates, the plan
        assert client.get(json_url, headers=h).status_code == 200

        def cold() -> object:
            present._plan_display.cache_clear()
            return client.get(page)

        runs: dict[str, tuple[list[float], list[float]]] = {"json": ([], []), "page": ([], []),
                                                            "page, cold plan": ([], [])}
        for _ in range(args.repeat):  # interleaved: the machine's load hits all alike
            for name, fn in (("json", lambda: client.get(json_url, headers=h)),
                             ("page", lambda: client.get(page)),
                             ("page, cold plan", cold)):
                c, w = measure(fn, 1)
                runs[name][0].extend(c)
                runs[name][1].extend(w)
        size = len(client.get(page).content)

    print(f"{args.looks} looks, {args.repeat} requests of each, interleaved; page "
          f"{size / 1024:.0f} KiB")
    print(f"{'':18s} {'cpu ms p50':>10s} {'p90':>7s} {'wall ms p50':>11s} {'p90':>7s} "
          f"{'cpu / json':>10s}")
    base = statistics.median(runs["json"][0])
    for name, (cpu, wall) in runs.items():
        print(f"{name:18s} {1e3 * statistics.median(cpu):10.1f} {1e3 * p90(cpu):7.1f} "
              f"{1e3 * statistics.median(wall):11.1f} {1e3 * p90(wall):7.1f} "
              f"{statistics.median(cpu) / base:10.2f}")

    # where the page's time goes (the same calls the route makes)
    team_id = record.team_id
    found = data.experiment(db, team_id, exp_id)
    analysis = found.detail["analysis"]
    shown = present.plan_display(found.detail["plan"]["document"])
    parts: dict[str, Callable[[], object]] = {
        "read (as the JSON)": lambda: data.experiment(db, team_id, exp_id),
        "summary": lambda: library.summarize(analysis),
        "z path SVG": lambda: library.z_path_svg(analysis, shown.plan, "bench"),
        "effect SVG": lambda: library.effect_svg(analysis, "bench"),
        "looks table": lambda: present._looks_table(found.detail, analysis),
        "plan (cold)": lambda: cold_plan(found.detail["plan"]["document"]),
        "whole context": lambda: present.experiment_context(found),
        "template": lambda: environment().get_template("experiment.html").render(
            title="bench", team="t", **present.experiment_context(found)),
    }
    print("\nparts of the page (median CPU ms, called directly)")
    for name, fn in parts.items():
        cpu, _ = measure(fn, max(5, args.repeat // 4))
        print(f"  {name:20s} {1e3 * statistics.median(cpu):7.1f}")
    db.close()


if __name__ == "__main__":
    main()
