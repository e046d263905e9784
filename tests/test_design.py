"""Tests for seqtest.design: plans, their operating characteristics and documents.

Outside sources: the published inflation factors in REFERENCES.md, the normal
distribution (scipy.stats.norm) for the first look, scipy.stats.multivariate_normal
on the canonical joint distribution of the z statistics (Jennison & Turnbull 2000,
section 3.1), and Monte Carlo simulation of Brownian motion with error bounds
computed in the comments.
"""

from __future__ import annotations

import itertools
import json
import math

import numpy as np
import pytest
from scipy import stats

import seqtest
from seqtest import spending
from seqtest.core import classical
from seqtest.core.recursion import crossing_probabilities
from seqtest.planning.design import Plan, design

Z975 = stats.norm.isf(0.025)


def null_exits(plan: Plan, with_futility: bool) -> np.ndarray:
    """Per-look null probabilities of rejecting (either tail for two-sided plans),
    computed with the forward recursion from the plan's boundaries alone."""
    t, u = plan.info_fractions, plan.efficacy_z
    lower = -u if plan.sides == 2 else None
    il = iu = None
    if with_futility and plan.futility_z is not None:
        if plan.sides == 1:
            lower = np.minimum(plan.futility_z, u)
        else:
            w = np.clip(plan.futility_z, 0, u)
            il, iu = -w, w
    cr = crossing_probabilities(u, lower, t, 0.0, inner_lower=il, inner_upper=iu)
    return cr.upper + (cr.lower if plan.sides == 2 else 0.0)


# ---------------------------------------------------------------------------
# scipy's multivariate normal CDF (independent of the recursion)
# ---------------------------------------------------------------------------

# scipy refines its randomised lattice rule until its error estimate (3 standard
# errors over 10 batches) is below abseps; a sum of n boxes is then within
# n * abseps at 3 SE. Tolerances below use 2 n abseps (6 SE) plus the engine's
# stated accuracy of 1e-7 (seqtest.boundaries module docstring).
MVN_ABSEPS = 1e-7


def mvn_upper_power(plan: Plan, effect: float) -> tuple[float, float]:
    """P(reject in the positive direction) by scipy's MVN CDF, and its tolerance."""
    t = plan.info_fractions
    theta = effect * plan.drift
    cov = np.sqrt(np.minimum.outer(t, t) / np.maximum.outer(t, t))
    mean = theta * np.sqrt(t)
    u = plan.efficacy_z
    conts = []
    for j in range(t.size):
        lo = -u[j] if plan.sides == 2 else -np.inf
        if plan.futility_z is None:
            conts.append([(lo, u[j])])
        elif plan.sides == 1:
            conts.append([(min(plan.futility_z[j], u[j]), u[j])])
        else:
            b = min(max(plan.futility_z[j], 0.0), u[j])
            conts.append([(lo, -b), (b, u[j])] if b > 0 else [(lo, u[j])])
    total, boxes = 0.0, 0
    for k in range(t.size):
        for combo in itertools.product(*conts[:k], [(u[k], np.inf)]):
            lo = np.array([c[0] for c in combo])
            hi = np.array([c[1] for c in combo])
            if np.any(lo >= hi):
                continue
            total += float(stats.multivariate_normal.cdf(
                hi, mean=mean[:k + 1], cov=cov[:k + 1, :k + 1], lower_limit=lo,
                abseps=MVN_ABSEPS, releps=0.0, rng=np.random.default_rng(k)))
            boxes += 1
    return total, 2 * boxes * MVN_ABSEPS + 1e-7


# ---------------------------------------------------------------------------
# Public contract (DESIGN.md)
# ---------------------------------------------------------------------------

