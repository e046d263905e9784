"""Benchmark: one million simulated experiments of five looks on a binary metric.

Times :func:`seqtest.simulation.engine.simulate` (draws, z statistics, boundaries, stopping
rule, tallies) against drawing the same random numbers alone (the same chunks,
seeds and calls to the data generator, with nothing computed on them), side by
side in one run, on one process and on all cores. Run on demand:

    python benchmarks/bench_simulate.py [--reps 1000000] [--workers N]

The target is under 10 s for 1,000,000 experiments on a 2-core machine.
"""

from __future__ import annotations

import argparse
import os
import time
from concurrent.futures import ProcessPoolExecutor

import seqtest
from seqtest.simulation.engine import DEFAULT_CHUNK, _draw_chunk, _job, simulate
from seqtest.simulation.scenarios import scenario_from_dict


def _draw_only(job, index: int, n: int) -> int:
    _draw_chunk(job, index, n)
    return n


def draws_alone(job, reps: int, workers: int) -> float:
    sizes = [min(job.chunk, reps - s) for s in range(0, reps, job.chunk)]
    t0 = time.perf_counter()
    if workers == 1:
        for i, n in enumerate(sizes):
            _draw_only(job, i, n)
    else:
        with ProcessPoolExecutor(max_workers=workers) as pool:
            list(pool.map(_draw_only, [job] * len(sizes), range(len(sizes)), sizes))
    return time.perf_counter() - t0


def full_run(plan, sc, reps: int, workers: int) -> tuple[float, float]:
    t0 = time.perf_counter()
    res = simulate(plan, sc, reps, seed=1, workers=workers)
    return time.perf_counter() - t0, res.rate


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--reps", type=int, default=1_000_000)
    ap.add_argument("--workers", type=int, default=os.cpu_count() or 1)
    args = ap.parse_args()
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=5,
                          metric={"kind": "binary", "baseline": 0.10, "mde": 0.02})
    sc = scenario_from_dict({"name": "bench", "data": {"kind": "binary", "rate": 0.10},
                             "traffic": {"mode": "fixed"}})
    job = _job(plan, sc, 1, DEFAULT_CHUNK, False)
    simulate(plan, sc, 20_000, seed=0)             # warm up imports and caches
    print(f"{args.reps:,} experiments, 5 looks, binary metric, fixed traffic "
          f"(n_max = {plan.sample_size().total:,}), chunks of {job.chunk:,}")
    print(f"{'workers':>8}  {'simulate (s)':>13}  {'draws alone (s)':>16}  {'ratio':>6}  "
          f"{'experiments/s':>14}")
    for w in sorted({1, args.workers}):
        t_sim, rate = full_run(plan, sc, args.reps, w)
        t_draw = draws_alone(job, args.reps, w)
        print(f"{w:>8}  {t_sim:>13.2f}  {t_draw:>16.2f}  {t_sim / t_draw:>6.2f}  "
              f"{args.reps / t_sim:>14,.0f}   (type I error {rate:.4f})")
    print("target: under 10 s with all workers for 1,000,000 experiments")


if __name__ == "__main__":
    main()
