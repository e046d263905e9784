"""Timing of Dunnett-type group-sequential designs for many arms.

Run on demand (never in CI): ``python benchmarks/bench_multiarm.py``.

Part 1 times the design of ``seqtest.core.multiarm``: the boundaries
(``dunnett_bounds``, O'Brien-Fleming-type spending of one-sided 0.025, equal
allocation, equally spaced looks) plus the drift at which each comparison has power
0.9 (``comparison_drift``), for k = 4 arms and K = 5 looks (goal: under 1 s) and for
k = 8, K = 10; and, apart, the drift at which at least one comparison has power 0.9
(``any_arm_drift``).

Part 2 computes the same kind of design through scipy's multivariate normal CDF on
all k K comparisons (Genz's lattice rule): look 1 and each later look by Brent's
method on ``P(no comparison crosses by look j) = 1 - f(t_j)``. scipy is given the
absolute error ``abseps`` of 3.5 of the module's reported standard errors of the
family-wise error (about the same half-width), so the routes are timed at equal
accuracy. The full design through scipy is timed for k = 3, K = 3 (9 dimensions);
for k = 4, K = 5 (20 dimensions) one CDF evaluation at the last look is timed and
multiplied by the number of evaluations the k = 3 design needed per look (an
estimate, printed as such: a full run takes many minutes).

CPU time is what the goals are judged on (the machine is shared); both are printed.
The linear algebra runs on one thread (set below, before numpy loads, unless the
environment says otherwise), so that CPU time is the time on one idle core.
"""

from __future__ import annotations

import os

for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")

import statistics  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from collections.abc import Callable  # noqa: E402

import numpy as np  # noqa: E402
from _timing import samples  # noqa: E402
from scipy import optimize, stats  # noqa: E402

from seqtest import spending  # noqa: E402
from seqtest.core import multiarm as ma  # noqa: E402

ALPHA = 0.025
POWER = 0.9
def OBF(t: np.ndarray, alpha: float) -> np.ndarray:
    return np.asarray(spending.obrien_fleming()(t, alpha), dtype=float)


def timed(fn: Callable[[], object], repeat: int) -> tuple[float, float]:
    """Median wall and CPU time (seconds) over ``repeat`` calls after a warm-up."""
    cpu, wall = samples(fn, repeat, warm_up=True)
    return statistics.median(wall), statistics.median(cpu)


def seqtest_design(k: int, looks: int) -> tuple[ma.DunnettBounds, float]:
    t = np.arange(1, looks + 1) / looks
    res = ma.dunnett_bounds(t, OBF(t, ALPHA), [1.0] * k)
    return res, ma.comparison_drift(res.z, t, POWER)


class MvnRoute:
    """The same design through scipy's multivariate normal CDF."""

    def __init__(self, k: int, looks: int, abseps: float) -> None:
        self.k, self.looks, self.abseps = k, looks, abseps
        self.t = np.arange(1, looks + 1) / looks
        self.cov = ma.comparison_covariance(self.t, [1.0] * k)
        self.evaluations = 0

    def inside(self, c: np.ndarray) -> float:
        """P(no comparison crosses at the looks of ``c``)."""
        j = c.size
        idx = [i * self.looks + m for i in range(self.k) for m in range(j)]
        self.evaluations += 1
        return float(stats.multivariate_normal.cdf(
            np.tile(c, self.k), mean=np.zeros(idx.__len__()),
            cov=self.cov[np.ix_(idx, idx)], abseps=self.abseps, releps=0.0,
            maxpts=10 ** 8, rng=np.random.default_rng(0)))

    def bounds(self) -> np.ndarray:
        cum = OBF(self.t, ALPHA)
        c = np.empty(self.looks)
        for j in range(self.looks):
            def g(x: float, j: int = j) -> float:
                return self.inside(np.append(c[:j], x)) - (1.0 - cum[j])

            c[j] = optimize.brentq(g, 1.0, 8.0, xtol=1e-5)
        return c


