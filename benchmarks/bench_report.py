"""What showing a result costs, against the analysis it shows, measured side by side.

    python benchmarks/bench_report.py [--looks 50] [--repeat 20]

For an experiment with ``--looks`` looks (invented continuous totals, a plan of as many
looks), prints the median CPU and wall time of ``seqtest.analyze``, of the summary
sentence, of each SVG chart, of the whole HTML report, and of a matplotlib figure,
each as a ratio to the analysis. A page of the service shows a stored analysis, so
what it adds to a request is the summary, the charts and the tables: the report's
time minus nothing else. Run it on demand; the machine is shared.
"""

from __future__ import annotations

import argparse
import math
import statistics
from collections.abc import Callable

from _timing import samples

import seqtest
from seqtest.reporting import effect_svg, report_html, summarize, z_path_svg


def looks_of(k: int) -> list[dict]:
    out = []
    for j in range(1, k + 1):
        n = 1000 * j
        d = (0.2 + 0.01 * j) * math.sqrt(2.0 / n)
        out.append({"control": {"n": n, "mean": 10.0, "sd": 1.0},
                    "treatment": {"n": n, "mean": 10.0 + d, "sd": 1.0}})
    return out


def measure(fn: Callable[[], object], repeat: int) -> tuple[float, float]:
    cpu, wall = samples(fn, repeat)
    return statistics.median(cpu), statistics.median(wall)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--looks", type=int, default=50)
    ap.add_argument("--repeat", type=int, default=20)
    args = ap.parse_args()
    k = args.looks
    plan = seqtest.design(looks=k)
    looks = looks_of(k)
    kw = {"metric": "continuous", "max_n": 2000.0 * k}
    a = seqtest.analyze(plan, looks, **kw)
    from seqtest.plotting import plot_analysis
    jobs: dict[str, Callable[[], object]] = {
        "analyze": lambda: seqtest.analyze(plan, looks, **kw),
        "summary sentence": lambda: summarize(a),
        "z path SVG": lambda: z_path_svg(a, plan),
        "effect SVG": lambda: effect_svg(a),
        "HTML report": lambda: report_html(a, plan, title="bench"),
        "matplotlib figure": lambda: plot_analysis(a, plan),
    }
    results = {name: measure(fn, args.repeat) for name, fn in jobs.items()}
    base_cpu, base_wall = results["analyze"]
    print(f"{k} looks, median of {args.repeat} runs")
    print(f"{'':20s} {'cpu ms':>9s} {'wall ms':>9s} {'cpu / analyze':>14s}")
    for name, (cpu, wall) in results.items():
        print(f"{name:20s} {1e3 * cpu:9.2f} {1e3 * wall:9.2f} {cpu / base_cpu:14.3f}")


if __name__ == "__main__":
    main()
