"""What a look shows can be checked by eye: one scale for z, its standard error and the
boundaries; and a word of warning where the normal approximation is poor.

Sources: the log-ratio test of a relative effect (delta method; Casella and Berger 2002,
Sec. 5.5.4) and the mixture boundary of Robbins (1970) / Johari et al. (2022), as
implemented in seqtest.core; the rule of thumb of at least about 5 to 10 successes and
failures per arm for the normal approximation of a proportion is common practice.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import seqtest
from seqtest.core import score
from seqtest.core.normal_mixture import half_width


def _binary_looks(rates_c, rates_t, sizes):
    return [{"control": {"n": n, "successes": round(n * pc)},
             "treatment": {"n": n, "successes": round(n * pt)}}
            for pc, pt, n in zip(rates_c, rates_t, sizes, strict=True)]


GS_RELATIVE = {
    "binary": {"kind": "binary", "baseline": 0.045, "mde": 0.1, "relative": True,
               "scale": "relative"},
    "continuous": {"kind": "continuous", "baseline": 20.0, "sd": 30.0, "mde": 0.05,
                   "relative": True, "scale": "relative"},
}


def _looks(kind, n, lifts):
    if kind == "binary":
        return _binary_looks([0.045] * len(n), [0.045 * (1 + x) for x in lifts], n)
    return [{"control": {"n": int(m), "mean": 20.0, "sd": 30.0},
             "treatment": {"n": int(m), "mean": 20.0 * (1 + x), "sd": 30.0}}
            for m, x in zip(n, lifts, strict=True)]


@pytest.mark.parametrize("kind", ["binary", "continuous"])
@pytest.mark.parametrize("sides", [1, 2])
def test_group_sequential_relative_look_is_on_one_scale(kind, sides):
    plan = seqtest.design(alpha=0.05 if sides == 2 else 0.025, sides=sides, looks=4,
                          metric=GS_RELATIVE[kind])
    n = plan.n_control
    an = seqtest.analyze(plan, _looks(kind, n, [0.0, 0.09, 0.11, 0.13]))
    for lk in an.looks:
        if kind == "binary":
            # binary: the score test of equal proportions runs on the lift itself, with
            # the se restricted to the null; z is its skewness correction
            assert an.test_scale == "relative"
            assert lk.test_estimate == pytest.approx(lk.estimate, rel=1e-12)
            assert lk.z == pytest.approx(
                float(score.corrected_z(lk.test_estimate / lk.se, lk.skewness)), rel=1e-12)
            assert lk.skewness == pytest.approx(skewness(lk), rel=1e-9, abs=1e-15)
        else:
            # continuous: the test runs on the log of the ratio of means
            assert an.test_scale == "log_ratio"
            assert lk.test_estimate == pytest.approx(math.log1p(lk.estimate), rel=1e-12)
            assert lk.z == pytest.approx(lk.test_estimate / lk.se, rel=1e-12)
        crossed = abs(lk.z) >= lk.efficacy_z if sides == 2 else lk.z >= lk.efficacy_z
        assert crossed == (lk.decision == "stop_efficacy")
        # the interval excludes no effect exactly when the look crosses efficacy
        excludes = lk.interval_lower > 0 or (sides == 2 and lk.interval_upper < 0)
        assert excludes == crossed


def skewness(lk):
    """The skewness of the score contrast at this look (seqtest.core.score)."""
    p_c = lk.control_value
    p_t = lk.treatment_value
    st = score.binary_relative(p_c * lk.n_control, lk.n_control, p_t * lk.n_treatment,
                               lk.n_treatment)
    return float(st.skewness)


def test_mixture_relative_boundary_is_on_the_scale_of_z():
    # A look that stops must show |z| at or above its boundary, on the same scale: the
    # first release showed z 2.74 below a boundary of 3.10 at such a stop, mixing the
    # ratio's standard error with the log ratio's mixing variance.
    plan = seqtest.mixture_plan(alpha=0.05, sides=2,
                                metric={"kind": "binary", "baseline": 0.1, "mde": 0.1,
                                        "relative": True, "scale": "relative"})
    sizes = np.arange(1, 41) * 500
    looks = _binary_looks([0.1] * 40, [0.118] * 40, sizes)
    an = seqtest.analyze(plan, looks)
    assert an.decision == "stop_efficacy" and an.test_scale == "log_ratio"
    for lk in an.looks:
        assert lk.z == pytest.approx(lk.test_estimate / lk.se, rel=1e-12)
        # the boundary at this look is the mixture's rejection half-width over se, both
        # on the log ratio (Robbins 1970 closed form, seqtest.core.normal_mixture)
        hw = float(half_width(lk.se, plan.tau2, plan.alpha, plan.sides))
        assert lk.efficacy_z == pytest.approx(hw / lk.se, rel=1e-12)
    stop = an.looks[-1]
    assert abs(stop.z) >= stop.efficacy_z
    # earlier looks: not yet rejected (the p-value is a running minimum, so the first
    # crossing is the stop)
    assert all(abs(lk.z) < lk.efficacy_z for lk in an.looks[:-1])
    assert stop.always_valid_p <= plan.alpha < an.looks[-2].always_valid_p


def test_small_arms_are_flagged_with_a_warning():
    plan = seqtest.design(looks=3, metric={"kind": "binary", "baseline": 0.02, "mde": 0.02})
    looks = [{"control": {"n": 150, "successes": 3}, "treatment": {"n": 150, "successes": 6}},
             {"control": {"n": 900, "successes": 18}, "treatment": {"n": 900, "successes": 21}}]
    an = seqtest.analyze(plan, looks)
    assert [lk.small_sample for lk in an.looks] == [True, False]
    text = [w for w in an.warnings if "normal approximation" in w]
    assert len(text) == 1 and text[0].startswith("look 1:")
    assert "fewer than 5 successes or 5 failures" in text[0]


def test_no_warning_for_comfortable_counts():
    plan = seqtest.design(looks=3, metric={"kind": "binary", "baseline": 0.1, "mde": 0.02})
    looks = [{"control": {"n": 2000, "successes": 200},
              "treatment": {"n": 2000, "successes": 215}}]
    an = seqtest.analyze(plan, looks)
    assert not an.looks[0].small_sample
    assert not [w for w in an.warnings if "normal approximation" in w]


@pytest.mark.parametrize("kind, arm, flagged", [
    ("rate", {"exposure": 100.0, "events": 4}, True),
    ("rate", {"exposure": 100.0, "events": 40}, False),
    ("continuous", {"n": 12, "mean": 5.0, "sd": 2.0}, True),
    ("continuous", {"n": 400, "mean": 5.0, "sd": 2.0}, False),
])
def test_small_counts_for_rates_and_means(kind, arm, flagged):
    plan = seqtest.design(looks=2)
    big = ({"exposure": 1000.0, "events": 400} if kind == "rate"
           else {"n": 400, "mean": 5.0, "sd": 2.0})
    an = seqtest.analyze(plan, [{"control": big, "treatment": arm}], metric=kind,
                         max_n=10_000)
    assert an.looks[0].small_sample is flagged
