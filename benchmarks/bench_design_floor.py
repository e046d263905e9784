"""Plan design against its numerical floor, measured side by side in one run.

    python benchmarks/bench_design_floor.py [--repeat 30]

The floor is a bare numpy/scipy.special kernel of the same computation as
``seqtest.design(alpha=0.05, sides=2, power=0.9, looks=K)`` with O'Brien-Fleming-type
spending: the Jennison-Turnbull grid (r = 24) with Simpson weights, each boundary by
Newton steps on the log exit probability, the drift by secant steps on the probit
of the power, with the same stopping tolerances (secant steps only, no inverse
quadratic ones); no input checks, no plan object,
no refinement of the grid. It checks its own answer against ``seqtest.design`` (to
1e-6 on every boundary and the drift), so both sides do the same work.

Also timed: the plan with an O'Brien-Fleming-type futility boundary (beta spending,
non-binding and binding) at K = 50, and the same three plans by the code of an
earlier commit when ``--baseline DIR`` points at a checkout of it (imported in a
child process, so the two never share a module).

Goals (issue "scale and speed"): K = 5 within 1.5x of the floor; K = 50 with
futility under 100 ms of CPU time.
"""

from __future__ import annotations

import argparse
import json
import math
import statistics
import subprocess
import sys
import time
from collections.abc import Callable

import numpy as np
from scipy import special

ALPHA, POWER, R = 0.05, 0.9, 24
_SQ2PI = math.sqrt(2 * math.pi)


# -- the floor --------------------------------------------------------------------
def _offsets(r: int) -> np.ndarray:
    i = np.arange(1, 6 * r, dtype=float)
    return np.where(i < r, -3 - 4 * np.log(r / i),
                    np.where(i <= 5 * r, -3 + 3 * (i - r) / (2 * r),
                             3 + 4 * np.log(r / np.maximum(6 * r - i, 1e-300))))


OFF = _offsets(R)


def _simpson(mu: float, lo: float, hi: float) -> tuple[np.ndarray, np.ndarray]:
    inner = mu + OFF
    inner = inner[(inner > lo) & (inner < hi)]
    pts = np.concatenate(([max(lo, mu + OFF[0])], inner, [min(hi, mu + OFF[-1])]))
    z = np.empty(2 * pts.size - 1)
    z[0::2], z[1::2] = pts, 0.5 * (pts[:-1] + pts[1:])
    d = np.diff(pts)
    w = np.zeros(z.size)
    w[0:-1:2] += d / 6
    w[2::2] += d / 6
    w[1::2] = 4 * d / 6
    return z, w


def _pass(t: np.ndarray, u: np.ndarray, theta: float, inc: np.ndarray | None = None
          ) -> float:
    """One pass of the recursion over the two-sided region ``|Z_j| < u_j`` under drift
    ``theta``: the upper crossing probability. With ``inc``, each ``u_j`` is first
    solved for the exit probability ``inc[j]`` (both tails), as the looks come."""
    gw = np.array([1.0])
    s_prev = np.array([0.0])
    info_prev = 0.0
    upper = 0.0
    for j, info in enumerate(t):
        q = math.sqrt(info)
        mean = s_prev + theta * (info - info_prev)
        sd = math.sqrt(info - info_prev)
        if inc is not None:
            lt = math.log(inc[j])
            x = float(-special.ndtri(min(inc[j] / (2 * gw.sum()), 0.5)))
            for _ in range(100):
                a1 = (mean - x * q) / sd
                a2 = (-x * q - mean) / sd
                p = gw @ (special.ndtr(a1) + special.ndtr(a2))
                d = gw @ (np.exp(-0.5 * a1 * a1) + np.exp(-0.5 * a2 * a2)) * q / (sd * _SQ2PI)
                h = math.log(p) - lt
                x += h * p / d
                if abs(h) < 1e-13 or abs(h * p / d) < 1e-12:
                    break
            u[j] = x
        upper += float(gw @ special.ndtr((mean - u[j] * q) / sd))
        if j + 1 == t.size:
            break
        zz, ww = _simpson(theta * q, -u[j], u[j])
        x2 = np.subtract.outer(zz * (q / sd), mean / sd)
        gw = ww * (np.exp(-0.5 * x2 * x2) @ gw) * (q / (sd * _SQ2PI))
        s_prev, info_prev = zz * q, info
    return upper


