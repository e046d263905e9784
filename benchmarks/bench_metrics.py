"""What one ``metrics.effect`` call costs per metric kind, measured side by side.

    python benchmarks/bench_metrics.py [--looks 10] [--repeat 2000]

For each metric kind (binary, continuous, rate, ratio, adjusted, count; on the
difference scale, at no effect and at a margin) prints the median CPU and wall time of
one :func:`seqtest.monitoring.metrics.effect` call on one look's totals and on
``--looks`` looks at once, and of :func:`~seqtest.monitoring.metrics.validate_looks`
on those looks, each as a ratio to the binary call. This is what an experiment's
analysis pays per comparison before the boundaries (which cost the same for every
kind): the budget of the experiment layer (a look with one primary and five
guardrails is six such calls). Run it on demand; the machine is shared, so compare
the ratios, measured in one run, rather than the times.
"""

from __future__ import annotations

import argparse
import statistics
from collections.abc import Callable

import numpy as np
from _timing import samples

from seqtest.monitoring.metrics import effect, validate_looks


def totals(kind: str, k: int) -> tuple[dict, dict]:
    """Invented cumulative totals of ``k`` looks (arrays) for both arms."""
    n = 1000.0 * np.arange(1, k + 1)
    if kind == "binary":
        return {"n": n, "successes": np.floor(0.10 * n)}, {"n": n, "successes": np.floor(0.11 * n)}
    if kind == "continuous":
        return ({"n": n, "sum": 10.0 * n, "sum_sq": 101.0 * n},
                {"n": n, "sum": 10.1 * n, "sum_sq": 103.0 * n})
    if kind == "rate":
        return {"exposure": n, "events": 2.0 * n}, {"exposure": n, "events": 2.1 * n}
    if kind == "ratio":
        return ({"n": n, "numerator": 1.5 * n, "denominator": 3.0 * n,
                 "numerator_sq": 5.6 * n, "denominator_sq": 11.0 * n, "cross": 5.5 * n},
                {"n": n, "numerator": 1.6 * n, "denominator": 3.0 * n,
                 "numerator_sq": 6.2 * n, "denominator_sq": 11.0 * n, "cross": 5.9 * n})
    if kind == "adjusted":
        return ({"n": n, "sum": 4.0 * n, "sum_sq": 17.0 * n, "covariate": 4.0 * n,
                 "covariate_sq": 17.0 * n, "cross": 16.7 * n},
                {"n": n, "sum": 4.1 * n, "sum_sq": 17.9 * n, "covariate": 4.0 * n,
                 "covariate_sq": 17.0 * n, "cross": 17.1 * n})
    return ({"n": n, "events": 2.0 * n, "events_sq": 8.0 * n},
            {"n": n, "events": 2.1 * n, "events_sq": 8.6 * n})


def looks_of(kind: str, k: int) -> list[dict]:
    c, t = totals(kind, k)
    return [{"control": {f: float(v[j]) for f, v in c.items()},
             "treatment": {f: float(v[j]) for f, v in t.items()}} for j in range(k)]


def measure(fn: Callable[[], object], repeat: int) -> tuple[float, float]:
    cpu, wall = samples(fn, repeat)
    return statistics.median(cpu), statistics.median(wall)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--looks", type=int, default=10)
    ap.add_argument("--repeat", type=int, default=2000)
    args = ap.parse_args()
    k, rep = args.looks, args.repeat
    kinds = ("binary", "continuous", "rate", "ratio", "adjusted", "count")
    rows: list[tuple[str, float, float]] = []
    for kind in kinds:
        c1, t1 = totals(kind, 1)
        one_c = {f: float(v[0]) for f, v in c1.items()}
        one_t = {f: float(v[0]) for f, v in t1.items()}
        ck, tk = totals(kind, k)
        lk = looks_of(kind, k)
        jobs = {
            f"{kind}: effect, 1 look": lambda a=one_c, b=one_t, s=kind: effect(s, a, b),
            f"{kind}: effect at a margin, 1 look":
                lambda a=one_c, b=one_t, s=kind: effect(s, a, b, null=-0.01),
            f"{kind}: effect, {k} looks": lambda a=ck, b=tk, s=kind: effect(s, a, b),
            f"{kind}: validate_looks, {k} looks": lambda x=lk, s=kind: validate_looks(s, x),
        }
        for name, fn in jobs.items():
            fn()
            cpu, wall = measure(fn, rep)
            rows.append((name, cpu, wall))
    base = {name.split(":")[1]: (cpu, wall) for name, cpu, wall in rows
            if name.startswith("binary:")}
    print(f"median of {rep} calls; ratios to the binary call of the same row kind")
    print(f"{'call':<44} {'CPU us':>9} {'wall us':>9} {'x binary (CPU)':>15}")
    for name, cpu, wall in rows:
        ref = base[name.split(":")[1]][0]
        print(f"{name:<44} {cpu * 1e6:9.1f} {wall * 1e6:9.1f} {cpu / ref:15.2f}")


if __name__ == "__main__":
    main()
