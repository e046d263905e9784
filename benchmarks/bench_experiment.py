"""Timing of experiment plans and of analysing a look of an experiment.

Run on demand (never in CI): ``python benchmarks/bench_experiment.py``.

1. Designing an experiment with k = 4 treatments and 5 looks (binary metric, one-sided
   0.025, O'Brien-Fleming-type spending, power 0.9 for each comparison): graphical
   method, and Dunnett-type boundaries (goal: under 1 s). ``power_for="any"`` with
   Dunnett-type boundaries is shown apart (it solves the joint power as well).
2. Analysing the looks so far of that experiment at its third look, every arm still
   running (goal: under 50 ms for the graphical method): the work of one look is the
   whole analysis, from totals to per-arm decisions. Then the same with an arm
   stopping there (adds its adjusted inference). Dunnett-type: at planned fractions
   (the plan's boundaries are reused), at an unplanned fraction the first time in a
   process (one boundary solve with the looks before as ``previous``) and again
   (cached).
3. One primary and five guardrails, one treatment, third look.

CPU time is what the goals are judged on (the machine is shared); both are printed.
Each figure is the median of repeated runs after a warm-up; the process-wide caches of
boundaries are cleared before each run unless the line says "cached".
"""

from __future__ import annotations

import os

for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

import statistics  # noqa: E402
import time  # noqa: E402
from collections.abc import Callable  # noqa: E402

import numpy as np  # noqa: E402

from seqtest.monitoring import experiment as mexp  # noqa: E402
from seqtest.planning.experiment import experiment_plan  # noqa: E402

METRIC = {"name": "orders", "kind": "binary", "baseline": 0.10, "mde": 0.02}


def timed(fn: Callable[[], object], repeat: int, clear: bool = True) -> tuple[float, float]:
    """Median wall and CPU seconds over ``repeat`` calls after a warm-up."""
    fn()
    wall, cpu = [], []
    for _ in range(repeat):
        if clear:
            mexp._GS_CACHE.clear()
            mexp._DUNNETT_CACHE.clear()
        w0, c0 = time.perf_counter(), time.process_time()
        fn()
        cpu.append(time.process_time() - c0)
        wall.append(time.perf_counter() - w0)
    return statistics.median(wall), statistics.median(cpu)


def looks_of(plan, rates: dict[str, float], n_looks: int, seed: int = 1,
             at: list[float] | None = None) -> list[dict]:
    rng = np.random.default_rng(seed)
    out, succ, prev = [], {a: 0 for a in plan.arms}, 0
    sizes = plan.sizes["orders"]["control"]
    for k in range(n_looks):
        n = int(sizes[k] if at is None else at[k])
        look = {}
        for a in plan.arms:
            succ[a] += int(rng.binomial(n - prev, rates.get(a, 0.10)))
            look[a] = {"n": n, "successes": succ[a]}
        prev = n
        out.append(look)
    return out


def line(label: str, wall: float, cpu: float, goal: float | None = None) -> None:
    mark = ""
    if goal is not None:
        mark = f"  (goal < {goal * 1e3:g} ms: {'met' if cpu < goal else 'MISSED'})"
    print(f"  {label:<62} wall {wall * 1e3:8.1f} ms   cpu {cpu * 1e3:8.1f} ms{mark}")


def main() -> None:
    arms = ["control", "a", "b", "c", "d"]
    print("1. designing k = 4 treatments, 5 looks")
    for method in ("graphical", "dunnett"):
        w, c = timed(lambda m=method: experiment_plan(arms, METRIC, alpha=0.025, sides=1,
                                                      looks=5, method=m), 3)
        line(f"{method}, power for each comparison", w, c, 1.0)
    w, c = timed(lambda: experiment_plan(arms, METRIC, alpha=0.025, sides=1, looks=5,
                                         method="dunnett", power_for="any"), 1)
    line("dunnett, power for at least one arm", w, c)

    print("2. analysing the looks so far (third look of five)")
    g = experiment_plan(arms, METRIC, alpha=0.025, sides=1, looks=5)
    running = looks_of(g, {}, 3)
    w, c = timed(lambda: mexp.analyze_experiment(g, running), 7)
    line("graphical, every arm running", w, c, 0.05)
    w, c = timed(lambda: mexp.analyze_experiment(g, running), 7, clear=False)
    line("graphical, every arm running, boundaries cached", w, c, 0.05)
    stopping = looks_of(g, {"b": 0.14}, 3, seed=2)
    an = mexp.analyze_experiment(g, stopping)
    assert an.arm("b").stopped_at == 2 or an.arm("b").stopped_at == 3, an.reason_text
    w, c = timed(lambda: mexp.analyze_experiment(g, stopping), 5)
    line("graphical, an arm stops (adds its stage-wise inference)", w, c)
    d = experiment_plan(arms, METRIC, alpha=0.025, sides=1, looks=5, method="dunnett")
    d_running = looks_of(d, {}, 3)
    w, c = timed(lambda: mexp.analyze_experiment(d, d_running), 7)
    line("dunnett, planned fractions (the plan's boundaries)", w, c)
    sizes = d.sizes["orders"]["control"]
    odd = [float(sizes[0]), float(sizes[1]), 0.5 * float(sizes[1] + sizes[2])]
    unplanned = looks_of(d, {}, 3, at=odd)
    w, c = timed(lambda: mexp.analyze_experiment(d, unplanned), 3)
    line("dunnett, an unplanned third look (one boundary solved)", w, c)
    w, c = timed(lambda: mexp.analyze_experiment(d, unplanned), 7, clear=False)
    line("dunnett, the same unplanned look again (cached)", w, c)

    print("3. one primary and five guardrails, one treatment, third look")
    guards = [{"name": f"guard_{i}", "role": "guardrail", "kind": "continuous",
               "sd": 1.0, "mde": 0.05, "better": "lower"} for i in range(5)]
    p = experiment_plan(2, [METRIC, *guards], alpha=0.025, sides=1, looks=5)
    rng = np.random.default_rng(3)
    looks = []
    for k in range(3):
        n = int(p.sizes["orders"]["control"][k])
        look = {"orders": {a: {"n": n, "successes": int(rng.binomial(n, 0.1))}
                           for a in p.arms}}
        for gm in guards:
            look[gm["name"]] = {a: {"n": n, "mean": float(rng.normal(0, 1 / np.sqrt(n))),
                                    "sd": 1.0} for a in p.arms}
        looks.append(look)
    w, c = timed(lambda: mexp.analyze_experiment(p, looks), 7)
    line("1 primary + 5 guardrails", w, c, 0.03)


if __name__ == "__main__":
    main()