def test_public_contract():
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=5,
                          efficacy=seqtest.spending.obrien_fleming(), futility=None,
                          binding=False)
    assert isinstance(plan, Plan)
    assert isinstance(plan.efficacy_z, np.ndarray) and plan.efficacy_z.shape == (5,)
    assert plan.futility_z is None
    assert isinstance(plan.info_fractions, np.ndarray)
    np.testing.assert_allclose(plan.info_fractions, [0.2, 0.4, 0.6, 0.8, 1.0])
    assert isinstance(plan.inflation, float) and plan.inflation > 1.0
    with_fut = seqtest.design(looks=3, futility=seqtest.spending.pocock())
    assert isinstance(with_fut.futility_z, np.ndarray) and with_fut.futility_z.shape == (3,)
    # defaults: two-sided 0.05, power 0.9, five looks, O'Brien-Fleming-type spending
    default = seqtest.design()
    np.testing.assert_array_equal(default.efficacy_z, plan.efficacy_z)
    assert default.alpha == 0.05 and default.sides == 2 and default.power == 0.9


def test_info_fractions_and_looks_together():
    a = design(looks=3, info_fractions=[0.3, 0.6, 1.0])
    b = design(info_fractions=[0.3, 0.6, 1.0])
    np.testing.assert_array_equal(a.efficacy_z, b.efficacy_z)
    assert a.looks == 3


# ---------------------------------------------------------------------------
# Inflation factors (REFERENCES.md)
# ---------------------------------------------------------------------------

# Jennison & Turnbull (2000) Tables 2.2 (Pocock, R_P) and 2.4 (O'Brien-Fleming,
# R_B): alpha 0.05 two-sided, power 0.90, K = 5: 1.207 and 1.026 (from memory).
# REFERENCES.md notes that its own computation gave 1.206 for Pocock; the value
# is 1.20660 (this engine, and an independent solve with scipy's MVN CDF gives
# 1.206603), so 1.206 was the truncation and the published 1.207 is the correct
# rounding to 3 decimals. The test checks the computed value to 3 decimals,
# which is the published one; test_inflation_power_by_mvn pins it further.
INFLATION = [
    pytest.param("pocock", 1.207, id="JT2000-Table2.2-Pocock-K5"),
    pytest.param("obrien-fleming", 1.026, id="JT2000-Table2.4-OBrienFleming-K5"),
]


@pytest.mark.parametrize("efficacy, ref", INFLATION)
def test_inflation_factor(efficacy, ref):
    plan = design(alpha=0.05, sides=2, power=0.9, looks=5, efficacy=efficacy)
    assert abs(plan.inflation - ref) <= 0.0005 + 1e-12, plan.inflation
    # definition: (drift / fixed drift)^2, fixed drift z_{0.975} + z_{0.9}
    fixed = stats.norm.isf(0.025) + stats.norm.isf(0.1)
    assert plan.fixed_drift == pytest.approx(fixed, rel=1e-14)
    assert plan.inflation == pytest.approx((plan.drift / fixed) ** 2, rel=1e-14)


@pytest.mark.parametrize("efficacy", ["pocock", "obrien-fleming"])
def test_inflation_power_by_mvn(efficacy):
    # The plan's drift gives power 0.9 by scipy's MVN CDF. The power changes by
    # about 0.17 per unit of drift there, so an error of e in power is an error of
    # about 2 e / (0.17 * 3.24) < 4 e in the inflation factor: the MVN tolerance
    # (~1e-6) pins the inflation far below the 3rd decimal.
    plan = design(alpha=0.05, sides=2, power=0.9, looks=5, efficacy=efficacy)
    p, tol = mvn_upper_power(plan, 1.0)
    assert p == pytest.approx(0.9, abs=tol)


# ---------------------------------------------------------------------------
# Type I error and power, 1 to 50 looks
# ---------------------------------------------------------------------------

EFFICACY = [
    pytest.param(spending.obrien_fleming(), id="obf-type"),
    pytest.param(spending.pocock(), id="pocock-type"),
    pytest.param(spending.hwang_shih_decani(-4), id="hsd-4"),
    pytest.param("pocock", id="pocock-classical"),
]


