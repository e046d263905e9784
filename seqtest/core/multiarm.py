"""Many treatment arms against one control: joint crossing probabilities and
Dunnett-type group-sequential boundaries.

Setting
-------
One control arm and ``k`` treatment arms (``k = 1..8``) are observed at ``K`` looks
(``K = 1..50``) at information fractions ``t_1 < ... < t_K`` common to all arms (the
arms grow in proportion). Arm ``i`` has ``a_i = n_i / n_0`` units per control unit.
Comparison ``i`` is treatment ``i`` against the control; on the canonical scale its z
statistic at look ``k`` is ``Z_ik ~ N(eta_i sqrt(t_k), 1)``, where the drift
``eta_i = theta_i sqrt(I_i)`` is the standardised effect times the square root of the
comparison's information at ``t = 1`` (the project's two-arm convention).

Covariance (common practice; Dunnett 1955, section 2; Jennison and Turnbull 2000,
chapter 16). With per-unit variance ``s^2``, cumulative means ``M_ik`` of
``n_ik = a_i n_0k`` units of arm ``i`` and ``M_0k`` of ``n_0k`` control units, the
comparison ``M_ik - M_0k`` has variance ``V_ik = s^2 (1 + a_i) / (a_i n_0k)``. Means of
nested samples satisfy ``Cov(M_0k, M_0l) = s^2 / n_0l`` for ``k <= l`` (the later mean
contains the earlier sample), and different arms are independent, so for ``k <= l``

    Cov(Z_ik, Z_jl) = Cov(M_ik - M_0k, M_jl - M_0l) / sqrt(V_ik V_jl)
                    = sqrt(t_k / t_l)                          (i = j),
                    = sqrt(lambda_i lambda_j) sqrt(t_k / t_l)  (i != j),

with ``lambda_i = a_i / (1 + a_i)``: at one look ``corr(Z_ik, Z_jk) =
sqrt(a_i a_j / ((1 + a_i)(1 + a_j)))`` (1/2 for equal allocation), and the full
covariance is the Kronecker product of the arm correlation and the canonical
``sqrt(t_min / t_max)`` (:func:`comparison_covariance`). Equivalently, with ``W_0`` the
control's standard Brownian motion in information and ``B_i`` independent ones for the
arms,

    Z_ik = eta_i sqrt(t_k) + (sqrt(lambda_i) W_0(t_k) + sqrt(1 - lambda_i) B_i(t_k)) / sqrt(t_k).

Given the control path ``W_0(t_1..t_K)`` the comparisons are independent, each a
one-dimensional group-sequential test with boundaries shifted by the control path.

Method
------
The probability that no comparison crosses is the expectation over control paths of
the product over arms of one-dimensional non-crossing probabilities (Dunnett 1955 for
one look; the conditioning on the shared control is that of Follmann, Proschan and
Geller 1994 and Magirr, Jaki and Whitehead 2012).

- *Given the control path*, each arm's own part ``X_k = B(t_k) / sqrt(t_k)`` is
  propagated by the recursion of Armitage, McPherson and Rowe (1969) on the grid of
  Jennison and Turnbull (2000, chapter 19; ``r = 12``, 141 nodes), centred on 0 and
  shared by every control path, so that one look's step for all paths is one matrix
  product with one kernel matrix. Each path's continuation interval cuts the grid
  inside a Simpson panel; the partial panel is integrated with the quadratic through
  the panel's three nodes, so the per-path weights are continuous, differentiable
  functions of the boundary (Newton steps work) and the error stays of Simpson's
  order. The grid is refined where looks are close (central panel below a third of
  a step's standard deviation). Arms with the same allocation and drift share one
  recursion; each comparison on its own also runs the one-dimensional recursion of
  :mod:`seqtest.core.recursion` (its exact crossing probabilities).
- *Over the control path*, look 1 is a one-dimensional integral: the trapezoidal rule
  on 1601 nodes over ``[-10, 10]`` (Dunnett's single-look integral; ``K = 1`` is
  deterministic). Looks 2.. use randomised quasi-Monte Carlo: scrambled Sobol' points
  (Owen 1997; :class:`scipy.stats.qmc.Sobol`) drive the control's increments (one dimension per
  look, so the first looks of a design use the same paths whatever comes after), in
  ``replicates`` independent scramblings with a fixed seed; the spread of the
  replicates gives the standard errors reported, and equal inputs give equal bits.
  At each look the family's drop is averaged over that look's own control increment
  with Gauss-Hermite nodes (12 to 64, more as ``a_i / (1 + a_i)`` grows), and a control
  variate with an exactly known mean is subtracted where it lowers the variance: the
  arms' own crossings, or the look's crossing as if no look had come before (the
  latter keeps the small crossing probabilities of early looks to about 1e-4
  relative).
- The family-wise crossing at look ``k`` is ``E[prod_i A_i,k-1 - prod_i A_ik]`` with
  ``A_ik`` the probability, given the control path, that arm ``i`` has not crossed by
  look ``k``; the difference is formed per path without cancellation.

Accuracy (measured: tests/test_multiarm.py, benchmarks/bench_multiarm.py)
--------------------------------------------------------------------------
- One look: the level at the solved boundary agrees with an adaptive quadrature of
  Dunnett's integral (scipy.integrate.quad) to 3e-15, so the published values are
  reproduced to every printed digit.
- One arm: the project's two-arm boundaries to 1e-9 on z (the one-dimensional
  recursion's accuracy, about 1e-7 in probability).
- Many arms and looks: the error is that of the quasi-Monte Carlo integral, measured by
  the reported standard errors (over 12 seeds at k = 4, K = 5 the errors against
  scipy's MVN CDF at abseps 1e-6 had a spread of 1.0 reported standard error, none
  beyond 2.4), plus a grid bias below 1e-6 (against a grid 4 times as fine) and a
  Gauss-Hermite bias far below the standard error. With the default 2048 points and
  8 replicates (16,384 control paths) and O'Brien-Fleming-type spending of 0.025, the
  family-wise error's standard error is 9e-6 (k = 2, K = 3), 2e-5 (k = 4, K = 5) and
  8e-5 (k = 8, K = 10); the boundaries' standard errors on the z scale are up to 4e-4,
  7e-4 and 3e-3. The error grows when the treatment arms outgrow the control (the
  comparisons then follow the control's path closely): ``a = 2`` gives 8e-5 at
  k = 4, K = 5, ``a = 1/2`` gives 9e-6. ``accuracy`` asks for more paths (the error
  falls about as 1 / points).
- Cost: per look and distinct arm group one matrix product of (paths x 141) by
  (141 x 141) and a few evaluations on (paths x nodes): about 0.6 s on one core for
  k = 4, K = 5 with equal allocation, linear in the looks and in the number of
  distinct allocations.

References
----------
.. [1] Dunnett, C. W. (1955). A multiple comparison procedure for comparing several
       treatments with a control. JASA 50, 1096-1121.
.. [2] Follmann, D. A., Proschan, M. A. and Geller, N. L. (1994). Monitoring pairwise
       comparisons in multi-armed clinical trials. Biometrics 50, 325-336.
.. [3] Magirr, D., Jaki, T. and Whitehead, J. (2012). A generalized Dunnett test for
       multi-arm multi-stage clinical studies with treatment selection. Biometrika 99,
       494-501.
.. [4] Jennison, C. and Turnbull, B. W. (2000). Group Sequential Methods with
       Applications to Clinical Trials. Chapman & Hall/CRC, chapters 16 and 19.
.. [5] Armitage, P., McPherson, C. K. and Rowe, B. C. (1969). Repeated significance
       tests on accumulating data. JRSS A 132, 235-244.
.. [6] Owen, A. B. (1997). Scrambled net variance for integrals of smooth functions.
       Annals of Statistics 25, 1541-1562.
"""

