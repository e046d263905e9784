"""Benchmark: random day-to-day traffic against fixed traffic, 100,000 null experiments.

With random traffic every experiment has its own information fractions and so its own
boundaries; the exact screen (seqtest.simulation.screen) settles nearly all of them
without computing those. This times, side by side in one run and in one process:

- the cell with fixed traffic (one boundary computation per chunk);
- the same cell with random traffic, screened (the default);
- the same random cell without the screen, on a slice of the replicates, scaled up
  (computing every boundary of 100,000 experiments takes minutes).

Run on demand:

    python benchmarks/bench_simulate_random.py [--reps 100000] [--slice 2000]

The goal: random traffic within 3x of fixed traffic for the validation grid's cell
(O'Brien-Fleming-type, 5 looks, two-sided, binary). CPU time is printed next to wall
time; judge on CPU time when the machine is busy.
"""

from __future__ import annotations

import argparse
import time

import seqtest
from seqtest.simulation.engine import simulate
from seqtest.simulation.scenarios import scenario_from_dict

RANDOM = {"mode": "random", "days": 21, "cv": 0.4, "cap": True, "final": "at_max"}
CASES = [
    ("OF-type, K=5, two-sided (the grid's cell)", "obrien-fleming-type", 5, 2),
    ("Pocock-type, K=5, two-sided", "pocock-type", 5, 2),
    ("OF-type, K=10, one-sided", "obrien-fleming-type", 10, 1),
    ("HSD(1), K=10, two-sided", "hsd:1", 10, 2),
    ("classical Pocock, K=5, two-sided", "pocock", 5, 2),
]


def timed(fn):
    w0, c0 = time.perf_counter(), time.process_time()
    out = fn()
    return out, time.perf_counter() - w0, time.process_time() - c0


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--reps", type=int, default=100_000)
    ap.add_argument("--slice", type=int, default=2_000,
                    help="replicates run without the screen (scaled to --reps)")
    args = ap.parse_args()
    data = {"kind": "binary", "rate": 0.10}
    fixed = scenario_from_dict({"name": "fixed", "data": data})
    rand = scenario_from_dict({"name": "random", "data": data, "traffic": RANDOM})
    print(f"{args.reps:,} null experiments per cell, one process; times: wall / CPU seconds")
    print(f"{'cell':<44} {'fixed':>13} {'random':>13} {'ratio':>6} {'computed':>9}"
          f" {'unscreened (est.)':>18} {'gain':>6}")
    for label, fam, looks, sides in CASES:
        plan = seqtest.design(alpha=0.05 if sides == 2 else 0.025, sides=sides, power=0.9,
                              looks=looks, efficacy=fam,
                              metric={"kind": "binary", "baseline": 0.10, "mde": 0.02})
        simulate(plan, rand, 500, seed=0)                           # warm up
        _, wf, cf = timed(lambda plan=plan: simulate(plan, fixed, args.reps, seed=1))
        res, wr, cr = timed(lambda plan=plan: simulate(plan, rand, args.reps, seed=1))
        _, wu, cu = timed(lambda plan=plan: simulate(plan, rand, args.slice, seed=1,
                                                     screen=False))
        scale = args.reps / args.slice
        print(f"{label:<44} {wf:6.2f}/{cf:6.2f} {wr:6.2f}/{cr:6.2f} {cr / cf:6.2f}"
              f" {res.boundaries_computed:9,d} {wu * scale:8.1f}/{cu * scale:8.1f}"
              f" {cu * scale / cr:6.0f}x")
    print("ratio: random / fixed CPU time (goal: within 3x for the grid's cell); computed:"
          " boundary computations the screen left; gain: unscreened / screened CPU time")


if __name__ == "__main__":
    main()
