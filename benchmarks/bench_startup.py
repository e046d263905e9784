"""Start-up of the command line against bare Python, measured side by side in one run.

    python benchmarks/bench_startup.py [--repeat 15]

Prints the median CPU time (user + system of the child process) and wall time of:
``python -c pass``, ``seqtest --help``, ``python -c "import numpy, scipy.special"`` and
``seqtest plan --looks 5``, with the two ratios the project holds itself to:
``seqtest --help`` within 5x of ``python -c pass``, and ``seqtest plan`` within 1.5x of
importing numpy and scipy.special (the floor of any numerical command).
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import subprocess
import sys
import time

PY = sys.executable
COMMANDS = {
    "python -c pass": [PY, "-c", "pass"],
    "seqtest --help": [PY, "-m", "seqtest", "--help"],
    "import numpy, scipy.special": [PY, "-c", "import numpy, scipy.special"],
    "seqtest plan --looks 5": [PY, "-m", "seqtest", "plan", "--looks", "5"],
}


def measure(cmd: list[str]) -> tuple[float, float]:
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    subprocess.run(cmd, check=True, stdout=subprocess.DEVNULL, env=dict(os.environ))
    wall = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return cpu, wall


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__)
    ap.add_argument("--repeat", type=int, default=15)
    args = ap.parse_args()
    cpu: dict[str, list[float]] = {k: [] for k in COMMANDS}
    wall: dict[str, list[float]] = {k: [] for k in COMMANDS}
    for _ in range(args.repeat):          # interleaved, so load hits every command alike
        for name, cmd in COMMANDS.items():
            c, w = measure(cmd)
            cpu[name].append(c)
            wall[name].append(w)
    med_c = {k: statistics.median(v) for k, v in cpu.items()}
    med_w = {k: statistics.median(v) for k, v in wall.items()}
    print(f"{'command':32s} {'cpu ms':>8s} {'wall ms':>8s}")
    for k in COMMANDS:
        print(f"{k:32s} {1000 * med_c[k]:8.1f} {1000 * med_w[k]:8.1f}")
    r1 = med_c["seqtest --help"] / med_c["python -c pass"]
    r2 = med_c["seqtest plan --looks 5"] / med_c["import numpy, scipy.special"]
    print(f"\nseqtest --help / python -c pass (CPU): {r1:.2f}x  (goal: within 5x)")
    print(f"seqtest plan / import numpy, scipy.special (CPU): {r2:.2f}x  (goal: within 1.5x)")


if __name__ == "__main__":
    main()
