"""The score interval (:func:`seqtest.core.score.interval`) against the code of an
earlier commit, measured side by side in one run.

    python benchmarks/bench_interval.py --baseline DIR [--repeat 300]

``DIR`` is a checkout of the earlier commit (for instance ``git worktree add DIR
<commit>`` or ``git archive <commit> | tar -x -C DIR``); it is imported in a child
process, so the two never share a module. For binary and rate metrics on both scales,
one look and ten looks at once (invented cumulative totals of an experiment with 10%
and 11% conversion, or 2.0 and 2.1 events per unit of exposure, 1,000 units per arm
and look; O'Brien-Fleming-like boundaries ``2 / sqrt(t)``; the test at no effect
alongside, as the monitoring layer asks for it), prints the median CPU time of one
call on each side, their ratio, and the number of vectorised evaluations of the
statistic (``_z_raw``) each side makes. The two sides alternate three times, so a
change in the machine's load hits both alike; compare the ratios, not the times.

Goal (profiling of the service): about 5x less CPU for one look and for ten.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys

import numpy as np

HERE = os.path.dirname(os.path.abspath(__file__))
sys.path.insert(0, HERE)

CASES = [(kind, scale, looks) for kind in ("binary", "rate")
         for scale in ("difference", "relative") for looks in (1, 10)]

# one program for both sides: it imports seqtest from the directory it is given
_PROGRAM = """
import json, statistics, sys
sys.path.insert(0, sys.argv[1]); sys.path.insert(0, sys.argv[2])
import numpy as np
from _timing import samples
from seqtest.core import score

def arguments(kind, looks):
    t = np.arange(1, looks + 1) / looks if looks > 1 else np.array([1.0])
    n = 1000.0 * np.arange(1, looks + 1)
    rate_c, rate_t = (0.10, 0.11) if kind == "binary" else (2.0, 2.1)
    return (kind, np.floor(rate_c * n), n, np.floor(rate_t * n), n, 2.0 / np.sqrt(t))

out = {}
for kind, scale, looks, repeat in json.loads(sys.argv[3]):
    args = arguments(kind, looks)
    call = lambda: score.interval(*args, scale=scale, null=0.0)
    calls = [0]
    original = score._z_raw
    def counting(*a, **k):
        calls[0] += 1
        return original(*a, **k)
    score._z_raw = counting
    call()
    score._z_raw = original
    cpu, _ = samples(call, repeat, warm_up=True)
    out[f"{kind} {scale} {looks}"] = [statistics.median(cpu), calls[0]]
print(json.dumps(out))
"""


def run(source: str, repeat: int) -> dict[str, list[float]]:
    plan = [(k, s, n, repeat) for k, s, n in CASES]
    done = subprocess.run([sys.executable, "-c", _PROGRAM, source, HERE, json.dumps(plan)],
                          capture_output=True, text=True, check=True)
    return json.loads(done.stdout)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--baseline", required=True, help="a checkout of an earlier commit")
    ap.add_argument("--repeat", type=int, default=300)
    args = ap.parse_args()
    ours_dir = os.path.dirname(HERE)
    ours: dict[str, list[list[float]]] = {}
    base: dict[str, list[list[float]]] = {}
    for _ in range(3):
        for side, into in ((ours_dir, ours), (args.baseline, base)):
            for name, value in run(side, args.repeat).items():
                into.setdefault(name, []).append(value)
    print(f"{'case':<28} | {'this tree':>10} | {'baseline':>10} | {'speed-up':>8} | "
          f"{'evaluations':>11}")
    print("-" * 80)
    for name in ours:
        ours_cpu = statistics.median(v[0] for v in ours[name])
        base_cpu = statistics.median(v[0] for v in base[name])
        evals = f"{int(ours[name][0][1])} vs {int(base[name][0][1])}"
        print(f"{name:<28} | {ours_cpu * 1e3:>7.3f} ms | {base_cpu * 1e3:>7.3f} ms | "
              f"{base_cpu / ours_cpu:>7.2f}x | {evals:>11}")
    ratios = np.array([statistics.median(v[0] for v in base[n])
                       / statistics.median(v[0] for v in ours[n]) for n in ours])
    print(f"\nspeed-up: geometric mean {np.exp(np.mean(np.log(ratios))):.2f}x, "
          f"smallest {ratios.min():.2f}x (goal: about 5x)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
