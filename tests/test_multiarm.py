"""Tests for seqtest.core.multiarm: many arms against one control.

Outside sources, named beside each check:

- Dunnett (1955), JASA 50:1096-1121: fixed-sample critical values for many-to-one
  comparisons, equal allocation, infinite degrees of freedom, alpha 0.05 (from memory
  of the published table, confirmed by computation; /work/shared/REFERENCES.md);
- scipy.stats.multivariate_normal.cdf (Genz's randomised lattice rule) on the k K
  dimensional normal of all comparisons at all looks, a method unrelated to the
  conditioning on the control used by the module;
- plain Monte Carlo of the raw model (independent arms, cumulative means of nested
  samples, z statistics from the arms' means), which assumes nothing of the
  covariance the module derives; acceptance bounds computed in the comments;
- the project's two-arm boundaries (seqtest.core.boundaries.spending_bounds) and
  plans (seqtest.planning.design.design);
- facts of the trade (common practice): Bonferroni's inequality, the correlation
  sqrt(a_i a_j / ((1 + a_i)(1 + a_j))) of comparisons with a shared control.

Statistical checks use fixed seeds and bounds of about 3.3 standard errors (two-sided
0.001) plus the module's reported quasi-Monte Carlo error (4 standard errors: the
0.998 point of Student's t with 7 degrees of freedom is 4.03 for 8 replicates), so a
correct module fails one of them about once in a thousand runs of the suite at most.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np
import pytest
from scipy import integrate, special, stats

from seqtest import spending
from seqtest.core import multiarm as ma
from seqtest.core.boundaries import spending_bounds
from seqtest.core.errors import InputError
from seqtest.core.recursion import crossing_probabilities
from seqtest.planning.design import design


def OBF(t: np.ndarray, alpha: float) -> np.ndarray:
    """O'Brien-Fleming-type spending (Lan and DeMets 1983)."""
    return np.asarray(spending.obrien_fleming()(t, alpha), dtype=float)


def POCOCK(t: np.ndarray, alpha: float) -> np.ndarray:
    """Pocock-type spending (Lan and DeMets 1983)."""
    return np.asarray(spending.pocock()(t, alpha), dtype=float)


Spending = Callable[[np.ndarray, float], np.ndarray]
Z3 = 3.29  # two-sided 0.001 point of the normal: Monte Carlo acceptance
QMC_T = 4.0  # t_7 0.998 point (4.03) rounded: acceptance on the reported errors
INNER = 1e-6  # bias of the arms' recursion at the default grid (module docstring)


def equal(k: int) -> np.ndarray:
    return np.arange(1, k + 1) / k


