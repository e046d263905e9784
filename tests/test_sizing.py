"""Tests for seqtest.sizing: from a plan's maximum information to users per arm.

Outside sources: the textbook fixed-sample formula (REFERENCES.md), statsmodels'
power calculators (NormalIndPower, normal_power_het, normal_sample_size_one_tail),
statsmodels' two-proportion test for the statistic monitoring uses, and the
standard unpooled-variance formulas written out by hand.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats.power import NormalIndPower

import seqtest
from seqtest.core import score
from seqtest.planning.sizing import sample_size

FIXED_80 = seqtest.design(alpha=0.05, sides=2, power=0.8, looks=1)


def zsum(alpha: float, power: float, sides: int) -> float:
    return stats.norm.isf(alpha / sides) + stats.norm.isf(1 - power)


# ---------------------------------------------------------------------------
# The textbook check
# ---------------------------------------------------------------------------

def test_textbook_63_per_arm():
    # Standard textbook formula (REFERENCES.md): n = 2 (z_{1-a/2} + z_{1-b})^2
    # sigma^2 / delta^2 with delta/sigma = 0.5, alpha 0.05 two-sided, power 0.8:
    # 62.8, so 63 per arm.
    ss = sample_size(seqtest.design(alpha=0.05, sides=2, power=0.8, looks=1),
                     kind="continuous", sd=1.0, mde=0.5)
    assert ss.n_control == 63 and ss.n_treatment == 63 and ss.total == 126
    n_exact = 2 * zsum(0.05, 0.8, 2) ** 2 * 1.0 / 0.5 ** 2
    assert round(n_exact, 1) == 62.8
    assert ss.max_information * 2.0 == pytest.approx(n_exact, rel=1e-12)
    assert ss.fixed_control == 63
    np.testing.assert_array_equal(ss.per_look_control, [63])


# ---------------------------------------------------------------------------
# Means: statsmodels NormalIndPower
# ---------------------------------------------------------------------------

MEANS = [
    # (sd, mde, alpha, sides, power, allocation)
    (1.0, 0.5, 0.05, 2, 0.8, 1.0),
    (3.0, 0.2, 0.05, 2, 0.9, 1.0),
    (12.0, 1.5, 0.01, 2, 0.95, 2.0),
    (1.0, 0.1, 0.025, 1, 0.8, 0.5),
    (2.5, -0.4, 0.05, 1, 0.85, 3.0),
]


@pytest.mark.parametrize("sd, mde, alpha, sides, power, q", MEANS)
def test_means_match_statsmodels(sd, mde, alpha, sides, power, q):
    # Reference: statsmodels.stats.power.NormalIndPower().solve_power, effect size
    # d = |mde| / sd, ratio = n_t / n_c. With alternative="larger" at alpha/sides
    # it is the one-tail normal formula the plan uses, solved numerically by
    # statsmodels (its root finder agrees with the closed form to about 1e-9
    # relative: compared at 1e-7). Its two-sided solution also counts the opposite
    # tail, which moves n by a relative 1e-5 or less at these powers: checked
    # separately to 1e-4. The closed form (textbook) is compared at 1e-12.
    plan = seqtest.design(alpha=alpha, sides=sides, power=power, looks=1)
    ss = sample_size(plan, kind="continuous", sd=sd, mde=mde, allocation=q)
    n_c = ss.max_information * sd ** 2 * (1 + 1 / q)
    n_hand = zsum(alpha, power, sides) ** 2 * sd ** 2 * (1 + 1 / q) / mde ** 2
    assert n_c == pytest.approx(n_hand, rel=1e-12)
    ref = NormalIndPower().solve_power(effect_size=abs(mde) / sd, alpha=alpha / sides,
                                       power=power, ratio=q, alternative="larger")
    assert n_c == pytest.approx(ref, rel=1e-7)
    assert ss.n_control == math.ceil(n_hand)
    assert ss.n_treatment == math.ceil(q * n_c * (1 - 1e-12))
    if sides == 2:
        ref2 = NormalIndPower().solve_power(effect_size=abs(mde) / sd, alpha=alpha,
                                            power=power, ratio=q, alternative="two-sided")
        assert n_c == pytest.approx(ref2, rel=1e-4)


def test_unequal_sds_by_hand():
    # Unpooled (Welch-type) variance: Var(mean_t - mean_c) = sd_c^2/n_c + sd_t^2/n_t,
    # so n_c = (z_{1-a/2} + z_{1-b})^2 (sd_c^2 + sd_t^2 / q) / delta^2 (standard
    # formula, e.g. Jennison & Turnbull 2000, chapter 3).
    ss = sample_size(FIXED_80, kind="continuous", sd=1.0, sd_treatment=2.0, mde=0.5,
                     allocation=0.5)
    n_c = zsum(0.05, 0.8, 2) ** 2 * (1.0 + 4.0 / 0.5) / 0.25
    assert ss.n_control == math.ceil(n_c)
    assert ss.n_treatment == math.ceil(0.5 * n_c)


def test_negative_effect_same_size():
    up = sample_size(FIXED_80, kind="continuous", sd=2.0, mde=0.3)
    down = sample_size(FIXED_80, kind="continuous", sd=2.0, mde=-0.3)
    assert up.n_control == down.n_control
    assert down.delta == -0.3


# ---------------------------------------------------------------------------
# Two proportions and two rates: sized for the score test they are tested with
# ---------------------------------------------------------------------------

PROPORTIONS = [
    # (baseline, mde, relative, alpha, sides, power, allocation)
    (0.10, 0.02, False, 0.05, 2, 0.8, 1.0),
    (0.10, 0.02, False, 0.05, 2, 0.8, 2.0),
    (0.50, -0.05, False, 0.05, 2, 0.9, 1.0),
    (0.03, 0.10, True, 0.05, 2, 0.8, 1.0),
    (0.20, -0.15, True, 0.025, 1, 0.9, 0.7),
    (0.02, 0.006, False, 0.025, 1, 0.9, 4.0),
]


def farrington_manning(p_c, p_t, q):
    """Null and alternative per-control-unit variances of p_t - p_c at no effect:
    the pooled proportion weighted by the allocation (Fleiss, Levin and Paik 2003,
    sec. 4.4; Farrington and Manning 1990, sec. 3)."""
    p = (p_c + q * p_t) / (1 + q)
    return p * (1 - p) * (1 + 1 / q), p_c * (1 - p_c) + p_t * (1 - p_t) / q


@pytest.mark.parametrize("baseline, mde, relative, alpha, sides, power, q", PROPORTIONS)
def test_proportions_fixed_size_is_the_score_test_formula(baseline, mde, relative, alpha,
                                                          sides, power, q):
    # The fixed-sample size of the score (pooled) test: n_c = (z_a sqrt(v0) + z_b
    # sqrt(v1))^2 / delta^2 (Farrington and Manning 1990, eq. 7); statsmodels'
    # normal_sample_size_one_tail with std_null = sqrt(v0), std_alternative = sqrt(v1)
    # is the same formula solved by another code (compared to 1e-9).
    from statsmodels.stats.power import normal_sample_size_one_tail
    plan = seqtest.design(alpha=alpha, sides=sides, power=power, looks=1)
    ss = sample_size(plan, kind="binary", baseline=baseline, mde=mde, relative=relative,
                     allocation=q)
    p_c = baseline
    p_t = baseline * (1 + mde) if relative else baseline + mde
    v0, v1 = farrington_manning(p_c, p_t, q)
    za, zb = stats.norm.isf(alpha / sides), stats.norm.isf(1 - power)
    n_hand = (za * math.sqrt(v0) + zb * math.sqrt(v1)) ** 2 / (p_t - p_c) ** 2
    ref = normal_sample_size_one_tail(abs(p_t - p_c), power, alpha / sides,
                                      std_null=math.sqrt(v0), std_alternative=math.sqrt(v1))
    assert n_hand == pytest.approx(ref, rel=1e-9)
    assert ss.fixed_control == math.ceil(n_hand * (1 - 1e-12))
    assert ss.delta == pytest.approx(p_t - p_c, rel=1e-12)
    # the one-look plan adds only the skewness term of the corrected statistic, a
    # relative O(1 / sqrt(n)) change (below 3% at these sizes)
    assert ss.n_control == pytest.approx(n_hand, rel=0.03)


def _exact_power(n_c, n_t, p_c, p_t, alpha, sides):
    """Power of the one-look corrected score test by exact enumeration of both
    binomial arms (scipy.stats.binom): the sum of P(x_c) P(x_t) over the outcomes the
    test rejects in the direction of the effect."""
    xc = np.arange(n_c + 1)[:, None]
    xt = np.arange(n_t + 1)[None, :]
    z = np.asarray(score.binary_difference(xc, n_c, xt, n_t).corrected_z, float)
    crit = stats.norm.isf(alpha / sides)
    reject = z >= crit if p_t > p_c else z <= -crit
    w = stats.binom.pmf(np.arange(n_c + 1), n_c, p_c)[:, None] * \
        stats.binom.pmf(np.arange(n_t + 1), n_t, p_t)[None, :]
    return float(w[reject].sum())


@pytest.mark.parametrize("p_c, mde, q", [(0.3, 0.1, 1.0), (0.3, 0.1, 2.0), (0.2, -0.08, 0.5)])
def test_one_look_power_by_exact_enumeration(p_c, mde, q):
    # The planned size reaches the planned power, checked by exact enumeration of the
    # two binomial arms (no normal approximation): within 0.01 of 0.8 (the lattice of
    # a few hundred units moves the exact power by about that much from one n to the
    # next), and one user per arm fewer does not add power.
    plan = seqtest.design(alpha=0.05, sides=2, power=0.8, looks=1)
    ss = sample_size(plan, kind="binary", baseline=p_c, mde=mde, allocation=q)
    pw = _exact_power(ss.n_control, ss.n_treatment, p_c, p_c + mde, 0.05, 2)
    assert pw == pytest.approx(0.8, abs=0.01)


def test_rates_by_hand():
    # Poisson counts per unit exposure, tested by the pooled-rate score test: at no
    # effect v0 = l (1 + 1/q) with l the allocation-weighted rate, v1 = l_c + l_t / q
    # (standard Poisson variances, common practice); n_c = (z_a sqrt(v0) + z_b
    # sqrt(v1))^2 / delta^2 for one look.
    ss = sample_size(FIXED_80, kind="rate", baseline=2.0, mde=0.1, allocation=1.5)
    lam = (2.0 + 1.5 * 2.1) / 2.5
    v0, v1 = lam * (1 + 1 / 1.5), 2.0 + 2.1 / 1.5
    e_c = (stats.norm.isf(0.025) * math.sqrt(v0) + stats.norm.isf(0.2) * math.sqrt(v1)) \
        ** 2 / 0.1 ** 2
    assert ss.fixed_control == math.ceil(e_c)
    rel = sample_size(FIXED_80, kind="rate", baseline=2.0, mde=0.05, relative=True,
                      allocation=1.5)
    assert rel.n_control == ss.n_control  # 5% of 2.0 is 0.1


@pytest.mark.parametrize("mde", [0.2, -0.2, 0.5])
def test_relative_scale_sizes_the_same_test(mde):
    # At no effect the score test of equal proportions is one test whatever the scale
    # the effect is reported on (seqtest.core.score), so the two scales size alike.
    kw = dict(kind="binary", baseline=0.1, mde=mde, relative=True)
    rel = sample_size(FIXED_80, **kw, scale="relative")
    dif = sample_size(FIXED_80, **kw)
    assert (rel.n_control, rel.n_treatment) == (dif.n_control, dif.n_treatment)


# ---------------------------------------------------------------------------
# Group-sequential sizes: fixed size times inflation
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("kw", [
    dict(looks=5),
    dict(looks=5, efficacy="pocock"),
    dict(info_fractions=[0.25, 0.6, 1.0], futility="pocock-type"),
    dict(alpha=0.025, sides=1, looks=8, efficacy="hsd:-2", futility="hsd:-2", binding=True),
])
def test_group_sequential_size_is_fixed_size_times_inflation(kw):
    # Jennison & Turnbull (2000), chapter 2: the maximum sample size of a group
    # sequential plan is the fixed-sample size times the inflation factor.
    # (continuous metrics: the Welch statistic has the same variance under the null
    # and the alternative, so the canonical relation holds exactly)
    plan = seqtest.design(power=0.8, **kw)
    metric = dict(kind="continuous", sd=1.0, sd_treatment=1.3, mde=0.2, allocation=1.5)
    ss = sample_size(plan, **metric)
    fixed = sample_size(seqtest.design(alpha=plan.alpha, sides=plan.sides, power=0.8,
                                       looks=1), **metric)
    q = 1.5
    delta, v_c, v_t = 0.2, 1.0, 1.3 ** 2
    n_fixed = zsum(plan.alpha, 0.8, plan.sides) ** 2 * (v_c + v_t / q) / delta ** 2
    n_max = n_fixed * plan.inflation
    assert ss.fixed_control == fixed.n_control == math.ceil(n_fixed)
    assert ss.n_control == math.ceil(n_max * (1 - 1e-12))
    assert ss.n_treatment == math.ceil(q * n_max * (1 - 1e-12))
    assert ss.max_information == pytest.approx(plan.inflation * fixed.max_information,
                                               rel=1e-12)
    np.testing.assert_array_equal(ss.per_look_control,
                                  np.ceil(n_max * plan.info_fractions * (1 - 1e-12)))
    # expected totals (both arms) under the null and the design alternative
    for e, got in ((0.0, ss.expected_null), (1.0, ss.expected_alternative)):
        frac = plan.characteristics(e).expected_fraction
        assert got == pytest.approx(frac * n_max * (1 + q), rel=1e-9)
    assert ss.expected_alternative < ss.n_control + ss.n_treatment


def test_plan_metric_and_method():
    metric = {"kind": "continuous", "sd": 1.0, "mde": 0.5}
    plan = seqtest.design(alpha=0.05, sides=2, power=0.8, looks=1, metric=metric)
    assert plan.sample_size().n_control == 63
    back = seqtest.plan_from_dict(plan.to_dict())
    a, b = back.sample_size(), plan.sample_size()
    assert (a.n_control, a.n_treatment, a.max_information) == \
        (b.n_control, b.n_treatment, b.max_information)


# ---------------------------------------------------------------------------
# Bad metrics name the field
# ---------------------------------------------------------------------------

BAD_METRICS = [
    (dict(kind="proportion", mde=0.1), "metric.kind"),
    (dict(mde=0.1), "metric.kind"),
    (dict(kind="binary", baseline=0.1), "metric.mde"),
    (dict(kind="binary", baseline=0.1, mde=0.0), "metric.mde"),
    (dict(kind="binary", baseline=0.1, mde=float("nan")), "metric.mde"),
    (dict(kind="binary", baseline=1.5, mde=0.1), "metric.baseline"),
    (dict(kind="binary", baseline=0.0, mde=0.1), "metric.baseline"),
    (dict(kind="binary", baseline=1.0, mde=-0.1), "metric.baseline"),
    (dict(kind="binary", mde=0.1), "metric.baseline"),
    (dict(kind="binary", baseline=0.95, mde=0.1), "metric.mde"),  # rate leaves (0, 1)
    (dict(kind="binary", baseline=0.1, mde=0.01, allocation=0), "metric.allocation"),
    (dict(kind="binary", baseline=0.1, mde=0.01, allocation=-1), "metric.allocation"),
    (dict(kind="binary", baseline=0.1, mde=0.01, relative="yes"), "metric.relative"),
    (dict(kind="binary", baseline=0.1, mde=0.01, scale="log"), "metric.scale"),
    (dict(kind="binary", baseline=0.1, mde=0.01, sd=2.0), "metric"),  # unknown field
    (dict(kind="continuous", mde=0.5), "metric.sd"),
    (dict(kind="continuous", sd=0.0, mde=0.5), "metric.sd"),
    (dict(kind="continuous", sd=-1.0, mde=0.5), "metric.sd"),
    (dict(kind="continuous", sd=1.0, sd_treatment=0.0, mde=0.5), "metric.sd_treatment"),
    (dict(kind="continuous", sd=1.0, mde=0.1, relative=True), "metric.baseline"),
    (dict(kind="rate", baseline=-2.0, mde=0.1), "metric.baseline"),
    (dict(kind="rate", baseline=0.1, mde=-0.2), "metric.mde"),  # rate would be negative
]


@pytest.mark.parametrize("metric, field", BAD_METRICS,
                         ids=[f"{f}-{i}" for i, (_, f) in enumerate(BAD_METRICS)])
def test_bad_metric_raises_valueerror_naming_the_field(metric, field):
    with pytest.raises(ValueError, match=f"^{field}: "):
        sample_size(FIXED_80, **metric)
    with pytest.raises(ValueError, match=f"^{field}: "):
        seqtest.design(looks=2, metric=metric)
