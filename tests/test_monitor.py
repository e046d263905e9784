"""Tests for seqtest.monitor: boundaries on observed fractions, decisions, analysis.

Outside references used here (named again beside each check):

- scipy.stats.ttest_ind(equal_var=False) (Welch's test) and statsmodels'
  two-independent-proportions Wald test and interval, for a one-look plan;
- scipy.stats.chisquare, for the sample-ratio check;
- the canonical joint distribution of the z statistics, ``Corr(Z_j, Z_k) =
  sqrt(t_j / t_k)`` (Jennison and Turnbull 2000, section 3.1), integrated with
  scipy.stats.multivariate_normal (Genz's method, independent of the engine's
  recursion), for the error spent at each look (Lan and DeMets 1983);
- published constants: Pocock C_P(5) = 2.413, O'Brien-Fleming C_B(5) = 2.040
  (Jennison and Turnbull 2000, Tables 2.1 and 2.3; from memory, as in REFERENCES.md);
- the stage-wise ordering (Tsiatis, Rosner and Mehta 1984).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats import proportion as sm_proportion

import seqtest
from seqtest import spending
from seqtest.core import score
from seqtest.core.region import Region, first_stop
from seqtest.core.vocabulary import DECISIONS
from seqtest.monitoring import metrics
from seqtest.monitoring.metrics import LookDataError
from seqtest.monitoring.rules import GroupSequentialRule


def decide(z, efficacy_z, futility_z, sides, *, final_last=True, obey_futility=True):
    """The stopping rule over many paths, as the simulator runs it."""
    region = Region.of_plan(sides, np.broadcast_to(efficacy_z, np.shape(z)),
                            None if futility_z is None
                            else np.broadcast_to(futility_z, np.shape(z)))
    return first_stop(region.classify(z), final_last=final_last,
                      obey_futility=obey_futility)

MVN_ABSEPS = 1e-7            # requested absolute error of scipy's MVN integration
PROB_TOL = 5 * MVN_ABSEPS    # plus the engine's ~1e-7 (seqtest.boundaries docstring)


def mvn_box(t, lo, hi, drift: float = 0.0) -> float:
    """P(lo_k < Z_k < hi_k, all k), Z canonical with E Z_k = drift sqrt(t_k) and
    Corr(Z_j, Z_k) = sqrt(t_j / t_k), by scipy.stats.multivariate_normal (seeded)."""
    t = np.asarray(t, float)
    lo = np.asarray(lo, float)
    hi = np.asarray(hi, float)
    mean = drift * np.sqrt(t)
    if t.size == 1:
        return float(stats.norm.cdf(hi[0] - mean[0]) - stats.norm.cdf(lo[0] - mean[0]))
    corr = np.sqrt(np.minimum.outer(t, t) / np.maximum.outer(t, t))
    dist = stats.multivariate_normal(mean, corr, seed=2026, abseps=MVN_ABSEPS, releps=0.0,
                                     maxpts=1_000_000 * t.size)
    return float(dist.cdf(hi, lower_limit=lo))


def first_crossing_upper(t, a, lower, drift: float = 0.0) -> np.ndarray:
    """P(first exit at look k through Z_k >= a_k), continuation lower_j < Z_j < a_j."""
    out = []
    for k in range(len(t)):
        lo = list(lower[:k]) + [a[k]]
        hi = list(a[:k]) + [np.inf]
        out.append(mvn_box(t[: k + 1], lo, hi, drift))
    return np.array(out)


def continuous_looks(zs, ns, sd=1.0):
    """Looks of per-arm (n, mean, sd) with n per arm and a mean difference that gives
    exactly the Welch z of each look: z * sqrt(2 sd^2 / n)."""
    out = []
    for z, n in zip(zs, ns, strict=True):
        d = z * math.sqrt(2.0 * sd * sd / n)
        out.append({"control": {"n": n, "mean": 10.0, "sd": sd},
                    "treatment": {"n": n, "mean": 10.0 + d, "sd": sd}})
    return out


# ---------------------------------------------------------------------------
# A one-look plan is the fixed-sample test
# ---------------------------------------------------------------------------

def _sums(x):
    return {"n": int(x.size), "sum": float(x.sum()), "sum_sq": float((x * x).sum())}


@pytest.mark.parametrize("shift", [0.0, 0.02, 0.05])
@pytest.mark.parametrize("how", ["final_flag", "reached_max"])
def test_one_look_continuous_is_welch_test(shift, how):
    # Source: scipy.stats.ttest_ind(equal_var=False) (Welch 1947). Our z is exactly
    # Welch's t statistic; our p-value and interval use the normal distribution. At
    # Welch df ~ 2e4 the two-sided p-values differ by at most about
    # 2 max_z phi(z)(z^3 + z)/(4 df) ~ 1.5e-5 (first-order expansion of the t tail),
    # and the interval limits by exactly (t_{0.975, df} - z_{0.975}) se.
    rng = np.random.default_rng(11)
    x_c = rng.normal(5.0, 1.0, 20_000)
    x_t = rng.normal(5.0 + shift, 1.6, 14_000)
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=1)
    looks = [{"control": _sums(x_c), "treatment": _sums(x_t)}]
    if how == "final_flag":
        an = seqtest.analyze(plan, looks, metric="continuous", max_n=50_000, final=True)
    else:
        an = seqtest.analyze(plan, looks, metric="continuous", max_n=34_000)
    ref = stats.ttest_ind(x_t, x_c, equal_var=False)
    look = an.looks[0]
    assert look.z == pytest.approx(ref.statistic, rel=1e-9)
    assert look.efficacy_z == pytest.approx(stats.norm.isf(0.025), abs=1e-7)
    assert an.stopped_at == 1
    assert an.final.p_value == pytest.approx(ref.pvalue, abs=1e-4)
    assert an.final.p_value == pytest.approx(2 * stats.norm.sf(abs(ref.statistic)), rel=1e-6)
    ci = ref.confidence_interval(0.95)
    gap = (stats.t.isf(0.025, ref.df) - stats.norm.isf(0.025)) * look.se
    assert 0 < gap < 2e-4 * look.se       # df is large: t and normal nearly agree
    assert an.final.ci_lower == pytest.approx(ci.low + gap, abs=1e-5 * look.se)
    assert an.final.ci_upper == pytest.approx(ci.high - gap, abs=1e-5 * look.se)
    # the stage-wise results of one look equal the fixed-sample (naive) ones
    assert an.final.ci_lower == pytest.approx(an.final.naive_ci_lower, abs=1e-5 * look.se)
    assert an.final.ci_upper == pytest.approx(an.final.naive_ci_upper, abs=1e-5 * look.se)
    assert an.final.median_unbiased == pytest.approx(look.estimate, abs=1e-5 * look.se)
    assert an.final.p_value == pytest.approx(an.final.naive_p_value, rel=1e-6)
    significant = ref.pvalue < 0.05
    assert an.decision == ("stop_efficacy" if significant else "complete_not_significant")


BINARY_ONE_LOOK = [(1000, 10_000, 1090, 10_000), (480, 5000, 560, 5200),
                   (30_000, 300_000, 30_100, 300_000), (2100, 20_000, 1950, 20_000)]


@pytest.mark.parametrize("sc, nc, st, nt", BINARY_ONE_LOOK)
def test_one_look_binary_is_the_corrected_score_test(sc, nc, st, nt):
    # One look is the fixed-sample test. Binary metrics are tested by the score
    # statistic restricted to the null: statsmodels' test_proportions_2indep(
    # method="score", correction=False) gives its plain value (the pooled z), and the
    # look's z is its skewness correction (Gart and Nam 1990; seqtest.core.score,
    # checked there by exact enumeration). The repeated interval of a single look is
    # the fixed-sample score interval (the test inverted), so it excludes 0 exactly when
    # the look stops; the stage-wise interval of one look is (z +- 1.96) se on the
    # canonical scale of the statistic (Jennison and Turnbull 2000, 8.4: with one look
    # the stage-wise ordering is the ordering by z), with the se restricted to the null.
    plan = seqtest.design(alpha=0.05, sides=2, power=0.8, looks=1)
    looks = [{"control": {"n": nc, "successes": sc}, "treatment": {"n": nt, "successes": st}}]
    an = seqtest.analyze(plan, looks, metric="binary", max_n=nc + nt)
    ref = sm_proportion.test_proportions_2indep(st, nt, sc, nc, method="score",
                                                compare="diff", correction=False)
    look = an.looks[0]
    assert look.test_estimate / look.se == pytest.approx(ref.statistic, rel=1e-9)
    st_ = score.binary_difference(sc, nc, st, nt)
    assert look.z == pytest.approx(float(st_.corrected_z), rel=1e-12)
    assert an.final.p_value == pytest.approx(2 * stats.norm.sf(abs(look.z)), rel=1e-6)
    lo, hi = score.interval("binary", sc, nc, st, nt, stats.norm.isf(0.025), null=0.0)
    assert look.interval_lower == pytest.approx(float(lo), abs=1e-9)
    assert look.interval_upper == pytest.approx(float(hi), abs=1e-9)
    assert (look.interval_lower > 0 or look.interval_upper < 0) == \
        (an.decision == "stop_efficacy")
    q = stats.norm.isf(0.025)
    assert an.final.ci_lower == pytest.approx((look.z - q) * look.se, abs=1e-5 * look.se)
    assert an.final.ci_upper == pytest.approx((look.z + q) * look.se, abs=1e-5 * look.se)
    assert an.final.naive_ci_lower == pytest.approx(float(lo), abs=1e-9)


@pytest.mark.parametrize("sc, nc, st, nt", BINARY_ONE_LOOK[:2] + [(30, 400, 45, 410)])
def test_one_look_relative_binary_is_the_ratio_score_test(sc, nc, st, nt):
    # On the relative scale the test of equal proportions is the same score test; the
    # estimate is the lift, se the restricted se over the control proportion, and the
    # fixed-sample interval is the inverted ratio score test, which with the skewness
    # term off is statsmodels' confint_proportions_2indep(method="score",
    # compare="ratio") (Miettinen and Nurminen 1985; seqtest.core.score tests both).
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=1,
                          metric={"kind": "binary", "baseline": 0.1, "mde": 0.1,
                                  "relative": True, "scale": "relative"})
    looks = [{"control": {"n": nc, "successes": sc}, "treatment": {"n": nt, "successes": st}}]
    an = seqtest.analyze(plan, looks, max_n=nc + nt)
    ref = sm_proportion.test_proportions_2indep(st, nt, sc, nc, method="score",
                                                compare="ratio", correction=False)
    look = an.looks[0]
    assert an.scale == "relative" and an.test_scale == "relative"
    assert look.estimate == pytest.approx((st / nt) / (sc / nc) - 1, rel=1e-12)
    assert look.test_estimate / look.se == pytest.approx(ref.statistic, rel=1e-9)
    plain_lo, plain_hi = score.interval("binary", sc, nc, st, nt, stats.norm.isf(0.025),
                                        scale="relative", skew=False)
    sm_lo, sm_hi = sm_proportion.confint_proportions_2indep(
        st, nt, sc, nc, method="score", compare="ratio", correction=False)
    assert float(plain_lo) == pytest.approx(sm_lo - 1, rel=1e-7, abs=1e-9)
    assert float(plain_hi) == pytest.approx(sm_hi - 1, rel=1e-7, abs=1e-9)
    lo, hi = score.interval("binary", sc, nc, st, nt, stats.norm.isf(0.025),
                            scale="relative", null=0.0)
    assert look.interval_lower == pytest.approx(float(lo), abs=1e-9)
    assert look.interval_upper == pytest.approx(float(hi), abs=1e-9)


def test_one_look_one_sided_is_the_one_sided_z_test():
    # Source: one-sided z test, p = Phi(-z), lower limit est - z_{0.975} se
    # (scipy.stats.norm); the upper limit is unbounded.
    plan = seqtest.design(alpha=0.025, sides=1, power=0.9, looks=1)
    an = seqtest.analyze(plan, continuous_looks([2.3], [800]), metric="continuous",
                         max_n=1600)
    look = an.looks[0]
    assert look.z == pytest.approx(2.3, rel=1e-12)
    assert an.final.p_value == pytest.approx(stats.norm.sf(2.3), rel=1e-6)
    assert an.final.ci_lower == pytest.approx(look.estimate - stats.norm.isf(0.025) * look.se,
                                              abs=1e-5 * look.se)
    assert an.final.ci_upper == math.inf
    assert an.decision == "stop_efficacy" and an.direction == "treatment_better"


# ---------------------------------------------------------------------------
# Sample-ratio mismatch
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("nc, nt, alloc", [(5000, 5000, 1.0), (5000, 5200, 1.0),
                                           (10_000, 10_450, 1.0), (3000, 6100, 2.0),
                                           (17, 29, 1.0), (1234, 600, 0.5)])
def test_srm_check_matches_scipy_chisquare(nc, nt, alloc):
    # Source: scipy.stats.chisquare (Pearson goodness of fit, 1 df) against the planned
    # shares 1/(1+a), a/(1+a).
    total = nc + nt
    ref = stats.chisquare([nc, nt], f_exp=[total / (1 + alloc), total * alloc / (1 + alloc)])
    r = metrics.srm_check(nc, nt, alloc)
    assert r.statistic == pytest.approx(ref.statistic, rel=1e-10, abs=1e-12)
    assert r.p_value == pytest.approx(ref.pvalue, rel=1e-10)
    assert r.mismatch == (ref.pvalue < 0.001)


def test_analyze_reports_srm_at_the_unbalanced_look():
    # Source: scipy.stats.chisquare. Look 1 is balanced, look 2 is not (5000 vs 5400:
    # chi-square 15.4, p ~ 9e-5 < 0.001).
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=4,
                          metric={"kind": "binary", "baseline": 0.1, "mde": 0.01})
    looks = [
        {"control": {"n": 2500, "successes": 250}, "treatment": {"n": 2510, "successes": 260}},
        {"control": {"n": 5000, "successes": 500}, "treatment": {"n": 5400, "successes": 560}},
    ]
    an = seqtest.analyze(plan, looks)
    for look, (nc, nt) in zip(an.looks, [(2500, 2510), (5000, 5400)], strict=True):
        ref = stats.chisquare([nc, nt])
        assert look.srm_p_value == pytest.approx(ref.pvalue, rel=1e-10)
    srm = [w for w in an.warnings if "sample ratio mismatch" in w.lower()]
    assert len(srm) == 1 and srm[0].startswith("look 2")


def test_analyze_srm_uses_the_planned_allocation():
    # Source: scipy.stats.chisquare with expected shares 1/3, 2/3 for a 2:1 plan.
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=3,
                          metric={"kind": "binary", "baseline": 0.2, "mde": 0.02,
                                  "allocation": 2.0})
    looks = [{"control": {"n": 3000, "successes": 600},
              "treatment": {"n": 6050, "successes": 1250}}]
    an = seqtest.analyze(plan, looks)
    ref = stats.chisquare([3000, 6050], f_exp=[9050 / 3, 9050 * 2 / 3])
    assert an.looks[0].srm_p_value == pytest.approx(ref.pvalue, rel=1e-10)
    assert not any("mismatch:" in w.lower() for w in an.warnings)
    # the same counts against an even split are a gross mismatch
    an = seqtest.analyze(plan, looks, allocation=1.0)
    assert any(w.startswith("look 1") and "mismatch" in w.lower() for w in an.warnings)


# ---------------------------------------------------------------------------
# Unplanned looks: each look spends exactly the spending function's increment
# ---------------------------------------------------------------------------

UNPLANNED = [
    # (label, fractions, final flag)
    ("planned", [0.2, 0.4, 0.6, 0.8, 1.0], False),
    ("extra look", [0.1, 0.2, 0.3, 0.4, 0.6, 0.8, 1.0], False),
    ("skipped looks", [0.2, 0.6, 1.0], False),
    ("moved looks", [0.25, 0.45, 0.7, 0.9, 1.0], False),
    ("over-running", [0.2, 0.4, 0.6, 0.8, 1.15], False),
    ("final declared early", [0.2, 0.4, 0.6, 0.75], True),
    ("interim only", [0.33, 0.5], False),
]
SPENDERS = {
    "obrien-fleming-type": spending.obrien_fleming(),
    "pocock-type": spending.pocock(),
    "hsd(-4)": spending.hwang_shih_decani(-4.0),
}


@pytest.mark.parametrize("label, frac, final", UNPLANNED, ids=[u[0] for u in UNPLANNED])
@pytest.mark.parametrize("sides", [1, 2])
@pytest.mark.parametrize("spender", list(SPENDERS))
def test_bounds_at_spends_the_spending_function_increments(label, frac, final, sides,
                                                           spender):
    # Source: Lan and DeMets (1983): P0(first crossing at look k) = f(t_k) - f(t_{k-1})
    # per tail, the final look spending all that is left; computed independently with
    # scipy.stats.multivariate_normal on Corr(Z_j, Z_k) = sqrt(t_j / t_k).
    alpha = 0.05 if sides == 2 else 0.025
    f = SPENDERS[spender]
    plan = seqtest.design(alpha=alpha, sides=sides, power=0.9, looks=5, efficacy=f)
    t = np.array(frac)
    a, fut = GroupSequentialRule(plan).boundaries(t, final=final)
    assert fut is None
    a_tail = alpha / sides
    cum = np.asarray(f(np.minimum(t, 1.0), a_tail), float)
    if final or t[-1] >= 1:
        cum[-1] = a_tail
    inc = np.diff(np.concatenate([[0.0], cum]))
    # first look: one-dimensional, checked to relative precision
    assert stats.norm.sf(a[0]) == pytest.approx(inc[0], rel=1e-6)
    lower = -a if sides == 2 else np.full(t.size, -np.inf)
    # upper tail; for two-sided plans the lower tail is its mirror image under the null
    got = first_crossing_upper(t, a, lower)
    np.testing.assert_allclose(got, inc, rtol=0, atol=PROB_TOL)
    if final or t[-1] >= 1:
        assert got.sum() == pytest.approx(a_tail, abs=t.size * PROB_TOL)


def test_bounds_at_final_look_spends_more_than_an_interim_at_the_same_fraction():
    # Lan and DeMets (1983): declaring a look final spends all the alpha left, so its
    # boundary is lower than that of an interim look at the same fraction.
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=5)
    t = [0.2, 0.4, 0.6, 0.75]
    a_int, _ = GroupSequentialRule(plan).boundaries(t)
    a_fin, _ = GroupSequentialRule(plan).boundaries(t, final=True)
    np.testing.assert_allclose(a_int[:-1], a_fin[:-1], rtol=1e-12)
    assert a_fin[-1] < a_int[-1] - 0.3
    # fraction >= 1 is final whatever the flag says
    a1, _ = GroupSequentialRule(plan).boundaries([0.2, 0.4, 1.0])
    a2, _ = GroupSequentialRule(plan).boundaries([0.2, 0.4, 1.0], final=True)
    assert a1[-1] == pytest.approx(a2[-1], rel=1e-12)


@pytest.mark.parametrize("frac", [[0.15, 0.5, 0.8, 1.1], [0.3, 0.55, 0.7]])
def test_bounds_at_binding_futility_spends_alpha_and_beta(frac):
    # Source: Lan and DeMets (1983) for alpha and beta spending with a binding futility
    # boundary (Pampallona and Tsiatis 1994; Jennison and Turnbull 2000, 7.3): under
    # the null P(first upper exit at k) = f(t_k) - f(t_{k-1}); under the design drift
    # P(first lower exit at k) = g(t_k) - g(t_{k-1}); the continuation region is
    # b_j < Z_j < a_j. Independent integration by scipy.stats.multivariate_normal.
    plan = seqtest.design(alpha=0.025, sides=1, power=0.9, looks=4, futility="hsd:-2",
                          binding=True)
    t = np.array(frac)
    a, b = GroupSequentialRule(plan).boundaries(t)
    final = t[-1] >= 1
    cum_a = np.asarray(plan.efficacy(np.minimum(t, 1), 0.025), float)
    cum_b = np.asarray(plan.futility(np.minimum(t, 1), 0.1), float)
    if final:
        cum_a[-1] = 0.025
        assert b[-1] == pytest.approx(a[-1], rel=1e-12)
    got_a = first_crossing_upper(t, a, b)
    np.testing.assert_allclose(got_a, np.diff(np.r_[0.0, cum_a]), rtol=0, atol=PROB_TOL)
    got_b = []
    for k in range(t.size - (1 if final else 0)):
        got_b.append(mvn_box(t[: k + 1], list(b[:k]) + [-np.inf], list(a[:k]) + [b[k]],
                             plan.drift))
    np.testing.assert_allclose(got_b, np.diff(np.r_[0.0, cum_b])[: len(got_b)], rtol=0,
                               atol=PROB_TOL)


def test_bounds_at_non_binding_futility_leaves_efficacy_unchanged():
    # Non-binding futility: the efficacy boundary is computed ignoring futility
    # (Jennison and Turnbull 2000, 7.3; common practice), so it equals the boundary of
    # the same plan without futility.
    with_f = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=4, futility="pocock-type")
    without = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=4)
    t = [0.3, 0.5, 0.8]
    a_f, b_f = GroupSequentialRule(with_f).boundaries(t)
    a_0, _ = GroupSequentialRule(without).boundaries(t)
    np.testing.assert_allclose(a_f, a_0, rtol=1e-10)
    assert b_f is not None and np.all(b_f < a_f)


def test_bounds_at_classical_plans_reproduce_published_constants():
    # Source: Jennison and Turnbull (2000) Tables 2.1 and 2.3 (from memory, as in
    # REFERENCES.md): two-sided 0.05, K = 5: Pocock C_P = 2.413; O'Brien-Fleming
    # C_B = 2.040 with boundary C_B sqrt(K / k). Tables round to 3 decimals.
    k = np.arange(1, 6)
    for name, expected in [("pocock", np.full(5, 2.413)),
                           ("obrien-fleming", 2.040 * np.sqrt(5 / k))]:
        plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=5, efficacy=name)
        a, _ = GroupSequentialRule(plan).boundaries(plan.info_fractions)
        # rounding of the tabulated constant, scaled for O'Brien-Fleming, plus 1e-4
        tol = (0.0005 * np.sqrt(5 / k) if name == "obrien-fleming" else 0.0005) + 1e-4
        assert np.all(np.abs(a - expected) <= tol), (name, a, expected)


def test_bounds_at_refuses_bad_fractions():
    # common practice: inputs validated at the public boundary, naming the argument
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=3)
    for bad in ([], [0.0, 0.5], [0.5, 0.4], [0.3, np.nan], [0.5, 1.0, 1.2]):
        with pytest.raises(ValueError, match="fractions"):
            GroupSequentialRule(plan).boundaries(bad)


# ---------------------------------------------------------------------------
# Decisions
# ---------------------------------------------------------------------------

N_MAX = 10_000   # total over both arms; look k of these helpers has 1000 k per arm


def _ns(k):
    return [1000 * (i + 1) for i in range(k)]


def test_decision_continue_with_projection():
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=5)
    an = seqtest.analyze(plan, continuous_looks([1.0], _ns(1)), metric="continuous",
                         max_n=N_MAX)
    assert an.decision == "continue" and an.stopped_at is None and an.final is None
    assert an.looks[0].information_fraction == pytest.approx(0.2)
    assert an.projection is not None


@pytest.mark.parametrize("z2, direction", [(4.0, "treatment_better"),
                                           (-4.0, "control_better")])
def test_decision_stop_efficacy_both_directions_two_sided(z2, direction):
    # two-sided O'Brien-Fleming-type plan: look 2 (t = 0.4) boundary 3.357
    # (DeMets and Lan 1994; REFERENCES.md), so |z| = 4 stops
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=5)
    an = seqtest.analyze(plan, continuous_looks([1.0, z2], _ns(2)), metric="continuous",
                         max_n=N_MAX)
    assert an.looks[1].efficacy_z == pytest.approx(3.357, abs=5e-4)
    assert an.decision == "stop_efficacy" and an.direction == direction
    assert an.stopped_at == 2 and an.final is not None and an.projection is None
    assert an.final.p_value < 0.05
    assert (an.final.ci_lower > 0) if z2 > 0 else (an.final.ci_upper < 0)


def test_decision_one_sided_ignores_the_wrong_direction():
    # A one-sided test rejects only for a positive effect (common practice).
    plan = seqtest.design(alpha=0.025, sides=1, power=0.9, looks=5)
    an = seqtest.analyze(plan, continuous_looks([1.0, -4.0], _ns(2)), metric="continuous",
                         max_n=N_MAX)
    assert an.decision == "continue"
    an = seqtest.analyze(plan, continuous_looks([1.0, 4.0], _ns(2)), metric="continuous",
                         max_n=N_MAX)
    assert an.decision == "stop_efficacy" and an.direction == "treatment_better"


def test_decision_stop_futility_binding():
    plan = seqtest.design(alpha=0.025, sides=1, power=0.9, looks=5,
                          futility="obrien-fleming-type", binding=True)
    an = seqtest.analyze(plan, continuous_looks([1.0, -1.5, 0.0], _ns(3)),
                         metric="continuous", max_n=N_MAX)
    assert an.looks[1].futility_z > -1.5
    assert an.decision == "stop_futility" and an.stopped_at == 2
    assert an.direction is None
    # the third look came after the stop
    assert len(an.looks) == 2
    assert any("not analysed" in w for w in an.warnings)


def test_decision_non_binding_futility_may_be_overruled():
    # A non-binding futility boundary may be ignored without harming the type I error
    # (Jennison and Turnbull 2000, 7.3; common practice): a crossing at an interim look
    # is reported, and later looks are still analysed.
    plan = seqtest.design(alpha=0.025, sides=1, power=0.9, looks=5,
                          futility="obrien-fleming-type")
    an = seqtest.analyze(plan, continuous_looks([1.0, -1.5], _ns(2)), metric="continuous",
                         max_n=N_MAX)
    assert an.decision == "stop_futility"
    an = seqtest.analyze(plan, continuous_looks([1.0, -1.5, 1.5], _ns(3)),
                         metric="continuous", max_n=N_MAX)
    assert an.looks[1].decision == "stop_futility"
    assert an.looks[2].futility_z < 1.5 < an.looks[2].efficacy_z
    assert an.decision == "continue" and len(an.looks) == 3
    assert any(w.startswith("look 2") and "non-binding" in w for w in an.warnings)


@pytest.mark.parametrize("sides", [1, 2])
def test_decision_complete_not_significant_and_final_spends_all(sides):
    # Source: Lan and DeMets (1983): the final look spends all the alpha left, so the
    # null probability of crossing at some look equals alpha exactly; checked with
    # scipy.stats.multivariate_normal.
    alpha = 0.05 if sides == 2 else 0.025
    plan = seqtest.design(alpha=alpha, sides=sides, power=0.9, looks=5)
    an = seqtest.analyze(plan, continuous_looks([0.5, 0.8, 1.0, 1.1, 1.5], _ns(5)),
                         metric="continuous", max_n=N_MAX)
    assert an.decision == "complete_not_significant" and an.stopped_at == 5
    assert an.final.p_value > alpha
    a = np.array([x.efficacy_z for x in an.looks])
    t = np.array([x.information_fraction for x in an.looks])
    lower = -a if sides == 2 else np.full(5, -np.inf)
    assert first_crossing_upper(t, a, lower).sum() == pytest.approx(alpha / sides,
                                                                    abs=5 * PROB_TOL)


@pytest.mark.parametrize("how", ["declared", "over-run"])
def test_final_look_spends_all_that_is_left(how):
    # Source: as above (Lan and DeMets 1983; scipy.stats.multivariate_normal). A look
    # declared final at t = 0.7, or over-running to t = 1.2, spends all the alpha left.
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=5)
    if how == "declared":
        looks, kw = continuous_looks([0.5, 1.0, 1.4], [1000, 2000, 3500]), {"final": True}
    else:
        looks, kw = continuous_looks([0.5, 1.0, 1.4], [1000, 2000, 6000]), {}
    an = seqtest.analyze(plan, looks, metric="continuous", max_n=N_MAX, **kw)
    assert an.decision == "complete_not_significant" and an.stopped_at == 3
    a = np.array([x.efficacy_z for x in an.looks])
    t = np.array([x.information_fraction for x in an.looks])
    assert first_crossing_upper(t, a, -a).sum() == pytest.approx(0.025, abs=3 * PROB_TOL)
    # a z between this final boundary and the interim boundary at the same fraction
    # stops for efficacy only because the look is final
    a_interim, _ = GroupSequentialRule(plan).boundaries(t[:2].tolist() + [min(t[2], 0.99)])
    z3 = 0.5 * (a[-1] + a_interim[-1])
    ns = [1000, 2000, 3500] if how == "declared" else [1000, 2000, 6000]
    an = seqtest.analyze(plan, continuous_looks([0.5, 1.0, z3], ns), metric="continuous",
                         max_n=N_MAX, **kw)
    assert an.decision == "stop_efficacy"


def test_looks_after_the_maximum_are_not_analysed():
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=3)
    an = seqtest.analyze(plan, continuous_looks([0.5, 1.0, 1.2], [2000, 5000, 6000]),
                         metric="continuous", max_n=N_MAX)
    assert len(an.looks) == 2 and an.stopped_at == 2
    assert an.decision == "complete_not_significant"
    assert any("reached the maximum information" in w for w in an.warnings)


@pytest.mark.parametrize("zs", [
    [1.5, 1.5, 1.5],
    [1.5, 1.5, 3.0],
    [0.5, 1.2, 1.5],
    [-3.0, 0.0, 0.0],
    [1.0, 2.6, 0.0],
    [0.5, 0.9, 0.0],
])
def test_vectorised_decide_agrees_with_analyze(zs):
    # DEVELOPERS.md: the simulator calls the very same decision code (vectorised);
    # decide() on one path must give the decision analyze() gives on that path,
    # including "complete without significance" at the final look of a plan with a
    # futility boundary (which there meets the efficacy boundary).
    plan = seqtest.design(alpha=0.025, sides=1, power=0.9, looks=3,
                          futility="obrien-fleming-type", binding=True)
    an = seqtest.analyze(plan, continuous_looks(zs, [1000, 2000, 3000]), metric="continuous",
                         max_n=6000)
    a, b = GroupSequentialRule(plan).boundaries(plan.info_fractions)
    stop, outcome = decide(np.array([zs]), a, b, 1)
    assert int(stop[0]) + 1 == an.stopped_at
    assert DECISIONS[int(outcome[0])] == an.decision


def test_decide_vectorised_shapes_and_sides():
    # Two-sided: |z| >= a stops for efficacy; the sign tells the direction.
    a = np.array([3.0, 2.5, 2.0])
    z = np.array([[3.1, 0, 0], [-3.2, 0, 0], [1.0, 2.6, 0], [1.0, 1.0, 1.0], [1.0, 1.0, -2.1]])
    stop, out = decide(z, a, None, 2)
    assert stop.tolist() == [0, 0, 1, 2, 2]
    assert [DECISIONS[o] for o in out] == [
        "stop_efficacy", "stop_efficacy", "stop_efficacy", "complete_not_significant",
        "stop_efficacy"]
    stop, out = decide(z, a, None, 1)
    assert [DECISIONS[o] for o in out][1] == "complete_not_significant"
    stop, out = decide(z[:, :2], a[:2], None, 2, final_last=False)
    assert stop.tolist() == [0, 0, 1, -1, -1]
    assert [DECISIONS[o] for o in out][3] == "continue"


# ---------------------------------------------------------------------------
# Stage-wise inference after a binding futility boundary
# ---------------------------------------------------------------------------

def test_final_inference_with_binding_futility_follows_the_stagewise_definition():
    # Source: Tsiatis, Rosner and Mehta (1984): the stage-wise p-value is the null
    # probability of an outcome at least as extreme under the plan's actual stopping
    # rule; with a binding futility boundary, paths stop below b_j, so the upward
    # p-value is sum_j P(b_i < Z_i < a_i, i < j; Z_j >= a_j) with z_T in place of a_T.
    # The median-unbiased estimate makes that probability 1/2. Computed with
    # scipy.stats.multivariate_normal.
    plan = seqtest.design(alpha=0.025, sides=1, power=0.9, looks=3,
                          futility="obrien-fleming-type", binding=True)
    zs = [0.2, 1.2, 2.2]
    an = seqtest.analyze(plan, continuous_looks(zs, [1000, 2000, 3000]), metric="continuous",
                         max_n=6000)
    assert an.decision == "stop_efficacy" and an.stopped_at == 3
    t = np.array([x.information_fraction for x in an.looks])
    a = np.array([x.efficacy_z for x in an.looks])
    b = np.array([x.futility_z for x in an.looks])
    up = a.copy()
    up[-1] = zs[-1]

    def p_up(drift):
        return first_crossing_upper(t, up, b, drift).sum()

    assert an.final.p_value == pytest.approx(p_up(0.0), abs=3 * PROB_TOL)
    # drift per unit sqrt(t) of an effect theta: theta * sqrt(I_T / t_T)
    scale = math.sqrt(an.looks[-1].information / t[-1])
    assert p_up(an.final.median_unbiased * scale) == pytest.approx(0.5, abs=3 * PROB_TOL)
    assert p_up(an.final.ci_lower * scale) == pytest.approx(0.025, abs=3 * PROB_TOL)


# ---------------------------------------------------------------------------
# Conditional power and projection
# ---------------------------------------------------------------------------

def test_projection_users_days_and_conditional_power():
    # Users still needed = (t_next - t_now) * N_max (common practice: the fraction
    # counts users); days = users / daily traffic. Conditional power against
    # scipy.stats.multivariate_normal on the conditional joint distribution of the
    # later z statistics (independent increments; Jennison and Turnbull 2000, 3.1).
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=5,
                          metric={"kind": "continuous", "sd": 1.0, "mde": 0.05})
    ss = plan.sample_size()
    n_max = ss.n_control + ss.n_treatment
    n1, n2 = round(0.2 * n_max / 2), round(0.45 * n_max / 2)   # look 2 moved to 0.45
    an = seqtest.analyze(plan, continuous_looks([0.6, 1.1], [n1, n2]), daily_traffic=800.0)
    assert an.decision == "continue"
    pr = an.projection
    t_now = an.looks[-1].information_fraction
    assert pr.next_look_fraction == pytest.approx(0.6)
    assert pr.more_units_to_next_look == pytest.approx((0.6 - t_now) * n_max, rel=1e-9)
    assert pr.more_units_to_end == pytest.approx((1 - t_now) * n_max, rel=1e-9)
    assert pr.days_to_next_look == pytest.approx(pr.more_units_to_next_look / 800.0)
    assert pr.days_to_end == pytest.approx(pr.more_units_to_end / 800.0)

    t_seen = [x.information_fraction for x in an.looks]
    tf = np.array([0.6, 0.8, 1.0])
    a_all, _ = GroupSequentialRule(plan).boundaries(t_seen + tf.tolist(), final=True)
    af = a_all[2:]
    z_now = an.looks[-1].z

    def cp_ref(drift):
        s = z_now * math.sqrt(t_now)
        mean = (s + drift * (tf - t_now)) / np.sqrt(tf)
        cov = (np.minimum.outer(tf, tf) - t_now) / np.sqrt(np.outer(tf, tf))
        dist = stats.multivariate_normal(mean, cov, seed=5, abseps=MVN_ABSEPS, releps=0.0)
        return 1 - dist.cdf(af, lower_limit=-af)

    assert pr.conditional_power_planned == pytest.approx(cp_ref(plan.drift), abs=PROB_TOL)
    drift_now = z_now / math.sqrt(t_now)
    assert pr.conditional_power_current == pytest.approx(cp_ref(drift_now), abs=PROB_TOL)
    for cp in (pr.conditional_power_planned, pr.conditional_power_current):
        assert 0.0 <= cp <= 1.0
    # the current trend (drift_now ~ 1.6) is weaker than the design drift (~3.24)
    assert drift_now < plan.drift
    assert pr.conditional_power_current < pr.conditional_power_planned


def test_projection_without_traffic_or_maximum():
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=5)
    an = seqtest.analyze(plan, continuous_looks([0.6], [1000]), metric="continuous",
                         max_n=N_MAX)
    assert an.projection.days_to_next_look is None
    assert an.projection.more_units_to_next_look == pytest.approx(2000.0)
    with pytest.raises(ValueError, match="daily_traffic"):
        seqtest.analyze(plan, continuous_looks([0.6], [1000]), metric="continuous",
                        max_n=N_MAX, daily_traffic=-5)


# ---------------------------------------------------------------------------
# Bad input
# ---------------------------------------------------------------------------

BINARY_PLAN = dict(alpha=0.05, sides=2, power=0.9, looks=3,
                   metric={"kind": "binary", "baseline": 0.1, "mde": 0.02})


def _b(nc, sc, nt, st):
    return {"control": {"n": nc, "successes": sc}, "treatment": {"n": nt, "successes": st}}


BAD_LOOKS = [
    ("backwards", [_b(1000, 100, 1000, 110), _b(900, 120, 2000, 220)], 2, "control", "n"),
    ("successes backwards", [_b(1000, 100, 1000, 110), _b(2000, 90, 2000, 220)], 2,
     "control", "successes"),
    ("successes above n", [_b(1000, 100, 1000, 1001)], 1, "treatment", "successes"),
    ("negative count", [_b(1000, -1, 1000, 110)], 1, "control", "successes"),
    ("negative n", [_b(1000, 100, 1000, 110), _b(2000, 200, -5, 0)], 2, "treatment", "n"),
    ("n of 0", [_b(0, 0, 1000, 110)], 1, "control", "n"),
    ("not a number", [_b(1000, 100, "many", 110)], 1, "treatment", "n"),
    ("missing field", [{"control": {"n": 10}, "treatment": {"n": 10, "successes": 1}}], 1,
     "control", "successes"),
]


@pytest.mark.parametrize("label, looks, look, arm, fld", BAD_LOOKS,
                         ids=[b[0] for b in BAD_LOOKS])
def test_bad_looks_are_refused_naming_look_arm_and_field(label, looks, look, arm, fld):
    plan = seqtest.design(**BINARY_PLAN)
    with pytest.raises(LookDataError) as exc:
        seqtest.analyze(plan, looks)
    e = exc.value
    assert isinstance(e, ValueError)
    assert (e.look, e.arm, e.field) == (look, arm, fld)
    msg = str(e)
    assert f"look {look}" in msg and arm in msg and fld in msg


def test_negative_sd_is_refused():
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=3,
                          metric={"kind": "continuous", "sd": 1.0, "mde": 0.1})
    looks = [{"control": {"n": 100, "mean": 1.0, "sd": 1.0},
              "treatment": {"n": 100, "mean": 1.1, "sd": -0.5}}]
    with pytest.raises(LookDataError) as exc:
        seqtest.analyze(plan, looks)
    assert (exc.value.look, exc.value.arm, exc.value.field) == (1, "treatment", "sd")
    assert "look 1" in str(exc.value) and "treatment" in str(exc.value)


def test_a_look_without_new_data_is_refused():
    plan = seqtest.design(**BINARY_PLAN)
    with pytest.raises(LookDataError, match="look 2"):
        seqtest.analyze(plan, [_b(1000, 100, 1000, 110), _b(1000, 100, 1000, 110)])


def test_bad_arguments_are_refused():
    plan = seqtest.design(**BINARY_PLAN)
    looks = [_b(1000, 100, 1000, 110)]
    with pytest.raises(ValueError, match="looks"):
        seqtest.analyze(plan, [])
    with pytest.raises(ValueError, match="fraction"):
        seqtest.analyze(plan, looks, fraction="users")
    with pytest.raises(ValueError, match="metric"):
        seqtest.analyze(plan, looks, metric="continuous")
    with pytest.raises(ValueError, match="max_n"):
        seqtest.analyze(plan, looks, max_n=0)
    bare = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=3)
    with pytest.raises(ValueError, match="metric"):
        seqtest.analyze(bare, looks)
    with pytest.raises(ValueError, match="max_n"):
        seqtest.analyze(bare, looks, metric="binary")
    with pytest.raises(ValueError, match="plan"):
        seqtest.analyze(object(), looks)


# ---------------------------------------------------------------------------
# The result document
# ---------------------------------------------------------------------------

DOC_CASES = {
    "continue": (dict(alpha=0.05, sides=2, power=0.9, looks=5), [1.0, 1.2]),
    "efficacy two-sided": (dict(alpha=0.05, sides=2, power=0.9, looks=5), [1.0, 4.0]),
    "one-sided stop": (dict(alpha=0.025, sides=1, power=0.9, looks=5), [1.0, 4.0]),
    "one-sided futility": (dict(alpha=0.025, sides=1, power=0.9, looks=5,
                                futility="obrien-fleming-type", binding=True), [-2.5]),
    "complete": (dict(alpha=0.05, sides=2, power=0.9, looks=5), [0.1] * 5),
}


@pytest.mark.parametrize("case", list(DOC_CASES))
def test_to_dict_is_strict_json(case):
    # json.dumps(allow_nan=False) refuses nan and inf: the document is plain JSON.
    kw, zs = DOC_CASES[case]
    plan = seqtest.design(**kw)
    an = seqtest.analyze(plan, continuous_looks(zs, _ns(len(zs))), metric="continuous",
                         max_n=N_MAX)
    d = an.to_dict()
    text = json.dumps(d, allow_nan=False)
    back = json.loads(text)
    assert back["decision"] == an.decision in DECISIONS
    assert len(back["looks"]) == len(an.looks)
    for row, look in zip(back["looks"], an.looks, strict=True):
        for key in ("z", "efficacy_z", "futility_z", "information_fraction"):
            assert key in row
        assert row["z"] == pytest.approx(look.z)
        assert row["information_fraction"] == pytest.approx(look.information_fraction)
        if math.isfinite(look.efficacy_z):
            assert row["efficacy_z"] == pytest.approx(look.efficacy_z)
        else:
            assert row["efficacy_z"] is None


def test_to_dict_with_a_degenerate_look_is_strict_json():
    # zero variance in both arms: se = inf, z = 0 (metrics.effect); still plain JSON
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=5)
    looks = [{"control": {"n": 500, "mean": 1.0, "sd": 0.0},
              "treatment": {"n": 500, "mean": 1.0, "sd": 0.0}}]
    an = seqtest.analyze(plan, looks, metric="continuous", max_n=N_MAX)
    assert an.decision == "continue" and an.warnings
    json.dumps(an.to_dict(), allow_nan=False)


# ---------------------------------------------------------------------------
# Information fractions and plan documents
# ---------------------------------------------------------------------------

def test_information_fraction_is_observed_over_maximum_information():
    # Maximum information I_max = (drift / delta)^2 (Jennison and Turnbull 2000, 7.2:
    # the fixed-sample information times the inflation factor); with
    # fraction="information" the fraction is (1 / se^2) / I_max.
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=3,
                          metric={"kind": "continuous", "sd": 1.0, "mde": 0.1})
    i_max = (plan.drift / 0.1) ** 2
    fixed = ((stats.norm.isf(0.025) + stats.norm.isf(0.1)) / 0.1) ** 2
    assert i_max == pytest.approx(fixed * plan.inflation, rel=1e-9)
    looks = [{"control": {"n": 700, "mean": 1.0, "sd": 1.1},
              "treatment": {"n": 690, "mean": 1.05, "sd": 0.9}}]
    an = seqtest.analyze(plan, looks, fraction="information")
    se = math.sqrt(1.1 ** 2 / 700 + 0.9 ** 2 / 690)
    assert an.looks[0].se == pytest.approx(se, rel=1e-12)
    assert an.looks[0].information_fraction == pytest.approx(1 / se**2 / i_max, rel=1e-9)


def test_analyze_reads_a_plan_document():
    # DEVELOPERS.md: analyze accepts the plan document written by Plan.to_dict()
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=3,
                          metric={"kind": "binary", "baseline": 0.1, "mde": 0.02})
    looks = [_b(1000, 100, 1000, 118), _b(2000, 205, 2000, 247)]
    doc = json.loads(json.dumps(plan.to_dict()))
    assert seqtest.analyze(doc, looks).to_dict() == seqtest.analyze(plan, looks).to_dict()


def test_information_fraction_with_a_zero_variance_look_names_the_look():
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=3,
                          metric={"kind": "continuous", "sd": 1.0, "mde": 0.1})
    looks = [{"control": {"n": 500, "mean": 1.0, "sd": 0.0},
              "treatment": {"n": 500, "mean": 1.0, "sd": 0.0}}]
    try:
        an = seqtest.analyze(plan, looks, fraction="information")
    except ValueError as exc:        # refusing is fine if the message names the look
        assert "look 1" in str(exc)
    else:                            # or going on, as fraction="sample" does, with a warning
        assert an.decision == "continue" and any("look 1" in w for w in an.warnings)


# ---------------------------------------------------------------------------
# Extreme but valid data (found by the service's fuzz test)
# ---------------------------------------------------------------------------

def test_huge_z_decides_and_explains_missing_adjusted_inference():
    # |z| near 137 is far beyond the integration grid (|z| < 40): the decision is
    # still given, the adjusted inference is withheld with a warning, not a crash.
    plan = seqtest.design(looks=3, metric={"kind": "binary", "baseline": 0.1, "mde": 0.02})
    an = seqtest.analyze(plan, [{"control": {"n": 1964, "successes": 23},
                                 "treatment": {"n": 1964, "successes": 1805}}])
    assert an.decision == "stop_efficacy" and an.direction == "treatment_better"
    assert an.final is None and any("beyond" in w for w in an.warnings)
    json.dumps(an.to_dict(), allow_nan=False)


def test_zero_variance_final_look_has_no_adjusted_inference():
    plan = seqtest.design(looks=3, metric={"kind": "continuous", "sd": 1.0, "mde": 0.2})
    zero = {"n": 1000, "sum": 0.0, "sum_sq": 0.0}
    an = seqtest.analyze(plan, [{"control": zero, "treatment": zero}], final=True)
    assert an.decision == "complete_not_significant" and an.final is None
    assert any("no variation" in w for w in an.warnings)


def test_absurd_totals_are_refused_naming_the_field():
    plan = seqtest.design(looks=3, metric={"kind": "continuous", "sd": 1.0, "mde": 0.2})
    arm = {"n": 1e300, "sum": 0.0, "sum_sq": 1e300}
    with pytest.raises(LookDataError) as exc:
        seqtest.analyze(plan, [{"control": arm, "treatment": arm}])
    assert (exc.value.look, exc.value.arm, exc.value.field) == (1, "control", "n")


def test_non_binding_futility_crossings_are_one_warning_naming_the_looks():
    # A non-binding plan whose looks 1, 2 and 4 fall inside the futility band while
    # the experiment goes on (looks 3 and 5 between the boundaries; a crossing at
    # the latest look is the advice to stop): one warning lists them, in order.
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=6,
                          futility="pocock-type", binding=False)
    max_n = 24_000
    ns = [2000, 4000, 6000, 8000, 10000]          # fractions 1/6 .. 5/6
    t = 2 * np.array(ns) / max_n
    eff, fut = GroupSequentialRule(plan).boundaries(t)
    inside, between = 0.5 * fut, 0.5 * (fut + eff)
    zs = [inside[0], inside[1], between[2], inside[3], between[4]]
    an = seqtest.analyze(plan, continuous_looks(zs, ns), metric="continuous", max_n=max_n)
    assert an.decision == "continue"
    notes = [w for w in an.warnings if "non-binding futility" in w]
    assert notes == ["looks 1..2 and 4 crossed the non-binding futility boundary and the "
                     "experiment went on; that keeps the type I error"]