def simulate_raw(bounds: np.ndarray, t: np.ndarray, allocations: list[float], n: int,
                 seed: int, *, sides: int = 1, effects: list[float] | None = None,
                 futility: np.ndarray | None = None, counted: list[bool] | None = None,
                 chunk: int = 100_000) -> tuple[float, np.ndarray]:
    """Plain Monte Carlo of the raw model: unit-variance outcomes, control with
    ``N t_k`` units at look k, arm i with ``a_i N t_k`` (N = 1: only ratios matter),
    sums built from independent increments (nested samples), z from the arms' means.
    ``effects``: true mean difference of each arm (per unit) times sqrt of the
    comparison's information at t = 1, i.e. the drift. Each comparison stops on its
    own (efficacy or binding futility). Returns the probability that a counted
    comparison crosses (upward for ``effects``; either side two-sided) and each
    comparison's win rate."""
    a = np.asarray(allocations, float)
    k, looks = a.size, t.size
    eff = np.zeros(k) if effects is None else np.asarray(effects, float)
    # the drift eta needs a mean difference delta with delta sqrt(I_1) = eta, where
    # I_1 = 1 / (1/a + 1) is the comparison's information at t = 1
    delta = eff / np.sqrt(1.0 / (1.0 / a + 1.0))
    cnt = np.ones(k, bool) if counted is None else np.asarray(counted, bool)
    dt = np.diff(np.concatenate(([0.0], t)))
    rng = np.random.default_rng(seed)
    hits = 0
    wins = np.zeros(k)
    done = 0
    while done < n:
        m = min(chunk, n - done)
        s0 = np.cumsum(rng.standard_normal((m, looks)) * np.sqrt(dt), axis=1)
        si = np.cumsum(rng.standard_normal((m, k, looks)) * np.sqrt(a[None, :, None] * dt)
                       + (delta * a)[None, :, None] * dt, axis=2)
        mean0 = s0 / t
        meani = si / (a[None, :, None] * t)
        z = (meani - mean0[:, None, :]) / np.sqrt(1.0 / (a[None, :, None] * t) + 1.0 / t)
        alive = np.ones((m, k), bool)
        crossed = np.zeros((m, k), bool)
        won = np.zeros((m, k), bool)
        for j in range(looks):
            zj = z[:, :, j]
            up = (zj >= bounds[j]) & alive
            hit = (up | (zj <= -bounds[j])) & alive if sides == 2 else up
            crossed |= hit
            won |= up
            alive &= ~hit
            if futility is not None and j + 1 < looks:
                alive &= (zj > futility[j]) if sides == 1 else (np.abs(zj) >= futility[j])
        event = won if effects is not None else crossed
        hits += int((event & cnt).any(axis=1).sum())
        wins += won.sum(axis=0)
        done += m
    return hits / n, wins / n


def mc_bound(p: float, n: int) -> float:
    return Z3 * math.sqrt(p * (1.0 - p) / n)


def mvn_cumulative(c: np.ndarray, t: np.ndarray, allocations: list[float], sides: int,
                   drifts: np.ndarray | None = None, abseps: float = 1e-6) -> np.ndarray:
    """P(some comparison crosses by look j), j = 1..K, from scipy's MVN CDF."""
    k = len(allocations)
    cov = ma.comparison_covariance(t, allocations)
    eta = np.zeros(k) if drifts is None else drifts
    out = []
    for j in range(1, t.size + 1):
        idx = [i * t.size + m for i in range(k) for m in range(j)]
        hi = np.tile(c[:j], k)
        lo = -hi if sides == 2 else np.full(hi.size, -np.inf)
        mean = np.concatenate([e * np.sqrt(t[:j]) for e in eta])
        inside = stats.multivariate_normal.cdf(
            hi, mean=mean, cov=cov[np.ix_(idx, idx)], lower_limit=lo, abseps=abseps,
            releps=0.0, maxpts=10 ** 7, rng=np.random.default_rng(0))
        out.append(1.0 - float(inside))
    return np.array(out)


# ---------------------------------------------------------------------------------
# The covariance of the comparisons
# ---------------------------------------------------------------------------------

def test_correlation_of_comparisons_with_a_shared_control_by_simulation() -> None:
    # Common practice: corr = sqrt(a_i a_j / ((1 + a_i)(1 + a_j))). Raw data: arm means
    # of n_i = a_i n_0 unit-variance outcomes. A sample correlation of n pairs has
    # standard error (1 - rho^2) / sqrt(n); 3.3 of them is the bound.
    a = [0.5, 1.0, 3.0]
    n0, reps = 40, 200_000
    rng = np.random.default_rng(12)
    means0 = rng.standard_normal(reps) / math.sqrt(n0)
    z = []
    for ai in a:
        ni = ai * n0
        mi = rng.standard_normal(reps) / math.sqrt(ni)
        z.append((mi - means0) / math.sqrt(1 / ni + 1 / n0))
    emp = np.corrcoef(np.array(z))
    want = ma.arm_correlation(a)
    bound = Z3 * (1 - want ** 2) / math.sqrt(reps) + 1e-12
    assert np.all(np.abs(emp - want) <= bound)
    assert want[0, 1] == pytest.approx(math.sqrt(0.5 * 1.0 / (1.5 * 2.0)), rel=1e-15)
    # equal allocation: one half (Dunnett 1955)
    assert ma.arm_correlation([1, 1])[0, 1] == pytest.approx(0.5, rel=1e-15)