@pytest.mark.parametrize("efficacy", EFFICACY)
@pytest.mark.parametrize("sides", [1, 2])
@pytest.mark.parametrize("looks", [1, 2, 3, 7, 20, 50])
def test_alpha_and_power_are_exact(looks, sides, efficacy):
    alpha = 0.05 if sides == 2 else 0.025
    plan = design(alpha=alpha, sides=sides, power=0.8, looks=looks, efficacy=efficacy)
    exits = null_exits(plan, with_futility=False)
    assert exits.sum() == pytest.approx(alpha, abs=1e-10)
    if isinstance(efficacy, spending.SpendingFunction):
        # the cumulative error spent is the spending function at each look
        # (Lan & DeMets 1983)
        t = plan.info_fractions
        np.testing.assert_allclose(np.cumsum(exits), sides * efficacy(t, alpha / sides),
                                   rtol=1e-8, atol=1e-13)
        # first look: Z_1 ~ N(0, 1), so the bound is the normal quantile
        assert plan.efficacy_z[0] == pytest.approx(
            stats.norm.isf(efficacy(t[0], alpha / sides)), rel=1e-10)
    np.testing.assert_allclose(plan.cumulative_alpha, np.cumsum(exits), rtol=1e-12, atol=1e-15)
    c1 = plan.characteristics(1.0)
    assert c1.reject == pytest.approx(0.8, abs=1e-9)
    c0 = plan.characteristics(0.0)
    assert c0.reject_any == pytest.approx(alpha, abs=1e-10)
    if looks == 1:
        # fixed design: z_{1-alpha/sides}, inflation 1
        assert plan.efficacy_z[0] == pytest.approx(stats.norm.isf(alpha / sides), rel=1e-12)
        assert plan.inflation == pytest.approx(1.0, rel=1e-9)


def test_unequal_fractions_against_mvn():
    # Unequal spacing, one-sided Pocock-type: null exits equal the spending
    # increments and power equals 0.9, both by scipy's MVN CDF.
    t = [0.1, 0.35, 0.5, 0.8, 1.0]
    plan = design(alpha=0.025, sides=1, power=0.9, info_fractions=t, efficacy="pocock-type")
    p1, tol1 = mvn_upper_power(plan, 1.0)
    assert p1 == pytest.approx(0.9, abs=tol1)
    p0, tol0 = mvn_upper_power(plan, 0.0)
    assert p0 == pytest.approx(0.025, abs=tol0)
    np.testing.assert_allclose(plan.info_fractions, t)


# ---------------------------------------------------------------------------
# Futility by beta spending
# ---------------------------------------------------------------------------

FUTILITY = [
    pytest.param(1, spending.obrien_fleming(), spending.hwang_shih_decani(-2), id="1s-obf-hsd-2"),
    pytest.param(1, spending.pocock(), spending.obrien_fleming(), id="1s-pocock-obf"),
    pytest.param(2, spending.obrien_fleming(), spending.pocock(), id="2s-obf-pocock"),
    pytest.param(2, spending.hwang_shih_decani(-4), spending.power_family(2), id="2s-hsd-rho2"),
]


@pytest.mark.parametrize("binding", [False, True], ids=["non-binding", "binding"])
@pytest.mark.parametrize("sides, eff, fut", FUTILITY)
@pytest.mark.parametrize("looks", [2, 5, 12])
def test_futility_plans(looks, sides, eff, fut, binding):
    alpha, power = (0.05, 0.9) if sides == 2 else (0.025, 0.85)
    plan = design(alpha=alpha, sides=sides, power=power, looks=looks, efficacy=eff,
                  futility=fut, binding=binding)
    assert plan.binding is binding
    fz, ez = plan.futility_z, plan.efficacy_z
    assert fz is not None and fz.shape == ez.shape
    # the boundaries meet at the last look
    assert fz[-1] == ez[-1]
    assert np.all(fz <= ez)
    # power is exactly the requested power with futility in place
    c1 = plan.characteristics(1.0)
    assert c1.reject == pytest.approx(power, abs=1e-9)
    # beta spending under the alternative: the cumulative probability of stopping
    # for futility at each interim look is the beta-spending function there
    # (Pampallona & Tsiatis 1994); at the last look every remaining path stops.
    t = plan.info_fractions
    np.testing.assert_allclose(np.cumsum(c1.futility)[:-1], fut(t[:-1], 1 - power),
                               rtol=1e-8, atol=1e-12)
    # (each look's stopping probability is good to 1e-7, the stated accuracy, so
    # their sum to looks * 1e-7)
    assert c1.stop.sum() == pytest.approx(1.0, abs=looks * 1e-7)
    with_fut = null_exits(plan, with_futility=True).sum()
    without = null_exits(plan, with_futility=False).sum()
    if binding:
        # type I error is alpha when futility stops are obeyed
        assert with_fut == pytest.approx(alpha, abs=1e-10)
        assert without > alpha
        assert plan.characteristics(0.0).reject_any == pytest.approx(alpha, abs=1e-10)
        np.testing.assert_allclose(plan.cumulative_alpha[-1], alpha, atol=1e-10)
    else:
        # type I error is alpha computed ignoring futility; obeying it only lowers it
        assert without == pytest.approx(alpha, abs=1e-10)
        assert with_fut < alpha
        np.testing.assert_allclose(plan.cumulative_alpha[-1], alpha, atol=1e-10)