def main() -> int:
    print("Dunnett-type group-sequential designs, one-sided 0.025, O'Brien-Fleming-type "
          "spending, equal allocation\n")
    rows = []
    for k, looks in ((4, 5), (8, 10)):
        def whole(k: int = k, looks: int = looks) -> object:
            return seqtest_design(k, looks)

        design_t = timed(whole, 3)
        res, eta = seqtest_design(k, looks)
        t = np.arange(1, looks + 1) / looks

        def any_arm(res: ma.DunnettBounds = res, t: np.ndarray = t, k: int = k) -> object:
            return ma.any_arm_drift(res.z, t, [1.0] * k, POWER)

        any_t = timed(any_arm, 1)
        se = float(res.standard_error[-1])
        rows.append((k, looks, design_t, any_t, se, float(np.max(res.z_error)), res, eta))
    print(f"{'arms':>4} {'looks':>5} | {'bounds + drift cpu':>18} | {'wall':>8} | "
          f"{'any-arm drift cpu':>17} | {'FWER se':>8} | {'max z se':>8}")
    print("-" * 86)
    for k, looks, (dw, dc), (_, ac), se, zse, _, _ in rows:
        print(f"{k:>4} {looks:>5} | {dc:>15.3f} s | {dw:>6.3f} s | {ac:>14.3f} s | "
              f"{se:>8.1e} | {zse:>8.1e}")
    res45, eta45 = rows[0][6], rows[0][7]
    print(f"\nk = 4, K = 5: boundaries {np.round(res45.z, 4).tolist()}, drift for 90 % "
          f"power of each comparison {eta45:.4f}")

    # -- scipy's MVN route at equal accuracy ----------------------------------------
    print("\nscipy.stats.multivariate_normal.cdf route (abseps = 3.5 reported standard "
          "errors)")
    k, looks = 3, 3
    t3 = np.arange(1, looks + 1) / looks
    ours3 = ma.dunnett_bounds(t3, OBF(t3, ALPHA), [1.0] * k)
    se3 = float(ours3.standard_error[-1])
    route = MvnRoute(k, looks, max(3.5 * se3, 1e-6))
    w0, c0 = time.perf_counter(), time.process_time()
    mvn3 = route.bounds()
    mvn_cpu, mvn_wall = time.process_time() - c0, time.perf_counter() - w0
    per_look = route.evaluations / looks
    def ours() -> object:
        return ma.dunnett_bounds(t3, OBF(t3, ALPHA), [1.0] * k)

    ours_wall, ours_cpu = timed(ours, 3)
    print(f"k = 3, K = 3 bounds: seqtest {np.round(ours3.z, 4).tolist()}, "
          f"MVN {np.round(mvn3, 4).tolist()} (abseps {route.abseps:.1e}, "
          f"{route.evaluations} CDF calls)")
    print(f"{'task':<26} | {'MVN route cpu':>13} | {'seqtest cpu':>11} | {'ratio':>6}")
    print("-" * 66)
    print(f"{'k = 3, K = 3 bounds':<26} | {mvn_cpu:>11.2f} s | {ours_cpu:>9.3f} s | "
          f"{mvn_cpu / ours_cpu:>5.0f}x")
    se45 = rows[0][4]
    big = MvnRoute(4, 5, max(3.5 * se45, 1e-6))
    w0, c0 = time.perf_counter(), time.process_time()
    big.inside(res45.z)
    one_cpu = time.process_time() - c0
    est = one_cpu * per_look * 5
    print(f"{'k = 4, K = 5 bounds (est.)':<26} | {est:>11.1f} s | "
          f"{rows[0][2][1]:>9.3f} s | {est / rows[0][2][1]:>5.0f}x   "
          f"(one 20-dimensional CDF call: {one_cpu:.2f} s cpu, "
          f"times {per_look:.0f} calls per look, 5 looks)")
    print(f"(MVN wall time for k = 3, K = 3: {mvn_wall:.2f} s; seqtest {ours_wall:.3f} s)")

    goal = rows[0][2][1] < 1.0
    print(f"\ngoal (cpu): k = 4, K = 5 design under 1 s: [{'met' if goal else 'MISSED'}] "
          f"{rows[0][2][1]:.3f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