def test_full_covariance_across_looks_and_arms_by_simulation() -> None:
    # Cov(Z_ik, Z_jl) = R_ij sqrt(t_min / t_max): raw nested samples at unequal looks
    # and allocations; same standard-error bound for each entry.
    t = np.array([0.25, 0.6, 1.0])
    a = [2.0, 0.5]
    reps = 200_000
    rng = np.random.default_rng(5)
    dt = np.diff(np.concatenate(([0.0], t)))
    aa = np.asarray(a)
    s0 = np.cumsum(rng.standard_normal((reps, 3)) * np.sqrt(dt), axis=1)
    si = np.cumsum(rng.standard_normal((reps, 2, 3)) * np.sqrt(aa[None, :, None] * dt), axis=2)
    z = (si / (aa[None, :, None] * t) - (s0 / t)[:, None, :]) \
        / np.sqrt(1.0 / (aa[None, :, None] * t) + 1.0 / t)
    emp = np.corrcoef(z.reshape(reps, 6).T)
    want = ma.comparison_covariance(t, a)
    assert np.allclose(np.diag(want), 1.0)
    bound = Z3 * (1 - want ** 2) / math.sqrt(reps) + 1e-12
    assert np.all(np.abs(emp - want) <= bound)
    # the pieces: within an arm sqrt(t_k / t_l), across arms times R_12
    r12 = math.sqrt(2 / 3 * 0.5 / 1.5)
    assert want[0, 4] == pytest.approx(r12 * math.sqrt(0.25 / 0.6), rel=1e-14)
    assert want[1, 2] == pytest.approx(math.sqrt(0.6), rel=1e-14)


# ---------------------------------------------------------------------------------
# One look: Dunnett's fixed-sample test
# ---------------------------------------------------------------------------------

# Dunnett (1955), JASA 50:1096-1121, infinite df, equal allocation, alpha 0.05
# (from memory of the published table, confirmed by computation).
DUNNETT_TWO_SIDED = [(2, 2.212), (3, 2.349), (4, 2.442)]
DUNNETT_ONE_SIDED = [(2, 1.916), (3, 2.062), (4, 2.160)]


@pytest.mark.parametrize("k, value", DUNNETT_TWO_SIDED)
def test_one_look_two_sided_dunnett_1955(k: int, value: float) -> None:
    c = ma.dunnett_bounds([1.0], [0.025], [1.0] * k, sides=2).z[0]
    assert abs(c - value) <= 0.0005


@pytest.mark.parametrize("k, value", DUNNETT_ONE_SIDED)
def test_one_look_one_sided_dunnett_1955(k: int, value: float) -> None:
    c = ma.dunnett_bounds([1.0], [0.05], [1.0] * k, sides=1).z[0]
    assert abs(c - value) <= 0.0005


@pytest.mark.parametrize("k, sides, a", [(2, 2, [1, 1]), (3, 1, [1, 1, 1]),
                                         (4, 2, [1] * 4), (3, 1, [0.5, 1.0, 4.0])])
def test_one_look_against_scipy_multivariate_normal(k: int, sides: int, a: list) -> None:
    # scipy's MVN CDF at the same correlation: the level at the solved boundary is
    # 0.05 to the lattice rule's error (abseps 1e-6) plus the module's (1e-10 at one
    # look, module docstring).
    res = ma.dunnett_bounds([1.0], [0.05 / sides], a, sides=sides)
    assert res.standard_error[0] == 0.0
    level = mvn_cumulative(res.z, np.array([1.0]), a, sides)[0]
    assert abs(level - 0.05) <= 3e-6


