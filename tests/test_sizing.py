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
from statsmodels.stats import proportion as sm_proportion
from statsmodels.stats.power import NormalIndPower, normal_power_het

import seqtest
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
# Two proportions, unpooled variance
# ---------------------------------------------------------------------------

PROPORTIONS = [
    # (baseline, mde, relative, alpha, sides, power, allocation)
    (0.10, 0.02, False, 0.05, 2, 0.8, 1.0),
    (0.10, 0.02, False, 0.05, 2, 0.8, 2.0),
    (0.50, -0.05, False, 0.05, 2, 0.9, 1.0),
    (0.03, 0.10, True, 0.05, 2, 0.8, 1.0),
    (0.20, -0.15, True, 0.025, 1, 0.9, 0.7),
]


def unpooled(baseline, mde, relative, q):
    p_c = baseline
    p_t = baseline * (1 + mde) if relative else baseline + mde
    return p_t - p_c, p_c * (1 - p_c), p_t * (1 - p_t), q


@pytest.mark.parametrize("baseline, mde, relative, alpha, sides, power, q", PROPORTIONS)
def test_proportions_by_hand_and_statsmodels(baseline, mde, relative, alpha, sides, power, q):
    # The module documents the unpooled variance at the design alternative:
    # n_c = (z_a + z_b)^2 (p_c(1-p_c) + p_t(1-p_t)/q) / (p_t - p_c)^2 (standard
    # formula). statsmodels.NormalIndPower gives the same with the standardised
    # effect d = delta / sigma_eff, sigma_eff^2 = (v_c + v_t/q) / (1 + 1/q).
    plan = seqtest.design(alpha=alpha, sides=sides, power=power, looks=1)
    ss = sample_size(plan, kind="binary", baseline=baseline, mde=mde, relative=relative,
                     allocation=q)
    delta, v_c, v_t, q = unpooled(baseline, mde, relative, q)
    n_hand = zsum(alpha, power, sides) ** 2 * (v_c + v_t / q) / delta ** 2
    es = abs(delta) / math.sqrt((v_c + v_t / q) / (1 + 1 / q))
    ref = NormalIndPower().solve_power(effect_size=es, alpha=alpha / sides, power=power,
                                       ratio=q, alternative="larger")
    assert n_hand == pytest.approx(ref, rel=1e-7)  # statsmodels' root finder, as above
    assert ss.max_information * (v_c + v_t / q) == pytest.approx(n_hand, rel=1e-12)
    assert ss.delta == pytest.approx(delta, rel=1e-12)
    assert ss.n_control == math.ceil(n_hand)
    assert ss.n_treatment == math.ceil(q * n_hand * (1 - 1e-12))
    # rounding up is minimal: statsmodels.normal_power_het (std per unit of n_c
    # equal under null and alternative, unpooled) reaches the power at n_control
    # and not at n_control - 1
    sd_unit = math.sqrt(v_c + v_t / q)
    kw = dict(diff=abs(delta), alpha=alpha / sides, std_null=sd_unit,
              std_alternative=sd_unit, alternative="larger")
    assert normal_power_het(nobs=ss.n_control, **kw) >= power
    assert normal_power_het(nobs=ss.n_control - 1, **kw) < power


def test_rates_by_hand():
    # Poisson counts per unit exposure: Var(rate_t - rate_c) = l_c/E_c + l_t/E_t
    # (standard Poisson variance, common practice), unpooled at the alternative.
    ss = sample_size(FIXED_80, kind="rate", baseline=2.0, mde=0.1, allocation=1.5)
    e_c = zsum(0.05, 0.8, 2) ** 2 * (2.0 + 2.1 / 1.5) / 0.1 ** 2
    assert ss.n_control == math.ceil(e_c)
    assert ss.n_treatment == math.ceil(1.5 * e_c)
    rel = sample_size(FIXED_80, kind="rate", baseline=2.0, mde=0.05, relative=True,
                      allocation=1.5)
    assert rel.n_control == ss.n_control  # 5% of 2.0 is 0.1


@pytest.mark.parametrize("mde", [0.2, -0.2, 0.5])
def test_relative_scale_sizes_the_statistic_monitoring_uses(mde):
    # Monitoring (seqtest.monitor docstring) tests a relative effect on log(1 + r)
    # with the unpooled delta-method variance; statsmodels'
    # test_proportions_2indep(compare="ratio", method="log") is that statistic.
    # At the planned size and the expected counts of the design alternative, a
    # one-look plan's statistic must reach its drift z_{1-a/2} + z_{1-b} (rounding
    # n up can only add about 1 / (2 n) relative).
    ss = sample_size(FIXED_80, kind="binary", baseline=0.1, mde=mde, relative=True,
                     scale="relative")
    n = ss.n_control
    p_c, p_t = 0.1, 0.1 * (1 + mde)
    res = sm_proportion.test_proportions_2indep(p_t * n, n, p_c * n, n, compare="ratio",
                                                method="log", correction=False)
    drift = zsum(0.05, 0.8, 2)
    assert abs(res.statistic) == pytest.approx(drift, rel=1.0 / n + 1e-9)


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
    plan = seqtest.design(power=0.8, **kw)
    metric = dict(kind="binary", baseline=0.1, mde=0.02, allocation=1.5)
    ss = sample_size(plan, **metric)
    fixed = sample_size(seqtest.design(alpha=plan.alpha, sides=plan.sides, power=0.8,
                                       looks=1), **metric)
    delta, v_c, v_t, q = unpooled(0.1, 0.02, False, 1.5)
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
    (dict(kind="ratio", mde=0.1), "metric.kind"),
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