@pytest.mark.parametrize("sides, eff, fut", FUTILITY)
def test_binding_efficacy_bounds_are_not_above_non_binding(sides, eff, fut):
    # A binding futility boundary removes null paths, so less room is needed above:
    # binding efficacy bounds <= non-binding ones, equal at the first look
    # (Jennison & Turnbull 2000, section 7.3; common practice).
    alpha = 0.05 if sides == 2 else 0.025
    nb = design(alpha=alpha, sides=sides, looks=6, efficacy=eff, futility=fut, binding=False)
    b = design(alpha=alpha, sides=sides, looks=6, efficacy=eff, futility=fut, binding=True)
    assert b.efficacy_z[0] == pytest.approx(nb.efficacy_z[0], rel=1e-12)
    assert np.all(b.efficacy_z <= nb.efficacy_z + 1e-12)
    assert b.efficacy_z[-1] < nb.efficacy_z[-1]
    # and a futility boundary costs information: more than without it
    none = design(alpha=alpha, sides=sides, looks=6, efficacy=eff)
    assert nb.inflation > none.inflation


@pytest.mark.parametrize("binding", [False, True])
def test_futility_power_by_mvn(binding):
    # Power with futility in place, by scipy's MVN CDF: one-sided K = 4 and
    # two-sided K = 3 (the two-sided continuation region is two intervals per look).
    p1 = design(alpha=0.025, sides=1, power=0.9, looks=4, futility="pocock-type",
                binding=binding)
    got, tol = mvn_upper_power(p1, 1.0)
    assert got == pytest.approx(0.9, abs=tol)
    got0, tol0 = mvn_upper_power(p1, 0.0)
    if binding:
        assert got0 == pytest.approx(0.025, abs=tol0)
    else:
        assert got0 < 0.025
    p2 = design(alpha=0.05, sides=2, power=0.9, info_fractions=[0.3, 0.6, 1.0],
                futility="obrien-fleming-type", binding=binding)
    got, tol = mvn_upper_power(p2, 1.0)
    assert got == pytest.approx(0.9, abs=tol)


# ---------------------------------------------------------------------------
# Classical boundaries: Wang-Tsiatis and Haybittle-Peto
# ---------------------------------------------------------------------------

LEVEL_ABSEPS = 1e-6


def mvn_two_sided_level(t, u) -> tuple[float, float]:
    """1 - P(|Z_k| < u_k for all k) under the null, by scipy's MVN CDF (one box near
    0.95, whose lattice estimate converges slowly: abseps 1e-6 keeps it quick)."""
    t = np.asarray(t, float)
    cov = np.sqrt(np.minimum.outer(t, t) / np.maximum.outer(t, t))
    finite = np.where(np.isfinite(u), u, 40.0)
    p = stats.multivariate_normal.cdf(finite, mean=np.zeros(t.size), cov=cov,
                                      lower_limit=-finite, abseps=LEVEL_ABSEPS, releps=0.0,
                                      rng=np.random.default_rng(3))
    return 1.0 - float(p), 2 * LEVEL_ABSEPS + 1e-7