@pytest.mark.parametrize("sides", [1, 2])
@pytest.mark.parametrize("a", [[1.0] * 2, [1.0] * 8, [0.5, 1.0, 2.0], [0.1, 10.0, 1.0]])
def test_one_look_against_adaptive_quadrature_of_dunnetts_integral(sides: int,
                                                                   a: list) -> None:
    # Dunnett (1955): P(no comparison crosses) = integral of phi(u) prod_i
    # P(|sqrt(lam_i) u + sqrt(1 - lam_i) X| < c); scipy.integrate.quad (adaptive
    # Gauss-Kronrod, unrelated to the module's trapezoidal rule) at the solved c.
    alpha = 0.05 / sides
    c = ma.dunnett_bounds([1.0], [alpha], a, sides=sides).z[0]
    lam = np.asarray(a) / (1.0 + np.asarray(a))

    def crossing(u: float) -> float:
        hi = (c - np.sqrt(lam) * u) / np.sqrt(1 - lam)
        if sides == 1:
            log_stay = np.sum(special.log_ndtr(hi))
        else:
            lo = (-c - np.sqrt(lam) * u) / np.sqrt(1 - lam)
            with np.errstate(divide="ignore"):  # far out: nobody stays, log 0
                log_stay = np.sum(np.log(special.ndtr(hi) - special.ndtr(lo)))
        return float(-np.expm1(log_stay) * np.exp(-0.5 * u * u) / math.sqrt(2 * math.pi))

    level = integrate.quad(crossing, -12, 12, epsabs=1e-14, epsrel=1e-12, limit=200)[0]
    assert abs(level - 0.05) <= 1e-12


def test_one_look_tiny_alpha_keeps_relative_precision() -> None:
    # Bonferroni's inequality (common practice): alpha <= k P(Z >= c) <= alpha plus
    # the pairwise overlaps, tiny this far out. Tails through ndtr(-c), never 1 - cdf.
    for alpha in (1e-6, 1e-10):
        c = ma.dunnett_bounds([1.0], [alpha], [1.0] * 3).z[0]
        single = 3 * special.ndtr(-c)
        assert alpha <= single <= alpha * (1 + 1e-2)


# ---------------------------------------------------------------------------------
# One arm: the project's two-arm boundaries
# ---------------------------------------------------------------------------------

@pytest.mark.parametrize("sides", [1, 2])
@pytest.mark.parametrize("a", [1.0, 3.0, 0.2])
def test_one_arm_reproduces_two_arm_spending_bounds(sides: int, a: float) -> None:
    # one comparison: its own recursion, whatever the allocation
    t = np.array([0.2, 0.45, 0.7, 1.0])
    cum = OBF(t, 0.025)
    res = ma.dunnett_bounds(t, cum, [a], sides=sides, points=256)
    assert np.allclose(res.z, spending_bounds(t, cum, sides=sides), atol=1e-9, rtol=0)
    assert np.all(res.standard_error < 1e-12)


def test_one_arm_through_the_control_paths_agrees_with_the_recursion() -> None:
    # The conditioning route on its own (no control variate): integrating one arm
    # over the control's paths must give the two-arm recursion's crossings at its
    # boundaries, within the reported error plus the grid's bias.
    t = equal(5)
    cum = POCOCK(t, 0.025)
    c = spending_bounds(t, cum, sides=1)
    run = ma._run(t, ma._groups(np.array([0.5]), np.zeros(1)), 1, "either", None, c,
                  np.zeros(5), 512, 8, 3, ma.DEFAULT_GRID_R, control_variate=False)
    se = np.cumsum(run.by_rep, axis=1).std(axis=0, ddof=1) / math.sqrt(8)
    assert np.all(se[1:] > 0)
    assert np.all(np.abs(np.cumsum(run.prob) - cum) <= QMC_T * se + INNER)


# ---------------------------------------------------------------------------------
# Many looks and arms: against scipy's multivariate normal and plain Monte Carlo
# ---------------------------------------------------------------------------------