from __future__ import annotations

import functools
import inspect
import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike
from scipy import special
from scipy.stats import qmc

from seqtest.core import checks
from seqtest.core.recursion import (
    BIG,
    DEFAULT_R,
    _grid_offsets,
    _State,
    check_r,
    continuation_intervals,
)
from seqtest.core.region import Region
from seqtest.core.roots import solve

__all__ = [
    "MAX_ARMS",
    "MAX_LOOKS",
    "DunnettBounds",
    "MultiArmCrossing",
    "any_arm_drift",
    "arm_correlation",
    "comparison_covariance",
    "comparison_drift",
    "dunnett_bounds",
    "multiarm_crossing",
]

MAX_ARMS = 8
MAX_LOOKS = 50
DEFAULT_POINTS = 2048
DEFAULT_REPLICATES = 8
DEFAULT_SEED = 1955
DEFAULT_GRID_R = 12
_SQRT2PI = math.sqrt(2.0 * math.pi)
# look 1: trapezoidal rule over the control's standardised value
_OUTER_HALF = 10.0
_OUTER_NODES = 1601
# the grid's panels are kept below this share of a step's standard deviation
_PANEL_SHARE = 1.0 / 3.0


# ---------------------------------------------------------------------------------
# The shared grid of one arm's own process and its per-path quadrature weights
# ---------------------------------------------------------------------------------

