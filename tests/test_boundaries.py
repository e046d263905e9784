"""Tests for seqtest.boundaries: crossing probabilities and boundary search.

Outside sources:

- the published tables collected in /work/shared/REFERENCES.md (each value's
  source is in the parameter id and the comment above its table);
- scipy.stats.multivariate_normal.cdf on the canonical joint distribution
  ``Z_k ~ N(theta sqrt(I_k), 1)``, ``Cov(Z_j, Z_k) = sqrt(I_j / I_k)`` (Jennison and
  Turnbull 2000, section 3.1): a randomised quasi-Monte Carlo method (Genz),
  unrelated to the recursive integration under test;
- Monte Carlo simulation of Brownian motion on the canonical scale, with
  acceptance bounds computed from the binomial distribution of the counts.
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from scipy import stats

from seqtest import spending
from seqtest.core.boundaries import constant_bounds, spending_bounds
from seqtest.core.recursion import DEFAULT_R, crossing_probabilities
from seqtest.planning.design import design

Z975 = stats.norm.isf(0.025)


def equal(k: int) -> np.ndarray:
    return np.arange(1, k + 1) / k


def within_3_decimals(x: float, ref: float) -> bool:
    """``x`` rounds to the published 3-decimal value ``ref`` (half a unit in the 3rd
    decimal, plus float slack)."""
    return abs(x - ref) <= 0.0005 + 1e-12


# ---------------------------------------------------------------------------
# Published tables (REFERENCES.md)
# ---------------------------------------------------------------------------

# Pocock (1977), Biometrika 64:191-199; Jennison & Turnbull (2000) Table 2.1.
# Two-sided 0.05, equally spaced. From memory, confirmed by computation.
POCOCK_CP = [(1, 1.960), (2, 2.178), (3, 2.289), (4, 2.361), (5, 2.413), (10, 2.555)]

# O'Brien & Fleming (1979), Biometrics 35:549-556; Jennison & Turnbull Table 2.3.
# Boundary C_B sqrt(K/k); two-sided 0.05. From memory, confirmed by computation.
OBF_CB = [(2, 1.977), (3, 2.004), (4, 2.024), (5, 2.040), (10, 2.087)]

# Lan & DeMets (1983) spending, K = 5, two-sided 0.05 as 0.025 per tail.
# O'Brien-Fleming type: DeMets & Lan (1994), Statistics in Medicine 13:1341-1352
# (from memory, confirmed by computation).
LD_OBF_K5 = [4.877, 3.357, 2.680, 2.290, 2.031]
# Pocock type: computed values in REFERENCES.md (the published table rounds the
# last one to 2.39).
LD_POCOCK_K5 = [2.438, 2.427, 2.410, 2.397, 2.386]

# Armitage, McPherson & Rowe (1969), JRSS A 132:235-244; Jennison & Turnbull
# Table 1.1: overall type I error of K repeated two-sided tests at |Z| > 1.96.
# From memory, confirmed by computation for K <= 10 (K = 20, 50 from memory only;
# they are also checked by Monte Carlo below).
REPEATED = [(1, 0.050), (2, 0.083), (3, 0.107), (4, 0.126), (5, 0.142), (10, 0.193),
            (20, 0.248), (50, 0.320)]


@pytest.mark.parametrize("k, ref", POCOCK_CP,
                         ids=[f"Pocock1977-JT2000-Table2.1-K{k}" for k, _ in POCOCK_CP])
def test_pocock_constant(k, ref):
    b = constant_bounds(equal(k), 0.05, np.ones(k), sides=2)
    assert np.ptp(b) == 0.0
    assert within_3_decimals(b[0], ref), b[0]
    plan = design(alpha=0.05, sides=2, looks=k, efficacy="pocock")
    np.testing.assert_allclose(plan.efficacy_z, b, rtol=1e-9)


@pytest.mark.parametrize("k, ref", OBF_CB,
                         ids=[f"OBrienFleming1979-JT2000-Table2.3-K{k}" for k, _ in OBF_CB])
def test_obrien_fleming_constant(k, ref):
    t = equal(k)
    b = constant_bounds(t, 0.05, 1 / np.sqrt(t), sides=2)
    assert within_3_decimals(b[-1], ref), b[-1]
    # shape C_B sqrt(K / k)
    np.testing.assert_allclose(b, b[-1] * np.sqrt(k / np.arange(1, k + 1)), rtol=1e-12)
    plan = design(alpha=0.05, sides=2, looks=k, efficacy="obrien-fleming")
    np.testing.assert_allclose(plan.efficacy_z, b, rtol=1e-9)


@pytest.mark.parametrize("look", range(5), ids=[f"DeMetsLan1994-look{j + 1}" for j in range(5)])
def test_lan_demets_obf_type_k5(look):
    t = equal(5)
    b = spending_bounds(t, spending.obrien_fleming()(t, 0.025), sides=2)
    assert within_3_decimals(b[look], LD_OBF_K5[look]), b
    plan = design(alpha=0.05, sides=2, looks=5, efficacy=spending.obrien_fleming())
    assert plan.efficacy_z[look] == pytest.approx(b[look], rel=1e-9)


@pytest.mark.parametrize("look", range(5),
                         ids=[f"LanDeMets1983-pocock-type-computed-look{j + 1}" for j in range(5)])
def test_lan_demets_pocock_type_k5(look):
    t = equal(5)
    b = spending_bounds(t, spending.pocock()(t, 0.025), sides=2)
    assert within_3_decimals(b[look], LD_POCOCK_K5[look]), b
    plan = design(alpha=0.05, sides=2, looks=5, efficacy=spending.pocock())
    assert plan.efficacy_z[look] == pytest.approx(b[look], rel=1e-9)


def test_lan_demets_pocock_type_published_rounding():
    # The published table shows the last K = 5 Pocock-type bound as 2.39, i.e.
    # rounded to 2 decimals (REFERENCES.md).
    t = equal(5)
    b = spending_bounds(t, spending.pocock()(t, 0.025), sides=2)
    assert round(b[-1], 2) == 2.39


@pytest.mark.parametrize("k, ref", REPEATED,
                         ids=[f"ArmitageMcPhersonRowe1969-JT2000-Table1.1-K{k}"
                              for k, _ in REPEATED])
def test_repeated_significance_tests(k, ref):
    u = np.full(k, Z975)
    cr = crossing_probabilities(u, -u, equal(k), 0.0)
    total = cr.upper.sum() + cr.lower.sum()
    assert within_3_decimals(total, ref), total
    # symmetry of the null distribution
    np.testing.assert_allclose(cr.upper, cr.lower, rtol=1e-10, atol=1e-15)


# ---------------------------------------------------------------------------
# Cross-check against scipy's multivariate normal CDF
# ---------------------------------------------------------------------------

# scipy.stats.multivariate_normal.cdf refines its randomised lattice rule until
# its own error estimate (3 standard errors of 10 randomised batches) is below
# ``abseps``. A first-exit probability is a sum of ``n`` boxes, so its error is
# below ``n * abseps`` at 3 SE; the tolerance doubles that (6 SE) and adds the
# engine's stated accuracy (1e-7 absolute, module docstring of
# seqtest.boundaries). Dimensions 1 and 2 are computed by scipy exactly.
MVN_ABSEPS = 1e-7
ENGINE_ACCURACY = 1e-7


def canonical(info: np.ndarray, theta: float) -> tuple[np.ndarray, np.ndarray]:
    """Mean and covariance of (Z_1..Z_K): Jennison & Turnbull (2000), section 3.1."""
    info = np.asarray(info, float)
    cov = np.sqrt(np.minimum.outer(info, info) / np.maximum.outer(info, info))
    return theta * np.sqrt(info), cov


def mvn_first_exit(info, theta, cont, exit_set, seed=0):
    """P(Z_j in cont[j] for j < k, Z_k in exit_set) by scipy's MVN CDF.

    ``cont`` lists, per earlier look, the continuation region as a list of
    intervals; ``exit_set`` is a list of intervals at look k = len(cont) + 1.
    Returns the probability and the number of boxes summed."""
    k = len(cont) + 1
    mean, cov = canonical(np.asarray(info)[:k], theta)
    total, boxes = 0.0, 0
    for combo in itertools.product(*cont, exit_set):
        lo = np.array([c[0] for c in combo], float)
        hi = np.array([c[1] for c in combo], float)
        if np.any(lo >= hi):
            continue
        total += float(stats.multivariate_normal.cdf(
            hi, mean=mean, cov=cov, lower_limit=lo, abseps=MVN_ABSEPS, releps=0.0,
            rng=np.random.default_rng(seed)))
        boxes += 1
    return total, boxes


def mvn_all_exits(info, theta, upper, lower=None, inner=None):
    """Per-look first-exit probabilities (upper, lower, inner) and their tolerances."""
    k = len(info)
    lower = np.full(k, -np.inf) if lower is None else np.asarray(lower, float)
    res = {"upper": np.zeros(k), "lower": np.zeros(k), "inner": np.zeros(k)}
    tol = {"upper": np.zeros(k), "lower": np.zeros(k), "inner": np.zeros(k)}
    cont: list[list[tuple[float, float]]] = []
    for j in range(k):
        u, lo = upper[j], lower[j]
        regions = {"upper": [(u, np.inf)], "lower": [(-np.inf, lo)] if lo < u else []}
        if inner is not None:
            b = min(inner[j], u)
            regions["inner"] = [(max(-b, lo), b)] if b > 0 else []
            here = [iv for iv in [(lo, -b), (b, u)] if iv[0] < iv[1]] if b > 0 else [(lo, u)]
        else:
            here = [(lo, u)] if lo < u else []
        for name, ivs in regions.items():
            p, n = mvn_first_exit(info, theta, cont, ivs, seed=j)
            res[name][j] = p
            tol[name][j] = 2 * MVN_ABSEPS * n + ENGINE_ACCURACY
        cont.append(here)
    return res, tol


def random_case(rng: np.random.Generator, kind: str):
    kmax = 4 if kind == "two-sided-inner" else 5
    k = int(rng.integers(2, kmax + 1))
    scale = float(rng.choice([1.0, 250.0]))  # information in arbitrary units
    info = np.cumsum(rng.uniform(0.05, 1.0, k)) * scale
    theta = rng.uniform(-0.5, 4.0) / math.sqrt(info[-1])
    upper = rng.uniform(1.6, 4.2, k)
    lower = inner = None
    if kind == "one-sided-futility":
        lower = upper - rng.uniform(0.3, 4.0, k)
    elif kind == "two-sided":
        lower = -upper
    elif kind == "two-sided-inner":
        lower = -upper
        inner = rng.uniform(0.05, 1.2, k)
    return info, theta, upper, lower, inner


MVN_CASES = ([("one-sided", s) for s in range(3)]
             + [("one-sided-futility", s) for s in range(6)]
             + [("two-sided", s) for s in range(5)]
             + [("two-sided-inner", s) for s in range(4)])


@pytest.mark.parametrize("kind, seed", MVN_CASES,
                         ids=[f"scipy-mvn-{k}-seed{s}" for k, s in MVN_CASES])
def test_crossing_probabilities_match_multivariate_normal(kind, seed):
    rng = np.random.default_rng(1000 + seed)
    info, theta, upper, lower, inner = random_case(rng, kind)
    ref, tol = mvn_all_exits(info, theta, upper, lower, inner)
    if inner is None:
        cr = crossing_probabilities(upper, lower, info, theta)
    else:
        cr = crossing_probabilities(upper, lower, info, theta, inner_lower=-inner,
                                    inner_upper=inner)
    for name in ("upper", "lower", "inner"):
        err = np.abs(getattr(cr, name) - ref[name])
        assert np.all(err <= tol[name]), (name, getattr(cr, name), ref[name], tol[name])


@pytest.mark.parametrize("sides", [1, 2])
def test_spending_bounds_spend_the_increments_under_mvn(sides):
    # Each Lan-DeMets bound spends exactly the increment of the spending function:
    # the MVN probability of first crossing at look k under the null equals
    # sides * (f(t_k) - f(t_{k-1})) (Lan & DeMets 1983). Unequal spacing.
    t = np.array([0.15, 0.4, 0.55, 0.8, 1.0])
    f = spending.obrien_fleming()
    cum = f(t, 0.025)
    u = spending_bounds(t, cum, sides=sides)
    lower = -u if sides == 2 else None
    ref, tol = mvn_all_exits(t, 0.0, u, lower)
    spent = ref["upper"] + ref["lower"]
    np.testing.assert_array_less(np.abs(spent - sides * np.diff(cum, prepend=0.0)),
                                 tol["upper"] + tol["lower"])


def test_extreme_cases_match_multivariate_normal():
    # Tiny first information fraction, a very large drift, bounds far in the tail.
    cases = [
        (np.array([0.001, 0.3, 1.0]), 2.0, np.array([3.5, 2.5, 2.0]), None),
        (np.array([0.2, 0.5, 1.0]), 10.0, np.array([2.0, 2.0, 2.0]), np.array([-1, 0.0, 2.0])),
        (np.array([0.2, 0.4, 0.6, 1.0]), 0.0, np.array([8.0, 6.0, 4.5, 3.0]), None),
    ]
    for info, theta, upper, lower in cases:
        ref, tol = mvn_all_exits(info, theta, upper, lower)
        cr = crossing_probabilities(upper, lower, info, theta)
        np.testing.assert_array_less(np.abs(cr.upper - ref["upper"]), tol["upper"])
        np.testing.assert_array_less(np.abs(cr.lower - ref["lower"]), tol["lower"])


# ---------------------------------------------------------------------------
# Monte Carlo check on Brownian motion
# ---------------------------------------------------------------------------

# Acceptance bounds for a count of first exits among N simulated paths: the
# central binomial(N, p) interval with tail q = P(N(0,1) > 4.5) = 3.4e-6 on each
# side, p the engine's probability. That is the exact-count version of "within
# 4.5 Monte Carlo standard errors" and stays right when N p is small (early
# O'Brien-Fleming looks). About 130 counts are checked, so the chance of a false
# alarm anywhere is below 130 * 6.8e-6 = 1e-3 (and the seeds are fixed).
MC_Q = stats.norm.sf(4.5)


def simulate_exits(info, theta, upper, lower, inner, n, rng):
    """Counts of first exits per look by simulating the score S_k = Z_k sqrt(I_k),
    a Brownian motion with drift theta observed at I_1 < ... < I_K."""
    k = len(info)
    lower = np.full(k, -np.inf) if lower is None else lower
    counts = {"upper": np.zeros(k, int), "lower": np.zeros(k, int), "inner": np.zeros(k, int)}
    s = np.zeros(n)
    alive = np.ones(n, bool)
    prev = 0.0
    for j in range(k):
        d = info[j] - prev
        s += rng.standard_normal(n) * math.sqrt(d) + theta * d
        prev = info[j]
        z = s / math.sqrt(info[j])
        up = alive & (z >= upper[j])
        lo = alive & ~up & (z <= lower[j])
        inn = np.zeros(n, bool)
        if inner is not None:
            inn = alive & ~up & ~lo & (np.abs(z) < inner[j])
        counts["upper"][j] = up.sum()
        counts["lower"][j] = lo.sum()
        counts["inner"][j] = inn.sum()
        alive &= ~(up | lo | inn)
    return counts


def assert_counts_agree(counts, cr, n):
    for name in ("upper", "lower", "inner"):
        p = np.clip(getattr(cr, name), 0.0, 1.0)
        c = counts[name]
        lo = stats.binom.ppf(MC_Q, n, p)
        hi = stats.binom.isf(MC_Q, n, p)
        assert np.all((c >= lo) & (c <= hi)), (name, c / n, p, lo / n, hi / n)


def _plan_case(**kw):
    plan = design(**kw)
    return plan


MC_CASES = {
    # a two-sided OBF-type plan under the null and under the design alternative
    "obf-type-null": dict(plan=dict(alpha=0.05, sides=2, looks=5), effect=0.0),
    "obf-type-alt": dict(plan=dict(alpha=0.05, sides=2, looks=5), effect=1.0),
    # one-sided Pocock-type plan with a (non-binding) futility boundary, obeyed
    "pocock-futility-alt": dict(plan=dict(alpha=0.025, sides=1, looks=4,
                                          efficacy="pocock-type",
                                          futility="obrien-fleming-type"), effect=0.7),
    # two-sided plan with an inner futility region, unequal spacing
    "two-sided-inner-alt": dict(plan=dict(alpha=0.05, sides=2,
                                          info_fractions=[0.2, 0.45, 0.7, 1.0],
                                          futility="pocock-type", binding=True),
                                effect=1.0),
}


@pytest.mark.parametrize("name", list(MC_CASES), ids=[f"montecarlo-{n}" for n in MC_CASES])
def test_crossing_probabilities_match_monte_carlo(name):
    case = MC_CASES[name]
    plan = _plan_case(**case["plan"])
    t = plan.info_fractions
    theta = case["effect"] * plan.drift  # information in units of the maximum
    k = t.size
    upper = plan.efficacy_z
    inner = None
    if plan.sides == 2:
        lower = -upper
        if plan.futility_z is not None:
            inner = np.clip(plan.futility_z, 0, upper)
    else:
        lower = np.full(k, -np.inf) if plan.futility_z is None \
            else np.minimum(plan.futility_z, upper)
    n = 400_000
    counts = simulate_exits(t, theta, upper, lower, inner, n,
                            np.random.default_rng(20240601 + len(name)))
    if inner is None:
        cr = crossing_probabilities(upper, lower, t, theta)
    else:
        cr = crossing_probabilities(upper, lower, t, theta, inner_lower=-inner,
                                    inner_upper=inner)
    assert_counts_agree(counts, cr, n)
    if plan.futility_z is not None:
        # the futility boundary meets the efficacy one at the last look: every path
        # stops (each look's probability is good to the stated 1e-7)
        assert cr.stop.sum() == pytest.approx(1.0, abs=k * ENGINE_ACCURACY)


@pytest.mark.parametrize("k", [20, 50], ids=["AMR1969-K20-montecarlo", "AMR1969-K50-montecarlo"])
def test_repeated_tests_many_looks_monte_carlo(k):
    # REFERENCES.md gives K = 20 and 50 from memory only: confirm the engine (and
    # so the table value it reproduces) by simulation, 4.5-SE binomial bounds.
    n = 200_000
    u = np.full(k, Z975)
    counts = simulate_exits(equal(k), 0.0, u, -u, None, n, np.random.default_rng(77 + k))
    cr = crossing_probabilities(u, -u, equal(k), 0.0)
    assert_counts_agree(counts, cr, n)
    total = cr.upper.sum() + cr.lower.sum()
    hits = counts["upper"].sum() + counts["lower"].sum()
    assert stats.binom.ppf(MC_Q, n, total) <= hits <= stats.binom.isf(MC_Q, n, total)


# ---------------------------------------------------------------------------
# Boundary search: exact first look, exact spending, binding futility
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("sides", [1, 2])
@pytest.mark.parametrize("f", [spending.obrien_fleming(), spending.pocock(),
                               spending.hwang_shih_decani(-2), spending.power_family(2)],
                         ids=["obf-type", "pocock-type", "hsd-2", "rho2"])
def test_first_bound_is_the_normal_quantile(f, sides):
    # At the first look Z_1 ~ N(0, 1): the bound spending f(t_1) per tail is
    # norm.isf(f(t_1)) (Lan & DeMets 1983), for one and two sides.
    t = np.array([0.3, 0.7, 1.0])
    cum = f(t, 0.025)
    u = spending_bounds(t, cum, sides=sides)
    assert u[0] == pytest.approx(stats.norm.isf(cum[0]), rel=1e-10)


@pytest.mark.parametrize("sides", [1, 2])
@pytest.mark.parametrize("k", [1, 3, 10, 50])
def test_spending_bounds_spend_exactly(k, sides):
    # Consistency of the search with the forward recursion: the bounds found spend
    # the requested increments to 1e-10.
    t = equal(k)
    cum = spending.obrien_fleming()(t, 0.025)
    u = spending_bounds(t, cum, sides=sides)
    cr = crossing_probabilities(u, -u if sides == 2 else None, t, 0.0)
    spent = np.cumsum(cr.upper + cr.lower)
    np.testing.assert_allclose(spent, sides * cum, rtol=1e-9, atol=1e-12)


def test_spending_bounds_with_binding_lower_futility():
    # One-sided bounds that account for a binding lower boundary spend the
    # increments with that boundary in place, and are below the non-binding ones
    # (fewer paths reach later looks).
    t = equal(4)
    cum = spending.pocock()(t, 0.025)
    fut = np.array([-0.5, 0.3, 1.0, -np.inf])
    u = spending_bounds(t, cum, sides=1, futility=fut)
    cr = crossing_probabilities(u, fut, t, 0.0)
    np.testing.assert_allclose(np.cumsum(cr.upper), cum, rtol=1e-9)
    free = spending_bounds(t, cum, sides=1)
    assert u[0] == pytest.approx(free[0], rel=1e-12)
    assert np.all(u[1:] < free[1:])


def test_nothing_spent_gives_infinite_bound():
    t = equal(3)
    u = spending_bounds(t, [0.0, 0.01, 0.025], sides=1)
    assert u[0] == np.inf and np.all(np.isfinite(u[1:]))
    # nobody stopped at look 1, so Z_2 ~ N(0, 1): the bound is norm.isf(0.01), to
    # the stated accuracy of the integration (about 1e-6 on z)
    assert u[1] == pytest.approx(stats.norm.isf(0.01), abs=1e-6)


@pytest.mark.parametrize("sides", [1, 2])
def test_constant_bounds_level(sides):
    # Wang & Tsiatis (1987) shape t^(Delta - 1/2), Delta = 0.25, unequal spacing:
    # the constant is solved so the null exit probability is alpha.
    t = np.array([0.25, 0.5, 0.6, 1.0])
    b = constant_bounds(t, 0.05, t ** (0.25 - 0.5), sides=sides)
    cr = crossing_probabilities(b, -b if sides == 2 else None, t, 0.0)
    assert cr.upper.sum() + cr.lower.sum() == pytest.approx(0.05, abs=1e-11)
    np.testing.assert_allclose(b / t ** -0.25, b[0] / t[0] ** -0.25, rtol=1e-12)


# ---------------------------------------------------------------------------
# Accuracy of the integration and its inputs
# ---------------------------------------------------------------------------

def test_grid_refinement_changes_nothing_visible():
    # The J&T chapter 19 grid converges fast in r: r = 24 (default) and r = 96
    # agree to the stated accuracy, 1e-7 on crossing probabilities (module docstring).
    rng = np.random.default_rng(5)
    for _ in range(3):
        info, theta, upper, lower, inner = random_case(rng, "two-sided-inner")
        a = crossing_probabilities(upper, lower, info, theta, inner_lower=-inner,
                                   inner_upper=inner)
        b = crossing_probabilities(upper, lower, info, theta, inner_lower=-inner,
                                   inner_upper=inner, r=96)
        for name in ("upper", "lower", "inner"):
            np.testing.assert_allclose(getattr(a, name), getattr(b, name), rtol=0,
                                       atol=ENGINE_ACCURACY)
    assert DEFAULT_R == 24


def test_info_scale_does_not_matter():
    # Only information ratios matter once drift is per unit sqrt(info).
    info = np.array([1.0, 2.5, 4.0])
    u = np.array([2.5, 2.2, 2.0])
    a = crossing_probabilities(u, -u, info, 0.7)
    b = crossing_probabilities(u, -u, info * 1e4, 0.7 / 100)
    np.testing.assert_allclose(a.upper, b.upper, rtol=1e-10)
    np.testing.assert_allclose(a.lower, b.lower, rtol=1e-10, atol=1e-15)


def test_infinite_and_far_bounds():
    t = equal(3)
    cr = crossing_probabilities([np.inf, np.inf, Z975], None, t, 0.0)
    np.testing.assert_array_equal(cr.upper[:2], [0.0, 0.0])
    # nobody stops before look 3, where Z_3 ~ N(0, 1): P(Z_3 > 1.96) = 0.025, to the
    # stated accuracy (1e-7)
    assert cr.upper[2] == pytest.approx(0.025, abs=ENGINE_ACCURACY)
    far = crossing_probabilities([45.0, 60.0, Z975], [-45.0, -np.inf, -np.inf], t, 0.0)
    assert far.upper[2] == pytest.approx(0.025, abs=ENGINE_ACCURACY)
    assert np.all(far.upper[:2] == 0.0) and np.all(far.lower == 0.0)


def test_stop_property_sums_regions():
    t = equal(3)
    u = np.array([2.5, 2.3, 2.0])
    cr = crossing_probabilities(u, -u, t, 1.0, inner_lower=-np.array([0.2, 0.5, 2.0]),
                                inner_upper=np.array([0.2, 0.5, 2.0]))
    np.testing.assert_allclose(cr.stop, cr.upper + cr.lower + cr.inner)
    # the inner region at the last look meets the outer bounds: every path stops
    assert cr.stop.sum() == pytest.approx(1.0, abs=ENGINE_ACCURACY)


@pytest.mark.parametrize("last_lower", [2.0, 2.5])
def test_meeting_bounds_stop_every_path(last_lower):
    # Docstring of crossing_probabilities: the test stops at look k when
    # Z_k >= upper[k] or Z_k <= lower[k]. A lower boundary that meets (or passes)
    # the upper one at the last look therefore stops every remaining path there:
    # P(stop at some look) = 1, and the last look's lower exit is
    # P(continue to K and Z_K < upper_K). Reference for that value: scipy's MVN.
    t = equal(3)
    u = np.array([2.5, 2.3, 2.0])
    lo = np.array([-1.0, 0.0, last_lower])
    cr = crossing_probabilities(u, lo, t, 1.0)
    assert cr.stop.sum() == pytest.approx(1.0, abs=ENGINE_ACCURACY)
    ref, n = mvn_first_exit(t, 1.0, [[(-1.0, 2.5)], [(0.0, 2.3)]], [(-np.inf, 2.0)])
    assert cr.lower[2] == pytest.approx(ref, abs=2 * MVN_ABSEPS * n + ENGINE_ACCURACY)


@pytest.mark.parametrize("call, argument", [
    (lambda: crossing_probabilities([2, 2], None, [2.0, 1.0]), "info"),
    (lambda: crossing_probabilities([2, 2], None, [0.0, 1.0]), "info"),
    (lambda: crossing_probabilities([2, 2], None, [1.0, np.nan]), "info"),
    (lambda: crossing_probabilities([2], None, []), "info"),
    (lambda: crossing_probabilities([2, 2, 2], None, [1.0, 2.0]), "upper"),
    (lambda: crossing_probabilities([2, np.nan], None, [1.0, 2.0]), "upper"),
    (lambda: crossing_probabilities([2, 2], [0.0], [1.0, 2.0]), "lower"),
    (lambda: crossing_probabilities([2, 2], None, [1.0, 2.0], np.nan), "drift"),
    (lambda: crossing_probabilities([2, 2], None, [1.0, 2.0], r=2), "r"),
    (lambda: crossing_probabilities([2, 2], None, [1.0, 2.0], r=10.5), "r"),
    (lambda: crossing_probabilities([2, 2], None, [1, 2], inner_lower=[0, 0]), "inner_upper"),
    (lambda: spending_bounds([0.5, 1.0], [0.02, 0.01]), "cumulative_alpha"),
    (lambda: spending_bounds([0.5, 1.0], [0.01]), "cumulative_alpha"),
    (lambda: spending_bounds([0.5, 1.0], [-0.01, 0.02]), "cumulative_alpha"),
    (lambda: spending_bounds([0.5, 1.0], [0.01, 0.02], sides=3), "sides"),
    (lambda: spending_bounds([1.0, 0.5], [0.01, 0.02]), "info"),
    (lambda: constant_bounds([0.5, 1.0], 0.05, [1.0, -1.0]), "shape"),
    (lambda: constant_bounds([0.5, 1.0], 0.05, [1.0]), "shape"),
])
def test_bad_inputs_raise_valueerror_naming_the_argument(call, argument):
    with pytest.raises(ValueError, match=f"^{argument}: "):
        call()