MVN_CASES = [
    # (allocations, looks, sides, spending)
    ([1.0, 1.0], equal(3), 1, OBF),
    ([1.0, 1.0, 1.0], np.array([0.3, 1.0]), 2, POCOCK),
    ([2.0, 0.5], np.array([0.2, 0.5, 1.0]), 1, OBF),
    ([1.0, 1.0], equal(2), 2, OBF),
]


@pytest.mark.parametrize("a, t, sides, fn", MVN_CASES)
def test_many_looks_against_scipy_multivariate_normal(a: list, t: np.ndarray, sides: int,
                                                      fn: Spending) -> None:
    # At the solved boundaries the family-wise error spent by each look, from scipy's
    # MVN CDF (abseps 1e-6), equals the spending target within the module's stated
    # accuracy: 4 reported standard errors plus the grid's bias.
    cum = fn(t, 0.025) * sides
    res = ma.dunnett_bounds(t, cum / sides, a, sides=sides)
    ref = mvn_cumulative(res.z, t, a, sides)
    se = res.standard_error
    assert np.allclose(res.family_error, cum, atol=1e-12, rtol=1e-10)
    assert np.all(np.abs(ref - cum) <= QMC_T * se + INNER + 3e-6)


def test_crossing_with_effects_against_scipy_multivariate_normal() -> None:
    # Unequal true effects (some arms better): P(some comparison crosses) from the
    # module against the MVN CDF with those means.
    t = np.array([0.4, 1.0])
    a = [1.0, 1.0, 2.0]
    c = np.array([2.8, 2.1])
    drifts = np.array([0.0, 1.5, 2.5])
    x = ma.multiarm_crossing(c, t, a, drifts)
    ref = mvn_cumulative(c, t, a, 1, drifts)
    assert np.all(np.abs(x.cumulative - ref) <= QMC_T * x.standard_error + INNER + 3e-6)


@pytest.mark.slow
@pytest.mark.parametrize("a, sides", [([1.0] * 4, 1), ([1.0, 1.0, 1.0], 2),
                                      ([2.0, 1.0, 0.5], 1)])
def test_family_wise_error_by_plain_monte_carlo(a: list, sides: int) -> None:
    # K = 5 looks, O'Brien-Fleming-type spending of 0.025 per tail. 400,000 raw-model
    # experiments: |FWER_hat - target| <= 3.29 sqrt(p (1 - p) / n) (about 8.1e-4 at
    # p = 0.025, 1.1e-3 at 0.05) plus 4 reported standard errors of the boundaries'
    # computation.
    t = equal(5)
    target = 0.025 * sides
    res = ma.dunnett_bounds(t, OBF(t, 0.025), a, sides=sides)
    n = 400_000
    p, _ = simulate_raw(res.z, t, a, n, seed=2024 + sides, sides=sides)
    se = res.standard_error[-1]
    assert abs(p - target) <= mc_bound(target, n) + QMC_T * se


def test_unequal_looks_eight_arms_by_plain_monte_carlo() -> None:
    # k = 8, unequal looks, Pocock-type: 200,000 experiments, bound as above.
    t = np.array([0.15, 0.4, 0.55, 1.0])
    a = [1.0] * 8
    res = ma.dunnett_bounds(t, POCOCK(t, 0.025), a, points=1024)
    n = 200_000
    p, _ = simulate_raw(res.z, t, a, n, seed=77)
    se = res.standard_error[-1]
    assert abs(p - 0.025) <= mc_bound(0.025, n) + QMC_T * se


def test_per_comparison_error_is_below_the_family_wise_one() -> None:
    # Each comparison's own error (one-dimensional recursion) at Dunnett's boundaries
    # is below the family's, and above the family's share k of it (Bonferroni).
    t = equal(4)
    a = [1.0, 1.0, 1.0]
    res = ma.dunnett_bounds(t, OBF(t, 0.025), a, points=512)
    x = ma.multiarm_crossing(res.z, t, a, points=512)
    own = x.per_arm.sum(axis=1)
    assert np.all(own < x.cumulative[-1])
    assert np.all(3 * own > x.cumulative[-1])
    one = crossing_probabilities(res.z, None, t).upper.sum()
    assert own[0] == pytest.approx(one, rel=1e-12)
    # the boundaries lie between the per-comparison and Bonferroni ones
    assert np.all(res.z > spending_bounds(t, OBF(t, 0.025)))
    assert np.all(res.z < spending_bounds(t, OBF(t, 0.025) / 3))