@dataclass(frozen=True)
class _Panels:
    """Simpson panels on the grid of Jennison and Turnbull centred on 0: the panel
    ends are the grid's ``6 r - 1`` points, each panel has its midpoint as a node."""

    r: int
    z: np.ndarray      # nodes: panel ends (even) and midpoints (odd)
    pts: np.ndarray    # panel ends
    d: np.ndarray      # panel widths
    w: np.ndarray      # composite Simpson weights of the whole grid
    w_left: np.ndarray  # weight each node gets from the panel to its left only
    phi: np.ndarray    # standard normal density at the nodes
    lut: np.ndarray    # panel at the start of each cell of a uniform lookup table
    cell: float        # the table's cell width (below the narrowest panel)

    def locate(self, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Panel index and position in it (0..1) of each point, clipped to the grid
        (a uniform lookup table whose cells are narrower than any panel: the panel is
        the cell's first or the next one)."""
        x = np.clip(b, self.pts[0], self.pts[-1])
        j = ((x - self.pts[0]) * (1.0 / self.cell)).astype(np.intp)
        np.minimum(j, self.lut.size - 1, out=j)
        p = self.lut.take(j)
        p += x >= self.pts.take(p + 1)
        np.minimum(p, self.d.size - 1, out=p)
        s = (x - self.pts.take(p)) / self.d.take(p)
        np.clip(s, 0.0, 1.0, out=s)
        return p, s


@functools.lru_cache(maxsize=16)
def _panels(r: int) -> _Panels:
    pts = np.asarray(_grid_offsets(r), dtype=float)
    d = np.diff(pts)
    m = 2 * pts.size - 1
    z = np.empty(m)
    z[0::2] = pts
    z[1::2] = 0.5 * (pts[:-1] + pts[1:])
    w = np.zeros(m)
    w[0:-1:2] += d / 6.0
    w[2::2] += d / 6.0
    w[1::2] = 4.0 * d / 6.0
    w_left = np.zeros(m)
    w_left[2::2] = d / 6.0
    cell = 0.5 * float(d.min())
    starts = pts[0] + cell * np.arange(int(math.ceil((pts[-1] - pts[0]) / cell)) + 1)
    lut = np.clip(np.searchsorted(pts, starts, side="right") - 1, 0, d.size - 1)
    out = _Panels(r, z, pts, d, w, w_left, np.exp(-0.5 * z * z) / _SQRT2PI,
                  lut.astype(np.intp), cell)
    for arr in (out.z, out.pts, out.d, out.w, out.w_left, out.phi, out.lut):
        arr.setflags(write=False)
    return out


def _betas(s: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Integrals over ``[0, s]`` of the quadratic Lagrange basis on nodes 0, 1/2, 1."""
    s2 = s * s
    s3 = s2 * s
    return (2.0 * s3 / 3.0 - 1.5 * s2 + s, 2.0 * s2 - 4.0 * s3 / 3.0, 2.0 * s3 / 3.0 - 0.5 * s2)


def _cum_weights(pan: _Panels, b: np.ndarray) -> np.ndarray:
    """Per-path weights (paths x nodes) of ``integral_{-inf}^{b_n} g``: Simpson's on
    the whole panels below ``b_n``, the integral of the quadratic through the three
    nodes of the panel that holds ``b_n`` up to ``b_n``."""
    n = b.size
    m = pan.z.size
    p, s = pan.locate(b)
    col = np.arange(m)
    out = np.where(col[None, :] < 2 * p[:, None], pan.w[None, :], 0.0)
    b0, b1, b2 = _betas(s)
    d = pan.d[p]
    rows = np.arange(n)
    out[rows, 2 * p] = pan.w_left[2 * p] + d * b0
    out[rows, 2 * p + 1] = d * b1
    out[rows, 2 * p + 2] = d * b2
    return out


def _interval_weights(pan: _Panels, intervals: list[tuple[np.ndarray, np.ndarray]]
                      ) -> np.ndarray:
    """Per-path weights of the integral over a union of disjoint per-path intervals."""
    total: np.ndarray | None = None
    for lo, hi in intervals:
        lo = np.minimum(lo, hi)
        w = _cum_weights(pan, hi)
        if np.any(lo > pan.pts[0]):
            w -= _cum_weights(pan, lo)
        total = w if total is None else total + w
    assert total is not None
    return total


@functools.lru_cache(maxsize=16)
def _sums_matrices(r: int) -> tuple[np.ndarray, np.ndarray]:
    """Nodes x panels: the prefix sums (whole panels before each panel) and the
    suffix sums (each panel and those after it) of Simpson's rule."""
    pan = _panels(r)
    n_pan = pan.d.size
    simpson = np.zeros((pan.z.size, n_pan))
    cols = np.arange(n_pan)
    simpson[2 * cols, cols] = pan.d / 6.0
    simpson[2 * cols + 1, cols] = 4.0 * pan.d / 6.0
    simpson[2 * cols + 2, cols] = pan.d / 6.0
    before = simpson @ np.triu(np.ones((n_pan, n_pan)), 1)
    after = simpson @ np.tril(np.ones((n_pan, n_pan)))
    for arr in (before, after):
        arr.setflags(write=False)
    return before, after


class _Density:
    """One arm's sub-density at one look for every control path (rows), with its
    panels' prefix and suffix sums, so that the mass below or above any per-path
    point, and the density there, cost a handful of operations.

    On panel ``p`` (width ``d``, nodes ``f0, f1, f2`` at ``s = 0, 1/2, 1``) the
    quadratic through the nodes integrates from the panel's start to ``s`` to
    ``d G(s)``, ``G(s) = f0 s + a2 s^2 + a3 s^3`` with ``a2 = -3/2 f0 + 2 f1 - 1/2 f2``
    and ``a3 = 2/3 (f0 - 2 f1 + f2)``; the mass below is the prefix sum plus ``d G``,
    the mass above the suffix sum minus it, the density ``G'(s)``."""

    def __init__(self, pan: _Panels, f: np.ndarray) -> None:
        self.pan = pan
        self.f = f
        self.n_pan = pan.d.size
        before, after = _sums_matrices(pan.r)
        self.prefix = f @ before
        self.suffix = f @ after

    def _eval(self, b: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        p, s = self.pan.locate(b)
        rows = np.arange(b.shape[0]).reshape((-1,) + (1,) * (b.ndim - 1))
        node = rows * self.f.shape[1] + 2 * p
        flat = self.f.ravel()
        f0 = flat.take(node)
        f1 = flat.take(node + 1)
        f2 = flat.take(node + 2)
        a2 = -1.5 * f0 + 2.0 * f1 - 0.5 * f2
        a3 = (2.0 / 3.0) * (f0 - 2.0 * f1 + f2)
        g = s * (f0 + s * (a2 + s * a3)) * self.pan.d[p]
        dens = f0 + s * (2.0 * a2 + 3.0 * s * a3)
        return rows * self.n_pan + p, g, np.maximum(dens, 0.0)

    def below(self, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Mass below ``b`` and the density at ``b``, for the first ``len(b)`` paths."""
        idx, g, dens = self._eval(b)
        return np.maximum(self.prefix.ravel().take(idx) + g, 0.0), dens

    def above(self, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Mass above ``b`` and the density at ``b``, for the first ``len(b)`` paths."""
        idx, g, dens = self._eval(b)
        return np.maximum(self.suffix.ravel().take(idx) - g, 0.0), dens


class _Normal:
    """The standard normal as a :class:`_Density` (an arm's own part at look 1)."""

    @staticmethod
    def below(b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return special.ndtr(b), np.exp(-0.5 * b * b) / _SQRT2PI

    @staticmethod
    def above(b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return special.ndtr(-b), np.exp(-0.5 * b * b) / _SQRT2PI


def _kernel(pan_from: _Panels, pan_to: _Panels, t0: float, t1: float) -> np.ndarray:
    """Density of ``X(t1) = B(t1) / sqrt(t1)`` at the nodes of ``pan_to`` given
    ``X(t0)`` at the nodes of ``pan_from`` (rows)."""
    delta = t1 - t0
    q1 = math.sqrt(t1)
    x = (np.subtract.outer(pan_from.z * (math.sqrt(t0) / math.sqrt(delta)),
                           pan_to.z * (q1 / math.sqrt(delta))))
    np.square(x, out=x)
    x *= -0.5
    np.exp(x, out=x)
    x *= q1 / (math.sqrt(delta) * _SQRT2PI)
    return x


def _look_r(t: np.ndarray, r: int) -> list[int]:
    """Grid size of each look: ``r``, refined so that the central panel (``3 / (2 r)``)
    stays below ``_PANEL_SHARE`` of the standard deviation (on the grid's scale) of
    the steps into and out of the look."""
    out = []
    k = t.size
    for j in range(k):
        sd = math.inf
        if j + 1 < k:
            sd = min(sd, math.sqrt((t[j + 1] - t[j]) / t[j]))
        if j > 0:
            sd = min(sd, math.sqrt((t[j] - t[j - 1]) / t[j]))
        need = 1.5 / (_PANEL_SHARE * sd) if math.isfinite(sd) else 0.0
        out.append(int(min(100, max(r, math.ceil(need)))))
    return out


# ---------------------------------------------------------------------------------
# The control's paths
# ---------------------------------------------------------------------------------

def _sobol(rng: np.random.Generator) -> qmc.Sobol:
    # scipy renamed ``seed`` to ``rng`` (1.15); either gives the same points
    if "rng" in inspect.signature(qmc.Sobol).parameters:
        return qmc.Sobol(d=MAX_LOOKS, scramble=True, rng=rng)
    return qmc.Sobol(d=MAX_LOOKS, scramble=True, seed=rng)  # pragma: no cover


@functools.lru_cache(maxsize=8)
def _normals(points: int, replicates: int, seed: int) -> np.ndarray:
    """Standard normal scores of ``replicates`` independently scrambled Sobol' point
    sets of ``points`` points in ``MAX_LOOKS`` dimensions (rows replicate by
    replicate); dimension ``j`` drives the control's increment into look ``j + 1``."""
    m = int(round(math.log2(points)))
    parts = []
    for rep in range(replicates):
        u = _sobol(np.random.default_rng([seed, rep])).random_base2(m)
        parts.append(special.ndtri(np.clip(u, 2.0 ** -60, 1.0 - 2.0 ** -53)))
    out = np.concatenate(parts)
    out.setflags(write=False)
    return out


def _control_paths(t: np.ndarray, points: int, replicates: int, seed: int) -> np.ndarray:
    """``U_k = W_0(t_k) / sqrt(t_k)`` for each path (rows) and look (columns)."""
    z = _normals(points, replicates, seed)[:, : t.size]
    inc = np.sqrt(np.diff(np.concatenate(([0.0], t))))
    return np.cumsum(z * inc, axis=1) / np.sqrt(t)


@functools.lru_cache(maxsize=1)
def _outer_rule() -> tuple[np.ndarray, np.ndarray]:
    """Trapezoidal nodes and weights for ``E g(U)``, ``U ~ N(0, 1)``."""
    u = np.linspace(-_OUTER_HALF, _OUTER_HALF, _OUTER_NODES)
    w = np.exp(-0.5 * u * u) / _SQRT2PI * (u[1] - u[0])
    w[[0, -1]] *= 0.5
    u.setflags(write=False)
    w.setflags(write=False)
    return u, w


# ---------------------------------------------------------------------------------
# The engine: all looks, all arms, every control path at once
# ---------------------------------------------------------------------------------

@dataclass(frozen=True)
class _Group:
    """Arms that share allocation and drift share one recursion."""

    lam: float    # a / (1 + a): the squared loading of the comparison on the control
    drift: float  # eta: mean of Z at t = 1
    count: int    # how many arms


def _groups(lam: np.ndarray, drift: np.ndarray) -> list[_Group]:
    seen: dict[tuple[float, float], int] = {}
    for a, d in zip(lam.tolist(), drift.tolist(), strict=True):
        seen[(a, d)] = seen.get((a, d), 0) + 1
    return [_Group(a, d, c) for (a, d), c in seen.items()]


def _family_drop(a: list[np.ndarray], e: list[np.ndarray], de: list[np.ndarray],
                 groups: list[_Group]) -> tuple[np.ndarray, np.ndarray]:
    """``prod A^m - prod (A - E)^m`` per path without cancellation (a telescoping sum
    of ``A^m - (A - E)^m = -A^m expm1(m log1p(-E / A))``), and its slope given the
    slopes ``dE`` of the exits; arrays broadcast against each other."""
    n = len(groups)
    after = [np.maximum(ai - ei, 0.0) for ai, ei in zip(a, e, strict=True)]
    steps = []
    for j in range(n):
        m = groups[j].count
        ratio = np.minimum(e[j] / np.maximum(a[j], 1e-300), 1.0)
        with np.errstate(divide="ignore"):
            steps.append(-(a[j] ** m) * np.expm1(m * np.log1p(-ratio)))
    if n == 1:
        m = groups[0].count
        return steps[0], (de[0] if m == 1 else m * after[0] ** (m - 1) * de[0])
    before_pow = [ai ** g.count for ai, g in zip(a, groups, strict=True)]
    after_pow = [x ** g.count for x, g in zip(after, groups, strict=True)]
    drop: Any = 0.0
    slope: Any = 0.0
    for j in range(n):
        step = steps[j]
        for h in range(j):
            step = step * after_pow[h]
        for h in range(j + 1, n):
            step = step * before_pow[h]
        drop = drop + step
        m = groups[j].count
        part = m * after[j] ** (m - 1) * de[j]
        for h in range(n):
            if h != j:
                part = part * after_pow[h]
        slope = slope + part
    return drop, slope


def _z_intervals(sides: int, c: float, fut: float | None) -> list[tuple[float, float]]:
    """Continuation of one comparison at one look on the z scale."""
    if sides == 1:
        lower = -math.inf if fut is None else min(fut, c)
        return continuation_intervals(lower, c, 0.0, 0.0)
    f = 0.0 if fut is None else min(max(fut, 0.0), c)
    return continuation_intervals(-c, c, -f, f)


def _rule_nodes(lam_max: float) -> int:
    """Gauss-Hermite nodes for a look's own control increment: the arms' crossing
    probabilities turn sharper in the control as its share ``lambda`` of their
    variance grows (checked in tests/test_multiarm.py against 4 times as many)."""
    if lam_max <= 0.6:
        return 12
    if lam_max <= 0.75:
        return 16
    if lam_max <= 0.9:
        return 32
    return 64


class _Engine:
    """The arms' sub-densities on every control path, look after look."""

    def __init__(self, t: np.ndarray, groups: list[_Group], sides: int, count: str,
                 futility: np.ndarray | None, points: int, replicates: int, seed: int,
                 r: int, control_variate: bool = True) -> None:
        self.t = t
        self.groups = groups
        self.sides = sides
        self.either = sides == 2 and count == "either"
        self.futility = futility
        self.points = points
        self.replicates = replicates
        self.r = r
        self.control_variate = control_variate
        self.paths = _control_paths(t, points, replicates, seed)
        self.n = self.paths.shape[0]
        self.pans = [_panels(rr) for rr in _look_r(t, r)]
        xi, wxi = special.roots_hermitenorm(_rule_nodes(max(g.lam for g in groups)))
        self.xi, self.wxi = xi, wxi / wxi.sum()
        self.scale = [math.sqrt(1.0 - g.lam) for g in groups]
        self.root = [math.sqrt(g.lam) for g in groups]
        self.arms = sum(g.count for g in groups)
        self.a = [np.ones(self.n) for _ in groups]
        self.dens: list[Any] = [_Normal for _ in groups]
        # each comparison on its own: the one-dimensional recursion
        self.marg = [_State.origin(g.drift) for g in groups]

    def exits(self, c: float, dens: list[Any], mu: list[np.ndarray]
              ) -> tuple[list[np.ndarray], list[np.ndarray]]:
        """Each group's probability of a counted crossing at boundary ``c`` given the
        control (``mu``: the mean of its z statistic), and its slope in ``c``."""
        es, ds = [], []
        for i in range(len(self.groups)):
            s = self.scale[i]
            e, de = dens[i].above((c - mu[i]) / s)
            de = -de / s
            if self.either:
                e2, de2 = dens[i].below((-c - mu[i]) / s)
                e = e + e2
                de = de - de2 / s
            es.append(e)
            ds.append(de)
        return es, ds

    def marginal(self, c: float, k: int) -> tuple[float, float]:
        """Sum over arms of each comparison's own crossing at look ``k``, and slope."""
        p = dp = 0.0
        tk = float(self.t[k])
        for g, st in zip(self.groups, self.marg, strict=True):
            pi = st.prob_above(c, tk)
            di = -st.density(c, tk) if c < BIG else 0.0
            if self.either:
                pi += st.prob_below(-c, tk)
                di -= st.density(-c, tk) if c < BIG else 0.0
            p += g.count * pi
            dp += g.count * di
        return p, dp

    def untruncated(self, k: int) -> Callable[[float], tuple[float, float]]:
        """The family's crossing at look ``k`` as if it were the first look (no
        earlier boundary), and its slope: a one-dimensional integral over the
        control's value at look ``k`` (trapezoidal rule). At look 1 it is exact."""
        u1, w1 = _outer_rule()
        q = math.sqrt(self.t[k])
        mu = [g.drift * q + self.root[i] * u1 for i, g in enumerate(self.groups)]
        ones = [np.ones(u1.size) for _ in self.groups]

        def family(c: float) -> tuple[float, float]:
            es, ds = self.exits(c, [_Normal] * len(self.groups), mu)
            drop, slope = _family_drop(ones, es, ds, self.groups)
            return float(w1 @ drop), float(w1 @ slope)

        return family

    def step(self, k: int, c: float) -> None:
        """Apply boundary ``c`` at look ``k`` and move every path to look ``k + 1``."""
        t = self.t
        qk = math.sqrt(t[k])
        mu = [g.drift * qk + self.root[i] * self.paths[:, k]
              for i, g in enumerate(self.groups)]
        es, _ = self.exits(c, self.dens, mu)
        self.a = [np.maximum(ai - ei, 0.0) for ai, ei in zip(self.a, es, strict=True)]
        if k + 1 == t.size:
            return
        fut = None if self.futility is None else float(self.futility[k])
        zint = _z_intervals(self.sides, c, fut)
        self.marg = [st.advance(zint, float(t[k]), DEFAULT_R, float(t[k + 1]))
                     for st in self.marg]
        kern = _kernel(self.pans[k], self.pans[k + 1], float(t[k]), float(t[k + 1]))
        new = []
        n = self.n
        for i in range(len(self.groups)):
            s = self.scale[i]
            intervals = [(np.broadcast_to((lo - mu[i]) / s, (n,)),
                          np.broadcast_to((hi - mu[i]) / s, (n,))) for lo, hi in zint]
            weights = _interval_weights(self.pans[k], intervals)
            f_now = self.pans[k].phi[None, :] if k == 0 else self.dens[i].f
            new.append(_Density(self.pans[k + 1], (weights * f_now) @ kern))
        self.dens = new


class _Look:
    """The family's first crossing at look ``k >= 2`` as a function of the boundary.

    Over the control paths, the drop of the family survival is averaged over the
    look's own control increment by Gauss-Hermite (given the path so far the control
    at this look is normal), which removes much of the variance. A control variate
    with an exactly known mean may then be subtracted: the arms' own crossings at
    this look (means from the one-dimensional recursion), or the family's crossing
    as if no look had come before (a one-dimensional integral over the control). The
    one with the least variance over the paths at the solver's first estimate is used
    (the second at looks with small crossing probabilities, where the earlier looks
    have changed the arms little). Coefficients are 1: coefficients fitted on the same
    paths biased the estimate and its standard error when paths were few."""

    def __init__(self, eng: _Engine, k: int) -> None:
        self.eng = eng
        self.k = k
        self.variate = 0
        t = eng.t
        qk = math.sqrt(t[k])
        rho = math.sqrt(t[k - 1] / t[k])
        sd = math.sqrt(1.0 - rho * rho)
        u = eng.paths[:, k - 1, None] * rho + sd * eng.xi[None, :]
        self.mu = [g.drift * qk + eng.root[i] * u for i, g in enumerate(eng.groups)]
        self.fresh = eng.untruncated(k)
        self._cache: dict[tuple[float, int], tuple[np.ndarray, ...]] = {}

    def parts(self, c: float, n: int, fresh: bool = False) -> tuple[np.ndarray, ...]:
        """Per path (the first ``n``), averaged over the look's control increment:
        the family's drop and its slope in ``c``, the arms' summed drops and their
        slope, and with ``fresh`` the family's drop as if no look had come before and
        its slope."""
        fresh = fresh or self.variate == 2
        hit = self._cache.get((c, n))
        if hit is not None and (len(hit) == 6 or not fresh):
            return hit
        eng = self.eng
        mu = [m[:n] for m in self.mu]
        es, ds = eng.exits(c, eng.dens, mu)
        a = [ai[:n, None] for ai in eng.a]
        drop, slope = _family_drop(a, es, ds, eng.groups)
        tot = sum(g.count * e for g, e in zip(eng.groups, es, strict=True))
        dtot = sum(g.count * d for g, d in zip(eng.groups, ds, strict=True))
        found = [drop, slope, np.asarray(tot), np.asarray(dtot)]
        if fresh:
            es0, ds0 = eng.exits(c, [_Normal] * len(eng.groups), mu)
            ones = [np.ones((1, 1))] * len(eng.groups)
            found += list(_family_drop(ones, es0, ds0, eng.groups))
        w = eng.wxi
        out = tuple(np.asarray(x @ w) for x in found)
        if len(self._cache) >= 4:
            self._cache.pop(next(iter(self._cache)))
        self._cache[(c, n)] = out
        return out

    def _variate(self, c: float, parts: tuple[np.ndarray, ...], which: int
                 ) -> tuple[np.ndarray, np.ndarray, float, float]:
        """Control variate ``which`` (1: the arms' own crossings, 2: the look on its
        own): per-path values and slopes, exact mean and its slope."""
        if which == 1:
            m, dm = self.eng.marginal(c, self.k)
            return parts[2], parts[3], m, dm
        m, dm = self.fresh(c)
        return parts[4], parts[5], m, dm

    def value(self, c: float, n: int | None = None) -> tuple[float, float]:
        """Estimated crossing probability at boundary ``c`` and its slope in ``c``."""
        parts = self.parts(c, self.eng.n if n is None else n)
        p, dp = float(parts[0].mean()), float(parts[1].mean())
        if self.variate:
            v, dv, m, dm = self._variate(c, parts, self.variate)
            p += m - float(v.mean())
            dp += dm - float(dv.mean())
        return p, dp

    def choose(self, c: float) -> None:
        """Use the control variate that lowers the variance over the paths most (the
        variance over paths, not the spread of the replicates: choosing by the
        latter would make the replicates' spread understate the error)."""
        if not self.eng.control_variate:
            return
        parts = self.parts(c, self.eng.n, fresh=True)
        best = float(parts[0].var())
        self.variate = 0
        for which in (1, 2):
            v = float((parts[0] - self._variate(c, parts, which)[0]).var())
            if v < best:
                best, self.variate = v, which

    def by_replicate(self, c: float) -> np.ndarray:
        parts = self.parts(c, self.eng.n)
        x = parts[0]
        shift = 0.0
        if self.variate:
            v, _, m, _ = self._variate(c, parts, self.variate)
            x = x - v
            shift = m
        return np.asarray(x.reshape(self.eng.replicates, -1).mean(axis=1) + shift)


@dataclass
class _Run:
    bounds: np.ndarray   # efficacy boundary per look
    prob: np.ndarray     # family's first crossing per look
    by_rep: np.ndarray   # the same, per replicate (replicates x looks)
    slope: np.ndarray    # its derivative in the look's boundary
    paths: int


def _run(t: np.ndarray, groups: list[_Group], sides: int, count: str,
         futility: np.ndarray | None, bounds: np.ndarray, inc: np.ndarray,
         points: int, replicates: int, seed: int, r: int,
         control_variate: bool = True) -> _Run:
    """Family-wise first crossings look by look; boundaries given as ``nan`` are
    solved so that the family's first crossing at that look is ``inc``."""
    k_looks = t.size
    bounds = bounds.copy()
    eng = _Engine(t, groups, sides, count, futility, points, replicates, seed, r,
                  control_variate)
    prob = np.zeros(k_looks)
    slope = np.zeros(k_looks)
    by_rep = np.zeros((replicates, k_looks))
    for k in range(k_looks):
        look = None if k == 0 else _Look(eng, k)
        family = eng.untruncated(0) if look is None else look.value
        if np.isnan(bounds[k]):
            target = float(inc[k])
            floor = 0.0 if sides == 2 else -BIG
            if futility is not None:
                floor = max(floor, float(futility[k]))
            start = _guess(target, floor, eng.arms * sides)
            if look is not None and math.isfinite(start):
                # a first solve on one replicate's paths gives Newton a close start
                start = _solve_look(functools.partial(look.value, n=points), target,
                                    floor, start)
                look.choose(start)
            # the floor is checked on the full set only when it may be reached
            bounds[k] = _solve_look(family, target, floor, start,
                                    check_floor=look is None or start <= floor + 0.5)
        elif look is not None and math.isfinite(bounds[k]):
            look.choose(float(bounds[k]))
        c = float(bounds[k])
        if math.isfinite(c):
            prob[k], slope[k] = family(c)
            by_rep[:, k] = prob[k] if look is None else look.by_replicate(c)
        eng.step(k, c)
    return _Run(bounds, prob, by_rep, slope, eng.n)


def _guess(target: float, floor: float, tails: int) -> float:
    """Bonferroni's boundary: a start for the solver."""
    if target <= 0.0:
        return math.inf
    return max(floor, float(-special.ndtri(min(target / tails, 0.5))))


def _solve_look(family: Callable[[float], tuple[float, float]], target: float,
                floor: float, x0: float, check_floor: bool = True) -> float:
    """Boundary at which the family's first crossing at this look is ``target``
    (Newton steps on the log probability, bracketed; to 1e-12 on z)."""
    if target <= 0.0:
        return math.inf
    if check_floor and family(floor)[0] <= target:
        # spending more than what is left to spend: everything stops here
        return floor
    log_t = math.log(target)

    def g(x: float) -> tuple[float, float]:
        p, dp = family(x)
        if p <= 0.0:
            return -math.inf, 0.0
        return math.log(p) - log_t, dp / p

    return solve(g, min(max(x0, floor), BIG), with_slope=True, increasing=False,
                 bracket=(floor, BIG), gtol=1e-13, xtol=1e-12)


# ---------------------------------------------------------------------------------
# Checks of the arguments
# ---------------------------------------------------------------------------------

def _fractions(fractions: ArrayLike) -> np.ndarray:
    t = np.asarray(fractions, dtype=float).ravel() if _numeric(fractions) else None
    if (t is None or not 1 <= t.size <= MAX_LOOKS or np.any(~np.isfinite(t))
            or t[0] <= 0 or np.any(np.diff(t) <= 0)):
        raise checks.fail("fractions", _listed(fractions),
                          f"1 to {MAX_LOOKS} strictly increasing positive numbers")
    return t


def _allocations(allocations: ArrayLike) -> np.ndarray:
    a = np.asarray(allocations, dtype=float).ravel() if _numeric(allocations) else None
    if (a is None or not 1 <= a.size <= MAX_ARMS or np.any(~np.isfinite(a))
            or np.any(a < 0.01) or np.any(a > 100.0)):
        raise checks.fail("allocations", _listed(allocations),
                          f"1 to {MAX_ARMS} numbers from 0.01 to 100 (units of each "
                          "treatment arm per control unit)")
    return a


def _per_look(name: str, values: ArrayLike | None, k: int, allowed: str) -> np.ndarray | None:
    if values is None:
        return None
    arr = np.asarray(values, dtype=float).ravel() if _numeric(values) else None
    if arr is None or arr.size != k or np.any(np.isnan(arr)):
        raise checks.fail(name, _listed(values), f"{k} numbers (one per look){allowed}")
    return arr


def _numeric(values: Any) -> bool:
    try:
        arr = np.asarray(values)
    except (ValueError, TypeError):  # ragged input
        return False
    return arr.dtype.kind in "iuf" and arr.ndim <= 1


def _listed(values: Any) -> Any:
    return values.tolist() if isinstance(values, np.ndarray) else values


def _sides(sides: Any) -> int:
    return int(checks.choice("sides", sides, (1, 2)))


def _qmc_args(points: Any, replicates: Any, seed: Any, r: Any) -> tuple[int, int, int, int]:
    p = checks.whole("points", points, lo=64, hi=2 ** 16)
    if p & (p - 1):
        raise checks.fail("points", points, "a power of two from 64 to 65536")
    reps = checks.whole("replicates", replicates, lo=2, hi=64)
    s = checks.whole("seed", seed, lo=0, hi=2 ** 63 - 1)
    return p, reps, s, check_r(r)


def _lam(a: np.ndarray) -> np.ndarray:
    return a / (1.0 + a)


# ---------------------------------------------------------------------------------
# The public functions
# ---------------------------------------------------------------------------------

def arm_correlation(allocations: ArrayLike) -> np.ndarray:
    """Correlation of the comparisons' z statistics at one look.

    ``corr(Z_i, Z_j) = sqrt(a_i a_j / ((1 + a_i)(1 + a_j)))`` for ``i != j`` (the
    shared control; derivation in the module docstring), 1 on the diagonal.

    Parameters
    ----------
    allocations : array_like
        ``a_i = n_i / n_0`` for each of the ``k`` treatment arms (1 to 8).

    Returns
    -------
    ndarray, shape (k, k)
    """
    root = np.sqrt(_lam(_allocations(allocations)))
    out = np.outer(root, root)
    np.fill_diagonal(out, 1.0)
    return out


def comparison_covariance(fractions: ArrayLike, allocations: ArrayLike) -> np.ndarray:
    """Covariance of all comparisons at all looks on the canonical scale.

    ``Cov(Z_ik, Z_jl) = R_ij sqrt(t_min / t_max)`` with ``R`` from
    :func:`arm_correlation`: the Kronecker product ``R (x) C`` with ``C_kl =
    sqrt(min(t_k, t_l) / max(t_k, t_l))`` (module docstring).

    Returns
    -------
    ndarray, shape (k K, k K)
        Rows and columns ordered arm by arm, looks within arms (index ``i K + k``).
    """
    t = _fractions(fractions)
    c = np.sqrt(np.minimum.outer(t, t) / np.maximum.outer(t, t))
    return np.kron(arm_correlation(allocations), c)


@dataclass(frozen=True)
class MultiArmCrossing:
    """Crossing probabilities of many comparisons against one control.

    Attributes
    ----------
    first : ndarray
        Per look ``k``: the probability that no comparison has crossed before look
        ``k`` and at least one crosses at look ``k`` (counted crossings; see
        ``count`` of :func:`multiarm_crossing`).
    cumulative : ndarray
        Running sum of ``first``: the probability that at least one comparison has
        crossed by look ``k`` (the family-wise error under the global null).
    standard_error : ndarray
        Standard error of ``cumulative`` from the spread of the independent
        quasi-Monte Carlo replicates (zero where it is computed by quadrature: the
        first look, or one arm); errors beyond 3.5 standard errors (the 0.995 point of
        Student's t with ``replicates - 1`` degrees of freedom for 8 replicates) are
        not expected.
    per_arm : ndarray, shape (k, K)
        Each comparison's own crossing probability at each look (one-dimensional
        recursion): the per-comparison error under the null, or its power.
    paths : int
        Number of control paths (points times replicates).
    """

    first: np.ndarray
    cumulative: np.ndarray
    standard_error: np.ndarray
    per_arm: np.ndarray
    paths: int


def _count(count: Any, sides: int) -> str:
    if count is None:
        return "either"
    out = str(checks.choice("count", count, ("either", "upper")))
    return "either" if sides == 1 else out


def multiarm_crossing(
    bounds: ArrayLike,
    fractions: ArrayLike,
    allocations: ArrayLike,
    drifts: ArrayLike | None = None,
    *,
    sides: int = 1,
    futility: ArrayLike | None = None,
    count: str | None = None,
    points: int = DEFAULT_POINTS,
    replicates: int = DEFAULT_REPLICATES,
    seed: int = DEFAULT_SEED,
    r: int = DEFAULT_GRID_R,
) -> MultiArmCrossing:
    """Joint crossing probabilities of ``k`` comparisons with a shared control.

    Each comparison stops on its own: once it crosses its efficacy boundary (or a
    binding futility boundary) it is out, and the others go on.

    Parameters
    ----------
    bounds : array_like
        Efficacy boundary per look on the z scale, common to all comparisons
        (``inf``: none at that look). One-sided: a comparison crosses when
        ``Z_ik >= c_k``; two-sided: when ``|Z_ik| >= c_k``.
    fractions : array_like
        Information fractions ``t_1 < ... < t_K`` (common to all arms).
    allocations : array_like
        ``a_i = n_i / n_0`` for each treatment arm.
    drifts : array_like, optional
        Each comparison's drift ``eta_i`` (mean of ``Z_ik`` is ``eta_i sqrt(t_k)``);
        zero (the global null) by default.
    sides : {1, 2}
        One-sided (upper) or symmetric two-sided boundaries.
    futility : array_like, optional
        A binding futility boundary per look: one-sided, a comparison with
        ``Z_ik <= b_k`` is dropped; two-sided, one with ``|Z_ik| < b_k``. Dropped
        comparisons never cross. ``None``: no futility (a non-binding boundary is
        simply left out of error computations).
    count : {"either", "upper"}, optional
        Two-sided only: which crossings count. ``"either"`` (the default; the
        family-wise error), or ``"upper"`` (power: a comparison that crosses the
        lower boundary stops without counting).
    points, replicates, seed : int
        Quasi-Monte Carlo: scrambled Sobol' points per replicate (a power of two),
        independent replicates (their spread gives the standard error), and the seed
        that makes the result reproducible.
    r : int
        Grid size of each arm's recursion (about ``12 r`` nodes).

    Returns
    -------
    MultiArmCrossing

    Notes
    -----
    Method and accuracy in the module docstring. The family-wise error under a
    configuration with some arms truly better is the crossing probability of the
    null comparisons alone (each comparison stops on its own, so the others do not
    affect them): call this function with the null arms' allocations.
    """
    t = _fractions(fractions)
    a = _allocations(allocations)
    s = _sides(sides)
    c = _per_look("bounds", bounds, t.size, ", +inf for none")
    assert c is not None
    if np.any(c < (0.0 if s == 2 else -np.inf)):
        raise checks.fail("bounds", _listed(bounds), f"{t.size} numbers"
                          + (" >= 0 (two-sided)" if s == 2 else ""))
    eta = np.zeros(a.size) if drifts is None else _per_arm_drifts(drifts, a.size)
    fut = _per_look("futility", futility, t.size, "")
    cnt = _count(count, s)
    p, reps, seed_, rr = _qmc_args(points, replicates, seed, r)
    run = _run(t, _groups(_lam(a), eta), s, cnt, fut, c, np.zeros(t.size), p, reps,
               seed_, rr)
    per_arm = np.array([_own(c, t, float(e), s, fut, cnt) for e in eta])
    cum = np.cumsum(run.prob)
    se = np.cumsum(run.by_rep, axis=1).std(axis=0, ddof=1) / math.sqrt(reps)
    return MultiArmCrossing(run.prob, cum, se, per_arm, run.paths)


def _per_arm_drifts(drifts: ArrayLike, k: int) -> np.ndarray:
    d = np.asarray(drifts, dtype=float).ravel() if _numeric(drifts) else None
    if d is None or d.size != k or np.any(~np.isfinite(d)) or np.any(np.abs(d) > 40):
        raise checks.fail("drifts", _listed(drifts),
                          f"{k} numbers from -40 to 40 (one per treatment arm)")
    return d


def _own(c: np.ndarray, t: np.ndarray, drift: float, sides: int,
         fut: np.ndarray | None, count: str, r: int = DEFAULT_R) -> np.ndarray:
    """One comparison's crossing per look (the one-dimensional recursion)."""
    cr = Region.of_plan(sides, c, fut).crossing(t, drift, r)
    return cr.upper + cr.lower if (sides == 2 and count == "either") else cr.upper


@dataclass(frozen=True)
class DunnettBounds:
    """Dunnett-type group-sequential boundaries.

    Attributes
    ----------
    z : ndarray
        The efficacy boundary per look, common to all comparisons (``inf`` where
        nothing is spent).
    family_error : ndarray
        The family-wise error spent by each look as computed at these boundaries
        (both tails when two-sided): the target up to the solver's tolerance.
    standard_error : ndarray
        Standard error of ``family_error`` at each look, from the spread of the
        quasi-Monte Carlo replicates (zero where computed by quadrature).
    z_error : ndarray
        Standard error of each boundary on the z scale: that of the look's own
        crossing probability over the probability's slope in the boundary.
    paths : int
        Number of control paths used.
    """

    z: np.ndarray
    family_error: np.ndarray
    standard_error: np.ndarray
    z_error: np.ndarray
    paths: int


def dunnett_bounds(
    fractions: ArrayLike,
    cumulative_alpha: ArrayLike,
    allocations: ArrayLike,
    *,
    sides: int = 1,
    futility: ArrayLike | None = None,
    previous: ArrayLike | None = None,
    accuracy: float | None = None,
    points: int = DEFAULT_POINTS,
    replicates: int = DEFAULT_REPLICATES,
    seed: int = DEFAULT_SEED,
    r: int = DEFAULT_GRID_R,
) -> DunnettBounds:
    """Efficacy boundaries common to ``k`` comparisons with a shared control that
    spend a given family-wise error at each look.

    At each look the boundary ``c_k`` is solved so that the probability, under the
    global null, that no comparison has crossed before look ``k`` and at least one
    crosses at look ``k`` equals the error to spend there (Dunnett 1955 at one look;
    the group-sequential form of Follmann, Proschan and Geller 1994 and Magirr, Jaki
    and Whitehead 2012).

    The global null is least favourable: a comparison's crossing depends only on its
    own arm and the control, and each comparison stops on its own, so under any
    configuration the family-wise error is the probability that some *null*
    comparison crosses; that is at most the probability that some comparison crosses
    when all are null (more comparisons, larger union), and a comparison whose arm
    is worse than the control crosses an upper boundary less often than a null one.

    Parameters
    ----------
    fractions : array_like
        Information fractions ``t_1 < ... < t_K`` (1 to 50 looks).
    cumulative_alpha : array_like
        Error to have spent by each look, per tail (non-decreasing): a spending
        function's ``f(t_k, alpha)``, with ``alpha`` one-sided, or ``alpha / 2`` per
        tail for a two-sided test (the family-wise error is then twice it).
    allocations : array_like
        ``a_i = n_i / n_0`` for each of the ``k`` treatment arms (1 to 8).
    sides : {1, 2}
        One-sided upper boundaries, or symmetric two-sided ``+-c_k``.
    futility : array_like, optional
        A binding futility boundary per look (see :func:`multiarm_crossing`); the
        efficacy boundaries then account for it. ``None`` for none or non-binding.
    previous : array_like, optional
        Boundaries already used at the first looks (monitoring: the looks taken so
        far keep their boundaries; only the later ones are solved).
    accuracy : float, optional
        Wanted standard error of the family-wise error spent by the last look: the
        number of points is doubled (up to 32768 per replicate) until it is reached.
    points, replicates, seed, r
        As in :func:`multiarm_crossing`.

    Returns
    -------
    DunnettBounds

    Notes
    -----
    One look is the one-dimensional integral of Dunnett (1955), exact to about
    1e-10; one arm is the one-dimensional recursion (as
    :func:`seqtest.core.boundaries.spending_bounds`). Otherwise see the module
    docstring for the method and its measured accuracy; the reported standard errors
    bound it.
    """
    t = _fractions(fractions)
    k_looks = t.size
    a = _allocations(allocations)
    s = _sides(sides)
    cum = _per_look("cumulative_alpha", cumulative_alpha, k_looks, "")
    assert cum is not None
    if (np.any(cum < 0) or np.any(np.diff(cum) < -1e-15) or cum[-1] > 0.5 / s
            or np.any(~np.isfinite(cum))):
        raise checks.fail("cumulative_alpha", _listed(cumulative_alpha),
                          f"{k_looks} non-decreasing numbers from 0 to {0.5 / s:g} "
                          "(per tail)")
    fut = _per_look("futility", futility, k_looks, "")
    bounds = np.full(k_looks, np.nan)
    if previous is not None:
        prev = np.asarray(previous, dtype=float).ravel() if _numeric(previous) else None
        if prev is None or prev.size >= k_looks or np.any(np.isnan(prev)):
            raise checks.fail("previous", _listed(previous),
                              f"fewer than {k_looks} boundaries (those of the looks "
                              "already taken)")
        bounds[: prev.size] = prev
    p, reps, seed_, rr = _qmc_args(points, replicates, seed, r)
    target = None if accuracy is None else checks.number(
        "accuracy", accuracy, lo=0.0, hi=0.01, lo_open=True,
        allowed="a standard error in (0, 0.01]")
    inc = np.diff(np.concatenate(([0.0], cum))) * s
    groups = _groups(_lam(a), np.zeros(a.size))
    while True:
        run = _run(t, groups, s, "either", fut, bounds, inc, p, reps, seed_, rr)
        se_cum = np.cumsum(run.by_rep, axis=1).std(axis=0, ddof=1) / math.sqrt(reps)
        if target is None or se_cum[-1] <= target or p >= 2 ** 15:
            break
        p *= 2
    se_look = run.by_rep.std(axis=0, ddof=1) / math.sqrt(reps)
    with np.errstate(divide="ignore", invalid="ignore"):
        z_err = np.where(run.slope != 0, se_look / np.abs(run.slope), 0.0)
    return DunnettBounds(run.bounds, np.cumsum(run.prob), se_cum, z_err, run.paths)


def comparison_drift(
    bounds: ArrayLike,
    fractions: ArrayLike,
    power: float,
    *,
    sides: int = 1,
    futility: ArrayLike | None = None,
    r: int = DEFAULT_R,
) -> float:
    """Drift at which one comparison crosses its upper boundary with probability
    ``power``.

    Each comparison stops on its own, so its power is that of a two-arm test with
    the same boundaries (the other arms do not enter): the drift ``eta`` (mean of
    ``Z_k`` is ``eta sqrt(t_k)``) is solved with the one-dimensional recursion of
    :mod:`seqtest.core.recursion` (accuracy about 1e-7 in power). A futility
    boundary, when given, is obeyed (a comparison that crosses it stops without
    winning).
    """
    t = _fractions(fractions)
    s = _sides(sides)
    c = _per_look("bounds", bounds, t.size, "")
    assert c is not None
    fut = _per_look("futility", futility, t.size, "")
    pw = checks.probability("power", power)
    rr = check_r(r)

    def g(eta: float) -> float:
        p = float(_own(c, t, eta, s, fut, "upper", rr).sum())
        return float(special.ndtri(min(max(p, 1e-300), 1.0 - 1e-16))) - float(special.ndtri(pw))

    finite = c[np.isfinite(c)]
    x0 = float(finite[-1] if finite.size else 0.0) + float(special.ndtri(pw))
    return solve(g, x0, step=1.0, lo=-40.0, hi=40.0, xtol=1e-10, gtol=1e-12)


def any_arm_drift(
    bounds: ArrayLike,
    fractions: ArrayLike,
    allocations: ArrayLike,
    power: float,
    *,
    pattern: ArrayLike | None = None,
    sides: int = 1,
    futility: ArrayLike | None = None,
    points: int = DEFAULT_POINTS,
    replicates: int = DEFAULT_REPLICATES,
    seed: int = DEFAULT_SEED,
    r: int = DEFAULT_GRID_R,
) -> float:
    """Drift at which at least one comparison crosses its upper boundary with
    probability ``power``.

    The comparisons' drifts are ``eta * pattern`` (``pattern``: relative effects of
    the arms, all 1 by default; scaled so that its largest entry is 1), and ``eta``
    is solved on :func:`multiarm_crossing` with ``count="upper"`` (the same control
    paths at every trial drift, so the estimate is a smooth function of it).
    """
    t = _fractions(fractions)
    a = _allocations(allocations)
    s = _sides(sides)
    c = _per_look("bounds", bounds, t.size, "")
    assert c is not None
    fut = _per_look("futility", futility, t.size, "")
    pw = checks.probability("power", power)
    if pattern is None:
        shape = np.ones(a.size)
    else:
        shape = _per_arm_drifts(pattern, a.size)
        if not np.max(shape) > 0:
            raise checks.fail("pattern", _listed(pattern),
                              "relative effects with at least one above 0")
        shape = shape / np.max(shape)
    p, reps, seed_, rr = _qmc_args(points, replicates, seed, r)
    lam = _lam(a)

    def g(eta: float) -> float:
        run = _run(t, _groups(lam, eta * shape), s, "upper", fut, c, np.zeros(t.size),
                   p, reps, seed_, rr)
        q = float(run.prob.sum())
        return float(special.ndtri(min(max(q, 1e-300), 1.0 - 1e-16))) - float(special.ndtri(pw))

    finite = c[np.isfinite(c)]
    x0 = float(finite[-1] if finite.size else 0.0) + float(special.ndtri(pw)) - 0.5
    return solve(g, x0, step=1.0, lo=-40.0, hi=40.0, xtol=1e-6, gtol=1e-9)