@pytest.mark.parametrize("delta", [0.0, 0.1, 0.25, 0.4, 0.5])
def test_wang_tsiatis(delta):
    # Wang & Tsiatis (1987), Biometrics 43:193-199: boundary C t^(Delta - 1/2),
    # with C solved for level alpha. Level checked by scipy's MVN CDF.
    t = np.array([0.25, 0.5, 0.75, 1.0])
    plan = design(alpha=0.05, sides=2, info_fractions=t, efficacy=f"wang-tsiatis:{delta}")
    c = plan.efficacy_z[-1]
    np.testing.assert_allclose(plan.efficacy_z, c * t ** (delta - 0.5), rtol=1e-12)
    level, tol = mvn_two_sided_level(t, plan.efficacy_z)
    assert level == pytest.approx(0.05, abs=tol)
    assert plan.characteristics(1.0).reject == pytest.approx(0.9, abs=1e-9)


def test_wang_tsiatis_ends_are_pocock_and_obrien_fleming():
    # Wang & Tsiatis (1987): Delta = 0.5 is Pocock's boundary, Delta = 0 O'Brien-Fleming's.
    for k in (2, 5):
        np.testing.assert_allclose(design(looks=k, efficacy="wang-tsiatis:0.5").efficacy_z,
                                   design(looks=k, efficacy="pocock").efficacy_z, rtol=1e-12)
        np.testing.assert_allclose(design(looks=k, efficacy="wang-tsiatis:0").efficacy_z,
                                   design(looks=k, efficacy="obrien-fleming").efficacy_z,
                                   rtol=1e-12)
    assert design(looks=3, efficacy=classical.wang_tsiatis(0.25)).efficacy == \
        classical.wang_tsiatis(0.25)


@pytest.mark.parametrize("interim", [3.0, 3.29])
def test_haybittle_peto(interim):
    # Haybittle (1971); Peto et al. (1976): interim boundary fixed (3 by
    # convention), final boundary solved so the level is exactly alpha, a little
    # above the fixed-sample 1.96 (common practice). Level by scipy's MVN CDF.
    name = "haybittle-peto" if interim == 3.0 else f"haybittle-peto:{interim}"
    plan = design(alpha=0.05, sides=2, looks=4, efficacy=name)
    np.testing.assert_array_equal(plan.efficacy_z[:-1], interim)
    assert Z975 < plan.efficacy_z[-1] < 2.1
    level, tol = mvn_two_sided_level(plan.info_fractions, plan.efficacy_z)
    assert level == pytest.approx(0.05, abs=tol)


@pytest.mark.parametrize("sides", [1, 2])
@pytest.mark.parametrize("efficacy", ["haybittle-peto", "pocock", "wang-tsiatis:0.25"])
def test_classical_with_binding_futility(efficacy, sides):
    # A classical boundary with a binding futility boundary: the level is alpha
    # with futility obeyed and the power is the requested power.
    alpha = 0.05 if sides == 2 else 0.025
    plan = design(alpha=alpha, sides=sides, looks=5, efficacy=efficacy,
                  futility="obrien-fleming-type", binding=True)
    assert null_exits(plan, with_futility=True).sum() == pytest.approx(alpha, abs=1e-10)
    assert plan.characteristics(1.0).reject == pytest.approx(0.9, abs=1e-9)


# ---------------------------------------------------------------------------
# Extremes
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("efficacy", ["obrien-fleming-type", "pocock-type", "pocock"])
@pytest.mark.parametrize("futility", [None, "pocock-type"])
def test_tiny_first_fraction(efficacy, futility):
    t = [0.001, 0.5, 1.0]
    plan = design(alpha=0.05, sides=2, power=0.9, info_fractions=t, efficacy=efficacy,
                  futility=futility, binding=futility is not None)
    assert null_exits(plan, with_futility=plan.binding).sum() == pytest.approx(0.05, abs=1e-10)
    assert plan.characteristics(1.0).reject == pytest.approx(0.9, abs=1e-9)
    f = plan.efficacy
    if isinstance(f, spending.SpendingFunction):
        # Z_1 ~ N(0, 1): the first bound is the normal quantile of what is spent,
        # infinite when nothing representable is spent (OBF-type at t = 0.001 is
        # about 1e-1090).
        spent = f(0.001, 0.025)
        want = stats.norm.isf(spent) if spent > 0 else np.inf
        assert plan.efficacy_z[0] == pytest.approx(want, rel=1e-10)
    assert np.all(np.isfinite(plan.efficacy_z[1:]))


