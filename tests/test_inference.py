"""Tests for seqtest.inference: stage-wise ordering, repeated intervals, conditional power.

Outside references used here:

- the canonical joint distribution of group-sequential z statistics,
  ``Z_k ~ N(theta sqrt(I_k), 1)``, ``Corr(Z_j, Z_k) = sqrt(I_j / I_k)`` (Jennison and
  Turnbull 2000, section 3.1), integrated with ``scipy.stats.multivariate_normal``
  (Genz's quasi-Monte Carlo method, a different method from the engine's recursion);
- the definition of the stage-wise ordering p-value, interval and median-unbiased
  estimate (Tsiatis, Rosner and Mehta 1984; Jennison and Turnbull 2000, section 8.4);
- repeated confidence intervals ``estimate +- c_k se_k`` that hold their level over
  all looks at once (Jennison and Turnbull 1989);
- conditional power from the independent increments of the score (Lan and Wittes
  1988, the B-value; from memory), evaluated with ``scipy.stats.norm`` and
  ``scipy.stats.multivariate_normal``;
- fixed-sample z tests and intervals from ``scipy.stats.norm``.

Monte Carlo checks use fixed seeds; every acceptance region is an exact binomial
region computed with ``scipy.stats.binom`` at the stated level.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

import seqtest
from seqtest.core.region import Region, first_stop
from seqtest.monitoring import inference
from seqtest.monitoring.rules import GroupSequentialRule


def region(upper, lower, sides):
    """The continuation region with these efficacy exits (no futility)."""
    up = np.asarray(upper, float)
    lo = np.full(up.shape, -np.inf) if lower is None else np.asarray(lower, float)
    return Region(up, lo, None, sides == 2)


def decide(z, a, b, sides):
    reg = Region.of_plan(sides, np.broadcast_to(a, np.shape(z)), None)
    return first_stop(reg.classify(z))

# Requested absolute accuracy of the multivariate normal integration (Genz); the
# engine's own accuracy is about 1e-7 on probabilities (seqtest.boundaries).
MVN_ABSEPS = 1e-7
PROB_TOL = 5 * MVN_ABSEPS


def _corr(info: np.ndarray) -> np.ndarray:
    """Canonical correlation sqrt(I_j / I_k), j <= k (Jennison and Turnbull 2000, 3.1)."""
    i = np.asarray(info, float)
    return np.sqrt(np.minimum.outer(i, i) / np.maximum.outer(i, i))


def mvn_box(info, lo, hi, theta: float = 0.0) -> float:
    """P(lo_k < Z_k < hi_k for all k) under the canonical distribution, by
    scipy.stats.multivariate_normal (Genz), seeded."""
    i = np.asarray(info, float)
    lo = np.asarray(lo, float)
    hi = np.asarray(hi, float)
    if i.size == 1:
        m = theta * math.sqrt(i[0])
        return float(stats.norm.cdf(hi[0] - m) - stats.norm.cdf(lo[0] - m))
    dist = stats.multivariate_normal(theta * np.sqrt(i), _corr(i), seed=12345,
                                     abseps=MVN_ABSEPS, releps=0.0, maxpts=1_000_000 * i.size)
    return float(dist.cdf(hi, lower_limit=lo))


def mvn_stagewise_upper(theta, z, info, upper, lower) -> float:
    """Stage-wise ordering, upward: P_theta(exit through the upper boundary before the
    stopping look T, or reach T with Z_T >= z_T), by definition (Tsiatis, Rosner and
    Mehta 1984), each term a multivariate normal box."""
    t_stop = len(z)
    p = 0.0
    for j in range(t_stop):
        exit_at = upper[j] if j < t_stop - 1 else z[-1]
        lo = list(lower[:j]) + [exit_at]
        hi = list(upper[:j]) + [np.inf]
        p += mvn_box(info[: j + 1], lo, hi, theta)
    return p


def mvn_stagewise_lower(theta, z, info, upper, lower) -> float:
    """Stage-wise ordering, downward (mirror image of :func:`mvn_stagewise_upper`)."""
    t_stop = len(z)
    p = 0.0
    for j in range(t_stop):
        exit_at = lower[j] if j < t_stop - 1 else z[-1]
        lo = list(lower[:j]) + [-np.inf]
        hi = list(upper[:j]) + [exit_at]
        p += mvn_box(info[: j + 1], lo, hi, theta)
    return p


def binom_region(n: int, p: float, level: float = 0.999) -> tuple[float, float]:
    """Two-sided exact binomial acceptance region for a proportion, as fractions."""
    lo, hi = stats.binom.interval(level, n, p)
    return lo / n, hi / n


# ---------------------------------------------------------------------------
# One look: the fixed-sample z test
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("z", [-3.1, -0.4, 0.0, 1.2, 2.5, 6.0])
@pytest.mark.parametrize("sides", [1, 2])
def test_stagewise_one_look_is_the_fixed_sample_z_test(z, sides):
    # Source: fixed-sample z test and Wald interval (scipy.stats.norm); with one look
    # the stage-wise ordering is the ordering by Z itself.
    info = 250.0
    se = 1 / math.sqrt(info)
    est = z * se
    r = inference.stagewise([z], [info], region([1.96], [-1.96] if sides == 2 else None, sides),
                            alpha=0.05, sides=sides)
    p_ref = 2 * stats.norm.sf(abs(z)) if sides == 2 else stats.norm.sf(z)
    assert r.p_value == pytest.approx(p_ref, rel=1e-6, abs=1e-12)
    q = stats.norm.isf(0.025 if sides == 2 else 0.05)
    # root finding to 1e-10 se; integration error ~1e-7 in probability, i.e. about
    # 1e-7 / phi(1.96) ~ 2e-6 se on the limits
    assert r.ci_lower == pytest.approx(est - q * se, abs=1e-5 * se)
    if sides == 2:
        assert r.ci_upper == pytest.approx(est + q * se, abs=1e-5 * se)
    else:
        assert r.ci_upper == math.inf
    assert r.median_unbiased == pytest.approx(est, abs=1e-5 * se)


# ---------------------------------------------------------------------------
# Several looks: the stage-wise ordering by its definition
# ---------------------------------------------------------------------------

STAGEWISE_CASES = [
    # two-sided O'Brien-Fleming-type plan monitored at unplanned fractions,
    # stopped upward at look 3
    dict(sides=2, frac=[0.15, 0.45, 0.62], z=[0.8, 1.9, 2.9], imax=400.0),
    # stopped downward at look 2
    dict(sides=2, frac=[0.3, 0.5], z=[-1.2, -3.4], imax=1000.0),
    # reached the final look without crossing (complete, not significant)
    dict(sides=2, frac=[0.2, 0.4, 0.7, 1.0], z=[0.3, 1.1, 1.4, 1.7], imax=90.0),
    # one-sided, stopped at look 2
    dict(sides=1, frac=[0.25, 0.55], z=[1.0, 3.1], imax=300.0),
]


@pytest.mark.parametrize("case", STAGEWISE_CASES)
def test_stagewise_matches_its_definition_by_multivariate_normal(case):
    # Source: Tsiatis, Rosner and Mehta (1984) definition of the stage-wise ordering,
    # each probability computed independently with scipy.stats.multivariate_normal.
    sides = case["sides"]
    alpha = 0.05 if sides == 2 else 0.025
    plan = seqtest.design(alpha=alpha, sides=sides, power=0.9, looks=5)
    t = np.array(case["frac"])
    final = t[-1] >= 1
    a, _ = GroupSequentialRule(plan).boundaries(t, final=final)
    lower = -a if sides == 2 else np.full(t.size, -np.inf)
    info = t * case["imax"]
    z = np.array(case["z"])
    r = inference.stagewise(z, info, region(a, lower, sides), alpha=alpha, sides=sides)

    p_up = mvn_stagewise_upper(0.0, z, info, a, lower)
    if sides == 2:
        p_lo = mvn_stagewise_lower(0.0, z, info, a, lower)
        assert r.p_value == pytest.approx(min(1.0, 2 * min(p_up, p_lo)), abs=2 * PROB_TOL)
    else:
        assert r.p_value == pytest.approx(p_up, abs=PROB_TOL)

    # The interval limits and the median-unbiased estimate solve the defining
    # equations: P_lo(up) = alpha/2, P_hi(down) = alpha/2, P_mue(up) = 1/2.
    a_tail = alpha / 2 if sides == 2 else alpha
    assert mvn_stagewise_upper(r.ci_lower, z, info, a, lower) == pytest.approx(
        a_tail, abs=PROB_TOL)
    assert mvn_stagewise_upper(r.median_unbiased, z, info, a, lower) == pytest.approx(
        0.5, abs=PROB_TOL)
    if sides == 2:
        assert mvn_stagewise_lower(r.ci_upper, z, info, a, lower) == pytest.approx(
            a_tail, abs=PROB_TOL)
        assert r.ci_lower < r.median_unbiased < r.ci_upper
    else:
        assert r.ci_upper == math.inf


def test_stagewise_refuses_mismatched_lengths():
    # common practice: inputs validated at the public boundary
    with pytest.raises(ValueError, match="one value per look"):
        inference.stagewise([1.0, 2.0], [10.0], region([3.0, 2.0], None, 1))


# ---------------------------------------------------------------------------
# Simulation: median-unbiased estimate and stage-wise interval coverage
# ---------------------------------------------------------------------------

def _brownian_z(rng, n, t, drift):
    """Canonical z paths: S(t) Brownian motion with drift (Jennison and Turnbull 2000,
    3.1), Z_k = S(t_k) / sqrt(t_k)."""
    inc = np.diff(np.concatenate([[0.0], t]))
    s = np.cumsum(rng.standard_normal((n, t.size)) * np.sqrt(inc) + drift * inc, axis=1)
    return s / np.sqrt(t)


SIM_CASES = [
    # Pocock-type, 4 looks, two-sided, at the design alternative: many early stops,
    # where the naive estimate is biased upward.
    dict(id="pocock2", sides=2, spending="pocock-type", looks=4, frac=None,
         effect=1.0, reps=700, seed=20261202),
    # O'Brien-Fleming-type, one-sided, looks at unplanned fractions, half the design
    # effect.
    dict(id="obf1-unplanned", sides=1, spending="obrien-fleming-type", looks=5,
         frac=[0.3, 0.45, 0.8, 1.0], effect=0.5, reps=300, seed=7),
]


@pytest.mark.slow
@pytest.mark.parametrize("case", SIM_CASES, ids=[c["id"] for c in SIM_CASES])
def test_median_unbiased_and_stagewise_coverage_by_simulation(case):
    # Source: Jennison and Turnbull (2000), section 8.4: the stage-wise median-unbiased
    # estimate has P(MUE < theta) = 1/2 and the stage-wise interval has exact coverage
    # 1 - alpha. Monte Carlo error: count ~ Binomial(reps, p); the acceptance region
    # is the exact two-sided 99.9% binomial region (scipy.stats.binom.interval).
    sides = case["sides"]
    alpha = 0.05 if sides == 2 else 0.025
    plan = seqtest.design(alpha=alpha, sides=sides, power=0.9, looks=case["looks"],
                          efficacy=case["spending"])
    t = plan.info_fractions if case["frac"] is None else np.array(case["frac"])
    a, _ = GroupSequentialRule(plan).boundaries(t, final=True)
    lower = -a if sides == 2 else np.full(t.size, -np.inf)
    i_max = 250.0                      # information at fraction 1 (any value works)
    theta = case["effect"] * plan.drift / math.sqrt(i_max)   # effect in estimate units
    rng = np.random.default_rng(case["seed"])
    n = case["reps"]
    z = _brownian_z(rng, n, t, theta * math.sqrt(i_max))
    stop, _ = decide(z, a, None, sides)
    info = t * i_max
    below = covered = naive_below = 0
    for i in range(n):
        k = int(stop[i]) + 1
        r = inference.stagewise(z[i, :k], info[:k], region(a[:k], lower[:k], sides),
                                alpha=alpha, sides=sides)
        below += r.median_unbiased < theta
        covered += r.ci_lower <= theta <= r.ci_upper
        naive_below += z[i, k - 1] / math.sqrt(info[k - 1]) < theta
    lo, hi = binom_region(n, 0.5)
    assert lo <= below / n <= hi, (below / n, lo, hi)
    lo, hi = binom_region(n, 1 - alpha)
    assert lo <= covered / n <= hi, (covered / n, lo, hi)
    if case["id"] == "pocock2":
        # Sensitivity: the same check rejects the naive (fixed-sample) estimate, which
        # is biased away from zero after early stops, so the check above can fail.
        lo, hi = binom_region(n, 0.5)
        assert not lo <= naive_below / n <= hi, naive_below / n


# ---------------------------------------------------------------------------
# Repeated confidence intervals
# ---------------------------------------------------------------------------

def test_repeated_ci_is_estimate_plus_minus_boundary_times_se():
    # Source: Jennison and Turnbull (1989): RCI_k = estimate_k +- c_k se_k.
    est = np.array([0.1, -0.2, 0.05])
    se = np.array([0.2, 0.1, 0.05])
    c = np.array([4.0, 2.9, 2.1])
    lo, hi = inference.repeated_ci(est, se, c, 2)
    np.testing.assert_allclose(lo, est - c * se, rtol=1e-15)
    np.testing.assert_allclose(hi, est + c * se, rtol=1e-15)
    lo, hi = inference.repeated_ci(est, se, c, 1)
    np.testing.assert_allclose(lo, est - c * se, rtol=1e-15)
    assert np.all(np.isinf(hi))


RCI_CASES = [
    dict(sides=2, spending="obrien-fleming-type", frac=[0.2, 0.4, 0.6, 0.8, 1.0], seed=1),
    dict(sides=2, spending="pocock-type", frac=[0.1, 0.35, 0.5, 0.9, 1.0], seed=2),
    dict(sides=1, spending="obrien-fleming-type", frac=[0.15, 0.3, 0.55, 0.7, 1.12], seed=3),
]


@pytest.mark.parametrize("case", RCI_CASES)
@pytest.mark.parametrize("effect", [0.0, 1.0])
def test_repeated_ci_simultaneous_coverage_by_simulation(case, effect):
    # Source: Jennison and Turnbull (1989): the repeated intervals cover theta at all
    # looks simultaneously with probability >= 1 - alpha (exactly 1 - alpha when the
    # boundaries spend exactly alpha, as error-spending boundaries on the observed
    # fractions do), whatever theta and whatever the stopping rule.
    # Monte Carlo error: covered ~ Binomial(20000, 1 - alpha); we require the count to
    # lie in the exact 99.9% binomial region (its lower end is the ">= level" claim,
    # its upper end catches intervals that are needlessly wide).
    sides = case["sides"]
    alpha = 0.05 if sides == 2 else 0.025
    plan = seqtest.design(alpha=alpha, sides=sides, power=0.9, looks=5,
                          efficacy=case["spending"])
    t = np.array(case["frac"])
    a, _ = GroupSequentialRule(plan).boundaries(t, final=True)
    i_max = 120.0
    theta = effect * plan.drift / math.sqrt(i_max)
    rng = np.random.default_rng(case["seed"])
    n = 20_000
    z = _brownian_z(rng, n, t, theta * math.sqrt(i_max))
    info = t * i_max
    se = 1 / np.sqrt(info)
    lo, hi = inference.repeated_ci(z * se, se, a, sides)
    covered = np.all((lo <= theta) & (theta <= hi), axis=1).mean()
    r_lo, r_hi = binom_region(n, 1 - alpha)
    assert r_lo <= covered <= r_hi, (covered, r_lo, r_hi)


# ---------------------------------------------------------------------------
# Conditional power
# ---------------------------------------------------------------------------

def _cp_one_look_left(z_now, t_now, a_final, drift, sides):
    """Closed form with one look left at fraction 1: S(1) = z sqrt(t) + drift (1 - t)
    + N(0, 1 - t), and Z(1) = S(1) (Lan and Wittes 1988, B-value; from memory)."""
    mean = z_now * math.sqrt(t_now) + drift * (1 - t_now)
    sd = math.sqrt(1 - t_now)
    p = stats.norm.sf((a_final - mean) / sd)
    if sides == 2:
        p += stats.norm.cdf((-a_final - mean) / sd)
    return p


@pytest.mark.parametrize("sides", [1, 2])
@pytest.mark.parametrize("z_now, t_now, drift", [
    (1.0, 0.5, 3.24), (2.2, 0.8, 3.24), (-0.5, 0.3, 1.0), (0.0, 0.6, 0.0), (-2.0, 0.5, -3.0),
])
def test_conditional_power_one_look_left_closed_form(sides, z_now, t_now, drift):
    a_final = 1.98
    cp = inference.conditional_power(z_now, t_now, [1.0], [a_final], drift, sides=sides)
    ref = _cp_one_look_left(z_now, t_now, a_final, drift, sides)
    assert cp == pytest.approx(ref, abs=1e-9)


def _cp_mvn(z_now, t_now, tf, af, drift, sides):
    """P(cross at a later look | Z(t_now) = z_now) = 1 - P(no crossing), the future
    Z_j being jointly normal given S(t_now): mean (s + drift (t_j - t)) / sqrt(t_j),
    Cov(Z_i, Z_j) = (min(t_i, t_j) - t) / sqrt(t_i t_j) (independent increments)."""
    tf = np.asarray(tf, float)
    af = np.asarray(af, float)
    s = z_now * math.sqrt(t_now)
    mean = (s + drift * (tf - t_now)) / np.sqrt(tf)
    cov = (np.minimum.outer(tf, tf) - t_now) / np.sqrt(np.outer(tf, tf))
    lo = -af if sides == 2 else np.full(tf.size, -np.inf)
    dist = stats.multivariate_normal(mean, cov, seed=99, abseps=MVN_ABSEPS, releps=0.0,
                                     maxpts=1_000_000 * tf.size)
    return 1.0 - float(dist.cdf(af, lower_limit=lo))


@pytest.mark.parametrize("sides", [1, 2])
@pytest.mark.parametrize("z_now, drift", [(0.8, 3.24), (1.5, 1.5), (-0.7, 3.24)])
def test_conditional_power_several_looks_against_multivariate_normal(sides, z_now, drift):
    # Source: independent increments of the score (Jennison and Turnbull 2000, 3.1),
    # integrated with scipy.stats.multivariate_normal.
    alpha = 0.05 if sides == 2 else 0.025
    plan = seqtest.design(alpha=alpha, sides=sides, power=0.9, looks=5)
    t = plan.info_fractions
    a = plan.efficacy_z
    cp = inference.conditional_power(z_now, t[1], t[2:], a[2:], drift, sides=sides)
    ref = _cp_mvn(z_now, t[1], t[2:], a[2:], drift, sides)
    assert cp == pytest.approx(ref, abs=PROB_TOL)


def test_conditional_power_is_a_probability_and_grows_with_the_drift():
    # common practice: conditional power is a probability and, for a one-sided test,
    # larger under a larger assumed effect (drifts from the null to twice the design)
    plan = seqtest.design(alpha=0.025, sides=1, power=0.9, looks=5)
    t, a = plan.info_fractions, plan.efficacy_z
    drifts = [-2.0, 0.0, 1.0, 2.0, plan.drift, 1.5 * plan.drift, 2 * plan.drift]
    cps = np.array([inference.conditional_power(0.5, t[1], t[2:], a[2:], d, sides=1)
                    for d in drifts])
    assert np.all((cps >= 0) & (cps <= 1))
    assert np.all(np.diff(cps) > 0)
    # extremes stay in [0, 1]
    assert 0.0 <= inference.conditional_power(40.0, 0.5, [1.0], [2.0], 50.0, sides=2) <= 1.0
    assert 0.0 <= inference.conditional_power(-40.0, 0.5, [1.0], [2.0], -50.0, sides=1) <= 1.0
    assert inference.conditional_power(1.0, 0.5, [], [], 3.0) == 0.0


@pytest.mark.parametrize("z_now", [0.5, -1.0, -2.5])
def test_conditional_power_accuracy_when_the_data_disagree_with_the_drift(z_now):
    # Source: scipy.stats.multivariate_normal on the conditional joint distribution
    # (as above). inference documents ~1e-7 accuracy on probabilities; the tolerance
    # is that plus the requested integration error. The drifts go up to about three
    # times the design drift, where the current z is far from the drift's path.
    plan = seqtest.design(alpha=0.025, sides=1, power=0.9, looks=5)
    t, a = plan.info_fractions, plan.efficacy_z
    worst = 0.0
    for d in [6.0, 8.0, 10.0]:
        cp = inference.conditional_power(z_now, t[1], t[2:], a[2:], d, sides=1)
        worst = max(worst, abs(cp - _cp_mvn(z_now, t[1], t[2:], a[2:], d, 1)))
    assert worst <= PROB_TOL + 1e-7, worst


def test_naive_ci_is_the_fixed_sample_interval():
    # Source: Wald interval estimate +- z_{1-alpha/2} se (scipy.stats.norm)
    lo, hi = inference.naive_ci(0.3, 0.1, 0.05, 2)
    assert lo == pytest.approx(0.3 - stats.norm.isf(0.025) * 0.1, rel=1e-12)
    assert hi == pytest.approx(0.3 + stats.norm.isf(0.025) * 0.1, rel=1e-12)
    lo, hi = inference.naive_ci(0.3, 0.1, 0.05, 1)
    assert lo == pytest.approx(0.3 - stats.norm.isf(0.05) * 0.1, rel=1e-12)
    assert hi == math.inf
