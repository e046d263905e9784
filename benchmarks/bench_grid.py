"""Benchmark: how long the full validation grid takes, with a random-traffic cross, and
the same numbers on a 2-worker Dask LocalCluster.

1. Estimate (not a full run): the cells of ``simulations/validate.py --grid full`` plus
   a random-traffic cross (every data model x efficacy family x K in {2, 5, 10} x one
   and two sides, day-to-day cv 0.4, as the grid's random cells) are grouped into
   strata (group x data model x K); a seeded sample of cells per stratum runs at
   ``--sample-reps`` replicates in this process, and each stratum's time is its mean
   CPU seconds per replicate times its replicates (100,000 per cell), with the
   sampling standard error. Extrapolating from a sample is an estimate, and says so.
2. A small grid (the reduced grid at ``--small-reps``) run in this process and on a
   2-worker ``distributed.LocalCluster``: the numbers must be identical; wall times of
   both are printed.

Run on demand (needs the dask extra for part 2):

    python benchmarks/bench_grid.py [--sample-reps 20000] [--per-stratum 2]
"""

from __future__ import annotations

import argparse
import importlib.util
import json
import math
import random
import sys
import time
from collections import defaultdict
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def _validate():
    spec = importlib.util.spec_from_file_location("seqtest_validate",
                                                  ROOT / "simulations" / "validate.py")
    mod = importlib.util.module_from_spec(spec)
    sys.modules["seqtest_validate"] = mod
    spec.loader.exec_module(mod)
    return mod


def stratum(cell) -> tuple:
    lab = cell.labels
    data = lab.get("data") or cell.scenario["data"]["kind"]
    return (cell.group, data, lab.get("K", "-"))


def estimate(v, cells, sample_reps: int, per_stratum: int, seed: int) -> None:
    groups: dict[tuple, list] = defaultdict(list)
    for c in cells:
        groups[stratum(c)].append(c)
    rng = random.Random(seed)
    total = var = 0.0
    by_group: dict[str, float] = defaultdict(float)
    print(f"{'stratum':<58} {'cells':>5} {'sampled':>7} {'s/1e5 reps':>11} {'est. min':>9}")
    for key in sorted(groups, key=str):
        members = groups[key]
        pick = rng.sample(members, min(per_stratum, len(members)))
        per_rep = []
        for cell in pick:
            small = v.Cell(cell.id, cell.group, cell.plan, cell.scenario,
                           min(sample_reps, cell.reps), cell.gate, cell.exact)
            c0 = time.process_time()
            v.run_cells([small], seed=0)
            per_rep.append((time.process_time() - c0) / small.reps)
        reps = sum(c.reps for c in members)
        mean = sum(per_rep) / len(per_rep)
        sd = (math.sqrt(sum((x - mean) ** 2 for x in per_rep) / (len(per_rep) - 1))
              if len(per_rep) > 1 else mean)      # one sample: count its own size as error
        est = mean * reps
        se = sd * reps / math.sqrt(len(per_rep)) * math.sqrt(
            max(0.0, 1 - len(per_rep) / len(members)))
        total += est
        var += se * se
        by_group[key[0]] += est
        name = " / ".join(str(x) for x in key)
        print(f"{name:<58} {len(members):>5} {len(pick):>7} {mean * 1e5:>11.2f} "
              f"{est / 60:>9.2f}")
    print()
    for g, sec in sorted(by_group.items(), key=lambda kv: -kv[1]):
        print(f"  {g:<40} {sec / 60:8.1f} CPU-min")
    print(f"estimated total: {total / 60:.1f} CPU-min (+- {math.sqrt(var) / 60:.1f}, "
          f"sampling s.e.); on 2 workers about {total / 120:.1f} min of wall time if "
          "both cores are free")


def cluster_check(v, small_reps: int) -> None:
    from seqtest.simulation.runner import dask_client

    cells = v.build_grid("reduced", reps=small_reps, random_reps=max(500, small_reps // 10))
    t0 = time.perf_counter()
    here = v.run_cells(cells, seed=0)
    t_here = time.perf_counter() - t0
    t0 = time.perf_counter()
    with dask_client("local", workers=2) as client:
        t1 = time.perf_counter()
        there = v.run_cells(cells, seed=0, client=client)
        t_there = time.perf_counter() - t1
    t_start = t1 - t0
    same = all(json.dumps(a.result.to_dict()) == json.dumps(b.result.to_dict())
               for a, b in zip(here, there, strict=True))
    print(f"reduced grid at {small_reps:,} replicates per cell ({len(cells)} cells): "
          f"this process {t_here:.1f} s; 2-worker LocalCluster {t_there:.1f} s "
          f"(+ {t_start:.1f} s to start it); identical numbers: {same}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sample-reps", type=int, default=20_000)
    ap.add_argument("--per-stratum", type=int, default=2)
    ap.add_argument("--small-reps", type=int, default=20_000)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--skip-cluster", action="store_true")
    args = ap.parse_args()
    v = _validate()
    full = v.build_grid("full")
    cross = v.random_cross_cells(100_000)
    print(f"full grid: {len(full)} cells; random-traffic cross: {len(cross)} cells; "
          f"{args.per_stratum} sampled per stratum at {args.sample_reps:,} replicates")
    estimate(v, full + cross, args.sample_reps, args.per_stratum, args.seed)
    if not args.skip_cluster:
        cluster_check(v, args.small_reps)


if __name__ == "__main__":
    main()