# ---------------------------------------------------------------------------------
# Least favourable configurations, futility, power
# ---------------------------------------------------------------------------------

def test_global_null_is_least_favourable() -> None:
    # Under any configuration the family-wise error is the crossing probability of
    # the null comparisons alone (each comparison stops on its own): fewer null
    # arms, or arms worse than control, spend less than all arms null.
    t = equal(4)
    a = [1.0, 2.0, 1.0, 0.5]
    res = ma.dunnett_bounds(t, OBF(t, 0.025), a, points=1024)
    full = ma.multiarm_crossing(res.z, t, a, points=1024)
    se = full.standard_error[-1]
    for keep in ([0, 1, 2], [1, 3], [2]):
        sub = ma.multiarm_crossing(res.z, t, [a[i] for i in keep], points=1024)
        assert sub.cumulative[-1] < full.cumulative[-1] - QMC_T * (se + sub.standard_error[-1])
    worse = ma.multiarm_crossing(res.z, t, a, [0.0, -0.5, -1.0, 0.0], points=1024)
    assert worse.cumulative[-1] < full.cumulative[-1]


@pytest.mark.slow
def test_family_wise_error_with_better_arms_by_plain_monte_carlo() -> None:
    # Two arms truly better (drift 3), two null: rejections of the null comparisons
    # in 300,000 raw-model experiments match the module's value for the null arms
    # alone, which is below alpha.
    t = equal(4)
    a = [1.0, 1.0, 1.0, 1.0]
    res = ma.dunnett_bounds(t, OBF(t, 0.025), a)
    n = 300_000
    p, wins = simulate_raw(res.z, t, a, n, seed=31, effects=[3.0, 3.0, 0.0, 0.0],
                           counted=[False, False, True, True])
    nulls = ma.multiarm_crossing(res.z, t, [1.0, 1.0])
    expect = nulls.cumulative[-1]
    assert expect < 0.025
    assert abs(p - expect) <= mc_bound(expect, n) + QMC_T * nulls.standard_error[-1]
    assert p <= 0.025 + mc_bound(0.025, n)
    # the better arms win as often as a two-arm test with these boundaries
    own = crossing_probabilities(res.z, None, t, 3.0).upper.sum()
    assert np.all(np.abs(wins[:2] - own) <= mc_bound(own, n))


@pytest.mark.slow
def test_binding_futility_by_plain_monte_carlo() -> None:
    # One-sided, comparisons dropped when Z <= 0 at looks 1-3 (binding): the
    # boundaries fall, and the family-wise error with arms dropped is 0.025.
    t = equal(4)
    a = [1.0, 1.0, 1.0]
    fut = np.array([0.0, 0.0, 0.0, -np.inf])
    cum = OBF(t, 0.025)
    free = ma.dunnett_bounds(t, cum, a)
    bound = ma.dunnett_bounds(t, cum, a, futility=fut)
    assert np.all(bound.z[1:] < free.z[1:])
    n = 300_000
    p, _ = simulate_raw(bound.z, t, a, n, seed=8, futility=fut)
    se = bound.standard_error[-1]
    assert abs(p - 0.025) <= mc_bound(0.025, n) + QMC_T * se


def test_two_sided_binding_futility_against_the_recursion_for_one_arm() -> None:
    # one arm, inner futility band |Z| < 0.5 at the first two looks: the project's
    # two-arm solver with the same binding boundary
    t = equal(3)
    cum = OBF(t, 0.025)
    fut = np.array([0.5, 0.5, 0.0])
    res = ma.dunnett_bounds(t, cum, [1.0], sides=2, futility=fut, points=256)
    assert np.allclose(res.z, spending_bounds(t, cum, sides=2, futility=fut), atol=1e-9)