@pytest.mark.parametrize("sides", [1, 2])
@pytest.mark.parametrize("looks", [5, 50])
def test_alpha_0001(looks, sides):
    plan = design(alpha=0.001, sides=sides, power=0.9, looks=looks)
    exits = null_exits(plan, with_futility=False)
    assert exits.sum() == pytest.approx(0.001, rel=1e-7)
    f = spending.obrien_fleming()
    np.testing.assert_allclose(np.cumsum(exits), sides * f(plan.info_fractions, 0.001 / sides),
                               rtol=1e-6, atol=1e-300)
    assert plan.characteristics(1.0).reject == pytest.approx(0.9, abs=1e-9)
    # first bound: normal quantile of the (tiny) first spend, e.g. about 1e-120
    # at 50 looks; it must stay finite and exact
    spent = f(plan.info_fractions[0], 0.001 / sides)
    assert spent > 0
    assert plan.efficacy_z[0] == pytest.approx(stats.norm.isf(spent), rel=1e-10)


def test_fifty_looks_with_binding_futility():
    plan = design(alpha=0.05, sides=2, power=0.9, looks=50, futility="hsd:-2", binding=True)
    assert null_exits(plan, with_futility=True).sum() == pytest.approx(0.05, abs=1e-9)
    assert plan.characteristics(1.0).reject == pytest.approx(0.9, abs=1e-9)
    assert plan.futility_z[-1] == plan.efficacy_z[-1]


def test_alpha_half_one_sided_and_high_power():
    plan = design(alpha=0.5, sides=1, power=0.999, looks=3)
    assert null_exits(plan, False).sum() == pytest.approx(0.5, abs=1e-9)
    assert plan.characteristics(1.0).reject == pytest.approx(0.999, abs=1e-9)


# ---------------------------------------------------------------------------
# Expected information and the power curve
# ---------------------------------------------------------------------------

def simulate_stop_fraction(plan: Plan, effect: float, n: int, seed: int) -> np.ndarray:
    """Information fraction at stopping for n Brownian-motion paths (futility obeyed)."""
    rng = np.random.default_rng(seed)
    t = plan.info_fractions
    theta = effect * plan.drift
    s = np.zeros(n)
    alive = np.ones(n, bool)
    stop_at = np.ones(n)
    prev = 0.0
    for j, tj in enumerate(t):
        d = tj - prev
        prev = tj
        s += rng.standard_normal(n) * math.sqrt(d) + theta * d
        z = s / math.sqrt(tj)
        u = plan.efficacy_z[j]
        stop = (z >= u) | ((z <= -u) if plan.sides == 2 else False)
        if plan.futility_z is not None:
            b = plan.futility_z[j]
            stop |= (z <= b) if plan.sides == 1 else (np.abs(z) < b)
        new = alive & stop
        stop_at[new] = tj
        alive &= ~stop
    return stop_at


@pytest.mark.parametrize("effect", [0.0, 0.5, 1.0, 1.5])
@pytest.mark.parametrize("case", [
    dict(alpha=0.05, sides=2, looks=5),
    dict(alpha=0.025, sides=1, info_fractions=[0.2, 0.5, 0.75, 1.0], futility="pocock-type"),
    dict(alpha=0.05, sides=2, looks=4, efficacy="pocock", futility="obrien-fleming-type",
         binding=True),
], ids=["2s-obf", "1s-futility", "2s-pocock-binding"])
def test_expected_fraction_against_monte_carlo(case, effect):
    # Monte Carlo with N = 200,000 paths: the stopping fraction lies in [t_1, 1],
    # so its standard deviation is at most 0.5 and the standard error at most
    # 0.5 / sqrt(N) = 0.0011. The bound used is 4.5 times the sample standard
    # error (two-sided tail 6.8e-6 per check, 12 checks).
    plan = design(**case)
    n = 200_000
    sim = simulate_stop_fraction(plan, effect, n, seed=4242 + int(10 * effect))
    se = sim.std(ddof=1) / math.sqrt(n)
    c = plan.characteristics(effect)
    assert abs(c.expected_fraction - sim.mean()) <= 4.5 * se, (c.expected_fraction, sim.mean(),
                                                                se)
    assert c.expected_ratio == pytest.approx(c.expected_fraction * plan.inflation, rel=1e-12)
    np.testing.assert_allclose(c.stop, c.efficacy_upper + c.efficacy_lower + c.futility)