def floor_design(k: int) -> tuple[np.ndarray, float]:
    t = np.arange(1, k + 1) / k
    cum = 2 * special.ndtr(special.ndtri(ALPHA / 4) / np.sqrt(t))  # per tail
    u = np.empty(k)
    _pass(t, u, 0.0, np.diff(np.concatenate(([0.0], cum))) * 2)
    goal = float(special.ndtri(POWER))
    fixed = float(-special.ndtri(ALPHA / 2) - special.ndtri(1 - POWER))
    x = 0.999 * fixed
    x0 = g0 = math.nan
    for _ in range(50):
        g = float(special.ndtri(_pass(t, u, x))) - goal
        if abs(g) <= 1e-9:
            break
        nxt = x - g if math.isnan(g0) else x - g * (x - x0) / (g - g0)
        x0, g0, x = x, g, nxt
    return u, x


# -- timing -----------------------------------------------------------------------
def cpu(fn: Callable[[], object], repeat: int) -> float:
    """Median CPU seconds over ``repeat`` calls after a warm-up (CPU, not wall: the
    machines are shared)."""
    fn()
    out = []
    for _ in range(repeat):
        c0 = time.process_time()
        fn()
        out.append(time.process_time() - c0)
    return statistics.median(out)


PLANS = {
    "K=5": dict(looks=5),
    "K=50 futility": dict(looks=50, futility="obrien-fleming-type"),
    "K=50 futility, binding": dict(looks=50, futility="obrien-fleming-type", binding=True),
}

_CHILD = """
import json, statistics, sys, time
sys.path.insert(0, sys.argv[1])
import seqtest
plans = json.loads(sys.argv[2]); reps = json.loads(sys.argv[3])
out = {}
for name, kw in plans.items():
    f = lambda kw=kw: seqtest.design(alpha=0.05, sides=2, power=0.9, **kw)
    f(); xs = []
    for _ in range(reps[name]):
        c = time.process_time(); f(); xs.append(time.process_time() - c)
    out[name] = statistics.median(xs)
print(json.dumps(out))
"""


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--repeat", type=int, default=30)
    ap.add_argument("--baseline", help="a checkout of an earlier commit to time too")
    args = ap.parse_args()
    import seqtest

    plan = seqtest.design(alpha=ALPHA, sides=2, power=POWER, looks=5)
    u, drift = floor_design(5)
    err = max(float(np.max(np.abs(u - plan.efficacy_z))), abs(drift - plan.drift))
    print(f"floor kernel vs seqtest.design, K = 5: largest difference {err:.1e}")
    if err > 1e-6:
        print("the floor does not compute the same plan; no ratio printed")
        return 1
    reps = {"K=5": args.repeat, "K=50 futility": max(3, args.repeat // 6),
            "K=50 futility, binding": max(3, args.repeat // 10)}
    # interleave the two sides so a change in the machine's load hits both alike
    ours: dict[str, list[float]] = {n: [] for n in PLANS}
    floor: list[float] = []
    for _ in range(3):
        floor.append(cpu(lambda: floor_design(5), args.repeat))
        for name, kw in PLANS.items():
            ours[name].append(cpu(lambda kw=kw: seqtest.design(
                alpha=ALPHA, sides=2, power=POWER, **kw), reps[name]))
    base = None
    if args.baseline:
        done = subprocess.run([sys.executable, "-c", _CHILD, args.baseline,
                               json.dumps(PLANS), json.dumps(reps)],
                              capture_output=True, text=True, check=True)
        base = json.loads(done.stdout)
    med = {n: statistics.median(v) for n, v in ours.items()}
    fl = statistics.median(floor)
    print(f"\n{'plan':<24} | {'seqtest cpu':>11} | {'floor':>9} | {'ratio':>6}"
          + (f" | {'baseline':>9} | {'speed-up':>8}" if base else ""))
    print("-" * (60 + (23 if base else 0)))
    for name in PLANS:
        row = f"{name:<24} | {med[name] * 1e3:>8.2f} ms | "
        row += (f"{fl * 1e3:>6.2f} ms | {med[name] / fl:>5.2f}x" if name == "K=5"
                else f"{'':>9} | {'':>6}")
        if base:
            row += f" | {base[name] * 1e3:>6.1f} ms | {base[name] / med[name]:>7.2f}x"
        print(row)
    print("\ngoals (cpu time)")
    for label, ok, value in [
        ("K = 5 within 1.5x of the floor", med["K=5"] / fl <= 1.5, f"{med['K=5'] / fl:.2f}x"),
        ("K = 50 with futility under 100 ms", med["K=50 futility"] < 0.1,
         f"{med['K=50 futility'] * 1e3:.1f} ms"),
    ]:
        print(f"  [{'met' if ok else 'MISSED'}] {label}: {value}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