def test_comparison_drift_matches_two_arm_plan() -> None:
    # One comparison's power is that of a two-arm test with the same boundaries: the
    # project's plan (two-sided 0.05, power 0.9, 5 looks) has the same drift.
    plan = design(alpha=0.05, sides=2, power=0.9, looks=5)
    eta = ma.comparison_drift(plan.efficacy_z, equal(5), 0.9, sides=2)
    assert eta == pytest.approx(plan.drift, abs=1e-6)


@pytest.mark.slow
def test_power_of_each_comparison_and_of_any_by_plain_monte_carlo() -> None:
    # k = 4, 5 looks: at the drift for 90 % power of each comparison, every arm wins
    # 90 % of 200,000 raw-model experiments; at the drift for 90 % power of at least
    # one, some arm wins 90 % of them (bound 3.29 sqrt(0.09 / n) = 2.2e-3, plus the
    # quasi-Monte Carlo error of the drift's computation).
    t = equal(5)
    a = [1.0] * 4
    res = ma.dunnett_bounds(t, OBF(t, 0.025), a)
    each = ma.comparison_drift(res.z, t, 0.9)
    anyone = ma.any_arm_drift(res.z, t, a, 0.9)
    assert anyone < each
    n = 200_000
    _, wins = simulate_raw(res.z, t, a, n, seed=90, effects=[each] * 4)
    assert np.all(np.abs(wins - 0.9) <= mc_bound(0.9, n))
    p, _ = simulate_raw(res.z, t, a, n, seed=91, effects=[anyone] * 4)
    x = ma.multiarm_crossing(res.z, t, a, [anyone] * 4)
    assert abs(x.cumulative[-1] - 0.9) <= QMC_T * x.standard_error[-1] + 1e-6
    assert abs(p - 0.9) <= mc_bound(0.9, n) + QMC_T * x.standard_error[-1]


# ---------------------------------------------------------------------------------
# Reproducibility, monitoring, the rule of the control increment, input checks
# ---------------------------------------------------------------------------------

def test_same_inputs_same_bits_and_seeds_agree_within_error() -> None:
    t = equal(3)
    cum = OBF(t, 0.025)
    one = ma.dunnett_bounds(t, cum, [1.0, 1.0, 1.0], points=512)
    two = ma.dunnett_bounds(t, cum, [1.0, 1.0, 1.0], points=512)
    assert np.array_equal(one.z, two.z)
    other = ma.dunnett_bounds(t, cum, [1.0, 1.0, 1.0], points=512, seed=7)
    assert np.all(np.abs(other.z - one.z) <= QMC_T * np.hypot(one.z_error, other.z_error)
                  + 1e-9)


def test_accuracy_asks_for_more_paths_until_reached() -> None:
    t = equal(3)
    res = ma.dunnett_bounds(t, OBF(t, 0.025), [1.0, 1.0, 1.0], accuracy=1e-5, points=128)
    assert res.standard_error[-1] <= 1e-5
    assert res.paths > 128 * ma.DEFAULT_REPLICATES


def test_monitoring_recomputes_one_look_at_a_time() -> None:
    # At look 3 of a 5-look design, with the first two boundaries kept and the same
    # fractions, the third boundary is the design's (same control paths; only the
    # grid of the last look may differ, by the grid's accuracy).
    t = equal(5)
    cum = OBF(t, 0.025)
    full = ma.dunnett_bounds(t, cum, [1.0] * 3, points=512)
    now = ma.dunnett_bounds(t[:3], cum[:3], [1.0] * 3, previous=full.z[:2], points=512)
    assert np.array_equal(now.z[:2], full.z[:2])
    assert now.z[2] == pytest.approx(full.z[2], abs=1e-5)