@pytest.mark.parametrize("case", [
    dict(alpha=0.05, sides=2, looks=5),
    dict(alpha=0.025, sides=1, looks=6, efficacy="pocock-type", futility="hsd:-2"),
    dict(alpha=0.05, sides=2, looks=3, efficacy="haybittle-peto", futility="pocock-type"),
])
def test_power_curve_is_monotone(case):
    plan = design(**case)
    effects = np.linspace(-1.0, 3.0, 41)
    curve = plan.power_curve(effects)
    # strictly increasing while the power is below 1; near 1 it is flat up to the
    # stated accuracy of the integration (1e-7, seqtest.boundaries docstring)
    steps = np.diff(curve)
    below = curve[1:] < 1 - 1e-6
    assert np.all(steps[below] > 0)
    assert np.all(steps > -1e-7)
    assert np.all((curve >= 0) & (curve <= 1 + 1e-7))
    assert curve[np.argmin(np.abs(effects - 1.0))] == pytest.approx(plan.power, abs=1e-9)
    if plan.futility_z is None:
        assert curve[np.argmin(np.abs(effects))] == pytest.approx(plan.alpha / plan.sides,
                                                                   abs=1e-10)


def test_expected_fraction_extremes():
    plan = design(looks=5)
    # a huge effect stops at the first look almost surely; a null plan without
    # futility rarely stops early (OBF-type)
    assert plan.characteristics(8.0).expected_fraction == pytest.approx(0.2, abs=1e-6)
    assert 0.95 < plan.characteristics(0.0).expected_fraction <= 1.0


# ---------------------------------------------------------------------------
# Plan documents
# ---------------------------------------------------------------------------

ROUND_TRIP = [
    dict(),
    dict(alpha=0.025, sides=1, looks=4, efficacy="pocock-type", futility="hsd:-2", binding=True),
    dict(alpha=0.05, sides=2, info_fractions=[0.001, 0.5, 1.0]),
    dict(looks=3, efficacy="pocock"),
    dict(looks=3, efficacy="haybittle-peto"),
    dict(looks=4, efficacy="wang-tsiatis:0.25", futility="power:2"),
    dict(looks=3, efficacy=spending.from_table([0.3, 0.6], [0.1, 0.5])),
    dict(looks=2, efficacy=spending.power_family(2.5),
         metric={"kind": "binary", "baseline": 0.1, "mde": 0.01}),
    dict(looks=1),
]


@pytest.mark.parametrize("kw", ROUND_TRIP, ids=[str(i) for i in range(len(ROUND_TRIP))])
def test_document_round_trip(kw):
    plan = design(**kw)
    doc = plan.to_dict()
    assert doc["kind"] == "group_sequential"
    text = json.dumps(doc, allow_nan=False)  # plain JSON: no NaN or Infinity
    back = seqtest.plan_from_dict(json.loads(text))
    for name in ("info_fractions", "efficacy_z", "cumulative_alpha"):
        np.testing.assert_array_equal(getattr(back, name), getattr(plan, name))
    if plan.futility_z is None:
        assert back.futility_z is None
    else:
        np.testing.assert_array_equal(back.futility_z, plan.futility_z)
    for name in ("alpha", "sides", "power", "drift", "inflation", "binding", "metric",
                 "efficacy", "futility", "r", "looks"):
        assert getattr(back, name) == getattr(plan, name), name
    np.testing.assert_array_equal(back.nominal_p, plan.nominal_p)
    assert back.to_dict() == doc
    c, d = plan.characteristics(0.7), back.characteristics(0.7)
    np.testing.assert_array_equal(c.efficacy_upper, d.efficacy_upper)
    assert c.expected_fraction == d.expected_fraction