def test_rule_for_the_control_increment_is_fine_enough(monkeypatch: pytest.MonkeyPatch
                                                      ) -> None:
    # The Gauss-Hermite rule over each look's own control increment against one with
    # four times the nodes, at allocation 9 (sharp in the control): the difference
    # is far below the reported standard error.
    t = equal(3)
    a = [9.0, 9.0]
    c = ma.dunnett_bounds(t, OBF(t, 0.025), a, points=256).z
    base = ma.multiarm_crossing(c, t, a, points=256)
    rule = ma._rule_nodes
    monkeypatch.setattr(ma, "_rule_nodes", lambda lam: 4 * rule(lam))
    fine = ma.multiarm_crossing(c, t, a, points=256)
    assert np.all(np.abs(base.first - fine.first) <= 0.1 * base.standard_error[-1])


def test_grid_size_changes_little() -> None:
    # the arms' recursion at the default grid against a grid twice as fine, with the
    # same control paths: within the stated bias (module docstring)
    t = equal(4)
    a = [1.0, 1.0, 1.0]
    c = ma.dunnett_bounds(t, POCOCK(t, 0.025), a, points=256).z
    base = ma.multiarm_crossing(c, t, a, points=256)
    fine = ma.multiarm_crossing(c, t, a, points=256, r=24)
    assert np.all(np.abs(base.cumulative - fine.cumulative) <= INNER)


@pytest.mark.parametrize("kwargs, name", [
    ({"fractions": [0.5, 0.4]}, "fractions"),
    ({"fractions": []}, "fractions"),
    ({"fractions": list(np.linspace(0.01, 1, 51))}, "fractions"),
    ({"allocations": []}, "allocations"),
    ({"allocations": [1.0] * 9}, "allocations"),
    ({"allocations": [1.0, 0.0]}, "allocations"),
    ({"allocations": [1.0, float("nan")]}, "allocations"),
    ({"cumulative_alpha": [0.02, 0.01]}, "cumulative_alpha"),
    ({"cumulative_alpha": [0.01]}, "cumulative_alpha"),
    ({"sides": 3}, "sides"),
    ({"points": 1000}, "points"),
    ({"replicates": 1}, "replicates"),
    ({"previous": [2.0, 2.0]}, "previous"),
    ({"accuracy": 0.0}, "accuracy"),
    ({"futility": [0.0]}, "futility"),
])
def test_refused_arguments_name_themselves(kwargs: dict, name: str) -> None:
    args: dict[str, Any] = {"fractions": [0.5, 1.0], "cumulative_alpha": [0.005, 0.025],
                            "allocations": [1.0, 1.0]}
    args.update(kwargs)
    fractions = args.pop("fractions")
    cum = args.pop("cumulative_alpha")
    alloc = args.pop("allocations")
    with pytest.raises(InputError, match=rf"^{name}: got .*; allowed is"):
        ma.dunnett_bounds(fractions, cum, alloc, **args)


def test_refused_arguments_of_the_other_doors() -> None:
    with pytest.raises(InputError, match=r"^drifts: got"):
        ma.multiarm_crossing([2.0, 2.0], [0.5, 1.0], [1.0, 1.0], [1.0])
    with pytest.raises(InputError, match=r"^bounds: got"):
        ma.multiarm_crossing([-1.0, 2.0], [0.5, 1.0], [1.0, 1.0], sides=2)
    with pytest.raises(InputError, match=r"^count: got"):
        ma.multiarm_crossing([2.0, 2.0], [0.5, 1.0], [1.0, 1.0], sides=2, count="lower")
    with pytest.raises(InputError, match=r"^power: got"):
        ma.comparison_drift([2.0, 2.0], [0.5, 1.0], 1.0)
    with pytest.raises(InputError, match=r"^pattern: got"):
        ma.any_arm_drift([2.0, 2.0], [0.5, 1.0], [1.0, 1.0], 0.9, pattern=[0.0, -1.0])