@pytest.mark.parametrize("doc, argument", [
    ({"kind": "mixture"}, "inputs"),
    ([], "plan"),
    ({"kind": "group_sequential"}, "inputs"),
    ({"kind": "sequential"}, "kind"),
])
def test_bad_documents(doc, argument):
    # common practice: a refused document names the field at fault
    with pytest.raises(ValueError, match=f"^{argument}: "):
        seqtest.plan_from_dict(doc)


# ---------------------------------------------------------------------------
# Bad inputs name the argument
# ---------------------------------------------------------------------------

BAD = [
    (dict(alpha=0.0), "alpha"),
    (dict(alpha=-0.05), "alpha"),
    (dict(alpha=0.6, sides=1), "alpha"),   # above 0.5 per tail
    (dict(alpha=1.2, sides=2), "alpha"),   # above 0.5 per tail
    (dict(alpha=float("nan")), "alpha"),
    (dict(alpha="five percent"), "alpha"),
    (dict(alpha=0.05, sides=1, power=0.05), "power"),   # not above alpha
    (dict(alpha=0.05, sides=1, power=0.01), "power"),
    (dict(alpha=0.05, sides=2, power=0.025), "power"),  # not above alpha per tail
    (dict(power=1.0), "power"),
    (dict(power=1.5), "power"),
    (dict(power=float("nan")), "power"),
    (dict(looks=0), "looks"),
    (dict(looks=51), "looks"),
    (dict(looks=-3), "looks"),
    (dict(looks=2.5), "looks"),
    (dict(looks=True), "looks"),
    (dict(looks="five"), "looks"),
    (dict(looks=float("nan")), "looks"),
    (dict(looks=3, info_fractions=[0.5, 1.0]), "looks"),
    (dict(info_fractions=[0.5, 0.4, 1.0]), "info_fractions"),  # not increasing
    (dict(info_fractions=[0.5, 0.5, 1.0]), "info_fractions"),
    (dict(info_fractions=[0.0, 0.5, 1.0]), "info_fractions"),  # outside (0, 1]
    (dict(info_fractions=[-0.2, 1.0]), "info_fractions"),
    (dict(info_fractions=[0.5, 1.2]), "info_fractions"),
    (dict(info_fractions=[0.5, 0.8]), "info_fractions"),      # must end at 1
    (dict(info_fractions=[]), "info_fractions"),
    (dict(info_fractions=list(np.linspace(0.02, 1, 51))), "info_fractions"),
    (dict(info_fractions=[float("nan"), 1.0]), "info_fractions"),
    (dict(info_fractions=["half", 1.0]), "info_fractions"),
    (dict(sides=3), "sides"),
    (dict(sides=0), "sides"),
    (dict(efficacy="no-such-boundary"), "efficacy"),
    (dict(efficacy="hsd"), "efficacy"),
    (dict(efficacy="hsd:steep"), "efficacy"),
    (dict(efficacy=3), "efficacy"),
    (dict(efficacy="wang-tsiatis"), "efficacy"),
    (dict(futility="no-such-function"), "futility"),
    (dict(futility="pocock"), "futility"),  # classical shapes are not beta spending
    (dict(binding="yes"), "binding"),
]


@pytest.mark.parametrize("kw, argument", BAD, ids=[f"{a}-{i}" for i, (_, a) in enumerate(BAD)])
def test_bad_inputs_raise_valueerror_naming_the_argument(kw, argument):
    # the message names the argument, and the element of a list when one is at fault
    with pytest.raises(ValueError, match=rf"^{argument}(\[\d+\])?: "):
        design(**kw)


def test_plan_methods_validate():
    plan = design(looks=2)
    with pytest.raises(ValueError, match="^effect: "):
        plan.characteristics(float("inf"))
    with pytest.raises(ValueError, match="^delta: "):
        plan.max_information(0.0)
    with pytest.raises(ValueError, match="^metric: "):
        plan.sample_size()
