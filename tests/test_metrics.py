"""Tests for seqtest.monitoring.metrics: effects from per-arm totals, validation of looks, SRM.

Every numerical check names its outside source beside it.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from scipy import stats
from statsmodels.stats import proportion as sm_proportion
from statsmodels.stats import rates as sm_rates
from statsmodels.stats.power import NormalIndPower

from seqtest.core import score
from seqtest.monitoring.metrics import (
    METRIC_FIELDS,
    Effect,
    LookDataError,
    arm_unit_variances,
    effect,
    srm_check,
    unit_variance,
    validate_looks,
)

# ---------------------------------------------------------------------------
# Binary: the score statistic restricted to the null, with the skewness correction
# ---------------------------------------------------------------------------

BINARY_CASES = [
    # (successes_c, n_c, successes_t, n_t)
    (10, 100, 15, 100),
    (480, 10_000, 530, 10_000),
    (120, 1_000, 90, 1_500),
    (3, 40, 1, 25),
    (49_990, 1_000_000, 50_210, 1_000_000),
]


@pytest.mark.parametrize("sc, nc, st, nt", BINARY_CASES)
def test_binary_difference_is_the_pooled_score_test(sc, nc, st, nt):
    # Source: statsmodels.stats.proportion.test_proportions_2indep(method="score",
    # compare="diff", correction=False): the Farrington-Manning score statistic, at no
    # effect the pooled two-proportion z test. Our se is the restricted one, so
    # (estimate - 0) / se is that statistic; z adds the skewness correction
    # (seqtest.core.score.corrected_z), which is 0 only for equal arms' symmetric data.
    ref = sm_proportion.test_proportions_2indep(st, nt, sc, nc, method="score",
                                                compare="diff", correction=False)
    e = effect("binary", {"n": nc, "successes": sc}, {"n": nt, "successes": st})
    assert e.estimate == pytest.approx(st / nt - sc / nc, rel=1e-12)
    assert e.estimate / e.se == pytest.approx(ref.statistic, rel=1e-9)
    assert e.z == pytest.approx(float(score.corrected_z(e.estimate / e.se, e.skewness)),
                                rel=1e-12)
    # pooled variance at no effect: p (1 - p) (1/n_c + 1/n_t) (textbook pooled z test)
    p = (sc + st) / (nc + nt)
    assert e.se**2 == pytest.approx(p * (1 - p) * (1 / nc + 1 / nt), rel=1e-10)
    assert e.information == pytest.approx(1 / e.se**2, rel=1e-12)
    assert e.control_value == pytest.approx(sc / nc)
    assert e.treatment_value == pytest.approx(st / nt)
    assert e.n_control == nc and e.n_treatment == nt


@pytest.mark.parametrize("sc, nc, st, nt", BINARY_CASES)
def test_binary_relative_is_the_same_test_reported_on_the_ratio(sc, nc, st, nt):
    # Source: statsmodels test_proportions_2indep(method="score", compare="ratio") at
    # value 1 is the Miettinen-Nurminen score test of equal proportions: the same
    # statistic as the difference's at no effect; the estimate is the lift and se the
    # restricted standard error over the control proportion (z = estimate / se).
    ref = sm_proportion.test_proportions_2indep(st, nt, sc, nc, method="score",
                                                compare="ratio", correction=False)
    e = effect("binary", {"n": nc, "successes": sc}, {"n": nt, "successes": st},
               scale="relative")
    d = effect("binary", {"n": nc, "successes": sc}, {"n": nt, "successes": st})
    assert e.estimate == pytest.approx(ref.ratio - 1, rel=1e-12)
    assert e.estimate / e.se == pytest.approx(ref.statistic, rel=1e-9)
    assert e.z == pytest.approx(d.z, rel=1e-12)
    assert e.se == pytest.approx(d.se / (sc / nc), rel=1e-12)
    assert e.scale == "relative" and e.test_scale == "relative"


# ---------------------------------------------------------------------------
# ---------------------------------------------------------------------------
# Continuous: Welch
# ---------------------------------------------------------------------------


@pytest.mark.parametrize(
    "n_c, n_t, mu_c, mu_t, sd_c, sd_t",
    [
        (30, 45, 10.0, 11.0, 2.0, 3.5),
        (500, 500, 0.0, 0.1, 1.0, 1.0),
        (20_000, 18_000, 50.0, 50.3, 12.0, 15.0),
    ],
)
def test_continuous_z_equals_welch_t(n_c, n_t, mu_c, mu_t, sd_c, sd_t):
    # Source: scipy.stats.ttest_ind(equal_var=False) (Welch 1947): our z is exactly
    # Welch's t statistic; the p-values differ only by t versus normal tails.
    rng = np.random.default_rng(7)
    xc = rng.normal(mu_c, sd_c, n_c)
    xt = rng.normal(mu_t, sd_t, n_t)
    ref = stats.ttest_ind(xt, xc, equal_var=False)
    e = effect(
        "continuous",
        {"n": n_c, "sum": xc.sum(), "sum_sq": (xc**2).sum()},
        {"n": n_t, "sum": xt.sum(), "sum_sq": (xt**2).sum()},
    )
    assert e.z == pytest.approx(ref.statistic, rel=1e-8)
    assert e.estimate == pytest.approx(xt.mean() - xc.mean(), rel=1e-10, abs=1e-12)
    # Same result from n, mean, sd (sample sd with n - 1).
    e2 = effect(
        "continuous",
        {"n": n_c, "mean": xc.mean(), "sd": xc.std(ddof=1)},
        {"n": n_t, "mean": xt.mean(), "sd": xt.std(ddof=1)},
    )
    assert e2.z == pytest.approx(ref.statistic, rel=1e-8)
    assert e2.se == pytest.approx(e.se, rel=1e-8)
    if min(n_c, n_t) >= 500:
        # Normal versus Welch t tail: with df >= ~1000 the two-sided p-values
        # differ by about p (z^2 + 1) / (4 df) < 1e-3 for |z| < 5 (Abramowitz &
        # Stegun 26.7.5 expansion of the t tail, from memory).
        p_norm = 2 * stats.norm.sf(abs(e.z))
        assert abs(p_norm - ref.pvalue) < 1e-3


def test_continuous_matches_scipy_welch_from_stats():
    # Source: scipy.stats.ttest_ind_from_stats(equal_var=False).
    ref = stats.ttest_ind_from_stats(12.4, 3.1, 250, 11.8, 2.6, 240, equal_var=False)
    e = effect("continuous", {"n": 240, "mean": 11.8, "sd": 2.6},
               {"n": 250, "mean": 12.4, "sd": 3.1})
    assert e.z == pytest.approx(ref.statistic, rel=1e-10)


def test_continuous_relative_delta_method_formula():
    # Source: delta method for a ratio of independent means (Casella & Berger 2002,
    # Sec. 5.5.4): Var(m_t/m_c) = Var(m_t)/m_c^2 + m_t^2 Var(m_c)/m_c^4.
    mc, sc_, nc = 40.0, 10.0, 400
    mt, st_, nt = 42.0, 11.0, 380
    e = effect("continuous", {"n": nc, "mean": mc, "sd": sc_},
               {"n": nt, "mean": mt, "sd": st_}, scale="relative")
    var_ref = (st_**2 / nt) / mc**2 + mt**2 * (sc_**2 / nc) / mc**4
    assert e.estimate == pytest.approx(mt / mc - 1, rel=1e-12)
    assert e.se == pytest.approx(math.sqrt(var_ref), rel=1e-10)


# ---------------------------------------------------------------------------
# Rate: Poisson difference
# ---------------------------------------------------------------------------


@pytest.mark.parametrize(
    "ec, xc, et, xt",
    [(1000.0, 30, 1200.0, 20), (52_000.0, 812, 49_500.0, 845), (10.5, 4, 12.25, 9)],
)
def test_rate_difference_is_the_score_test(ec, xc, et, xt):
    # Source: statsmodels test_poisson_2indep(method="score", compare="diff"): the score
    # test of equal rates with the pooled rate, (r_t - r_c) / sqrt(r (1/e_t + 1/e_c))
    # with r = (x_t + x_c) / (e_t + e_c) (textbook).
    rt, rc = xt / et, xc / ec
    r = (xt + xc) / (et + ec)
    z_ref = (rt - rc) / math.sqrt(r * (1 / et + 1 / ec))
    ref = sm_rates.test_poisson_2indep(xt, et, xc, ec, method="score", compare="diff")
    e = effect("rate", {"exposure": ec, "events": xc}, {"exposure": et, "events": xt})
    assert e.estimate / e.se == pytest.approx(z_ref, rel=1e-12)
    assert e.estimate / e.se == pytest.approx(ref.statistic, rel=1e-9)
    assert e.estimate == pytest.approx(rt - rc, rel=1e-12)
    assert e.n_control == ec and e.control_value == pytest.approx(rc)


def test_rate_relative_is_the_conditional_score_test():
    # Source: statsmodels test_poisson_2indep(method="score", compare="ratio"): at
    # ratio 1 the conditional binomial score test, equal to the difference's statistic.
    ec, xc, et, xt = 800.0, 64, 750.0, 75
    ref = sm_rates.test_poisson_2indep(xt, et, xc, ec, method="score", compare="ratio")
    e = effect("rate", {"exposure": ec, "events": xc}, {"exposure": et, "events": xt},
               scale="relative")
    assert e.estimate == pytest.approx((xt / et) / (xc / ec) - 1, rel=1e-12)
    assert e.estimate / e.se == pytest.approx(ref.statistic, rel=1e-9)


# ---------------------------------------------------------------------------
# null, vectorised shapes, degenerate cases, extremes
# ---------------------------------------------------------------------------


def test_null_shifts_z():
    # Source: statsmodels test_proportions_2indep(method="score", compare="ratio",
    # value=1.2): the Miettinen-Nurminen statistic at a ratio of 1.2, restricted to that
    # null; z = (estimate - null) / se with the se restricted to it. (statsmodels'
    # non-zero difference margin is not used as a reference: see tests/test_score.py.)
    # Continuous metrics: the Welch z at a shifted null, by definition.
    c, t = {"n": 1000, "successes": 100}, {"n": 1000, "successes": 130}
    e1 = effect("binary", c, t, scale="relative", null=0.2)
    ref = sm_proportion.test_proportions_2indep(130, 1000, 100, 1000, method="score",
                                                compare="ratio", value=1.2,
                                                correction=False)
    assert (e1.estimate - 0.2) / e1.se == pytest.approx(ref.statistic, rel=1e-8)
    assert e1.null == 0.2
    cc = {"n": 50, "mean": 10.0, "sd": 2.0}
    ct = {"n": 60, "mean": 11.0, "sd": 2.5}
    w0, w1 = effect("continuous", cc, ct), effect("continuous", cc, ct, null=0.25)
    assert w1.z == pytest.approx((w0.estimate - 0.25) / w0.se, rel=1e-12)


@pytest.mark.parametrize("kind", sorted(METRIC_FIELDS))
@pytest.mark.parametrize("scale", ["difference", "relative"])
def test_vectorised_shapes_match_elementwise(kind, scale):
    # Consistency: an array call equals element-by-element scalar calls.
    rng = np.random.default_rng(3)
    reps, looks = 4, 6
    size = np.cumsum(rng.integers(50, 150, size=(reps, looks)), axis=1).astype(float)
    if kind == "binary":
        c = {"n": size, "successes": np.floor(size * 0.3)}
        t = {"n": size + 7, "successes": np.floor(size * 0.35)}
    elif kind == "continuous":
        c = {"n": size, "sum": size * 2.0, "sum_sq": size * 5.0}
        t = {"n": size, "sum": size * 2.2, "sum_sq": size * 6.5}
    elif kind == "count":
        c = {"n": size, "events": np.floor(size * 2.0), "events_sq": np.floor(size * 9.0)}
        t = {"n": size + 3, "events": np.floor(size * 2.1), "events_sq": np.floor(size * 9.5)}
    elif kind == "ratio":
        c = {"n": size, "numerator": size * 3.0, "denominator": size * 2.0,
             "numerator_sq": size * 20.0, "denominator_sq": size * 6.0, "cross": size * 9.0}
        t = {"n": size, "numerator": size * 3.3, "denominator": size * 2.1,
             "numerator_sq": size * 23.0, "denominator_sq": size * 6.5, "cross": size * 10.0}
    elif kind == "adjusted":
        c = {"n": size, "sum": size * 2.0, "sum_sq": size * 5.0, "covariate": size * 1.9,
             "covariate_sq": size * 4.8, "cross": size * 4.6}
        t = {"n": size + 5, "sum": size * 2.2, "sum_sq": size * 6.5,
             "covariate": size * 2.0, "covariate_sq": size * 5.2, "cross": size * 5.1}
    else:
        c = {"exposure": size * 1.5, "events": np.floor(size * 0.2)}
        t = {"exposure": size * 1.4, "events": np.floor(size * 0.25)}
    e = effect(kind, c, t, scale=scale)
    for name in ("estimate", "se", "z", "information", "n_control", "n_treatment",
                 "control_value", "treatment_value", "degenerate"):
        assert np.shape(getattr(e, name)) == (reps, looks), name
    for i in range(reps):
        for k in range(looks):
            ek = effect(kind, {f: v[i, k] for f, v in c.items()},
                        {f: v[i, k] for f, v in t.items()}, scale=scale)
            assert ek.z == pytest.approx(e.z[i, k], rel=1e-12)
            assert ek.se == pytest.approx(e.se[i, k], rel=1e-12)


def test_broadcasting_scalar_against_array():
    e = effect("binary", {"n": 1000, "successes": 100},
               {"n": np.array([1000, 2000, 3000]), "successes": np.array([110, 230, 350])})
    assert e.z.shape == (3,)
    assert np.shape(e.n_control) == (3,)


def test_large_vectorised_input_runs():
    # 10^6 elements in one call (the simulator's use); checks shape and finiteness.
    rng = np.random.default_rng(11)
    n = np.full((1000, 1000), 5000.0)
    sc = rng.binomial(5000, 0.1, size=n.shape).astype(float)
    st = rng.binomial(5000, 0.1, size=n.shape).astype(float)
    e = effect("binary", {"n": n, "successes": sc}, {"n": n, "successes": st})
    assert e.z.shape == (1000, 1000)
    assert np.all(np.isfinite(e.z))
    # Under the null the Wald z is close to N(0, 1): its sd over 10^6 draws is
    # within 0.5% of 1 (the sd of a sample sd is 1/sqrt(2N) = 0.07%; the Wald
    # statistic's finite-n excess is of order 1/n).
    assert np.std(e.z) == pytest.approx(1.0, abs=0.005)


def test_zero_successes_in_both_arms_is_degenerate_with_zero_z():
    # No outcome in either arm: the restricted variance is 0, no evidence either way.
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        e = effect("binary", {"n": 100, "successes": 0}, {"n": 100, "successes": 0})
    assert e.estimate == 0.0 and e.z == 0.0 and e.information == 0.0
    assert e.degenerate and e.se == math.inf


def test_all_successes_and_none_is_finite():
    # Source: the pooled z test by hand, p = 0.5: z = 1 / sqrt(0.25 * 2 / 50) = 10.
    e = effect("binary", {"n": 50, "successes": 0}, {"n": 50, "successes": 50})
    assert e.estimate / e.se == pytest.approx(10.0, rel=1e-12)
    assert np.isfinite(e.z) and e.z > 5 and not e.degenerate


def test_zero_events_in_both_rate_arms_is_degenerate():
    e = effect("rate", {"exposure": 100.0, "events": 0}, {"exposure": 100.0, "events": 0})
    assert e.z == 0.0 and e.degenerate and e.se == math.inf


def test_zero_events_in_one_rate_arm_is_finite():
    # Source: pooled-rate score test by hand: r = 5/200, z = (5/100) / sqrt(r * 2/100).
    e = effect("rate", {"exposure": 100.0, "events": 0}, {"exposure": 100.0, "events": 5})
    assert e.estimate / e.se == pytest.approx(0.05 / math.sqrt(0.025 * 0.02), rel=1e-12)


def test_constant_continuous_data_is_flagged_degenerate():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        e = effect("continuous", {"n": 10, "sum": 50.0, "sum_sq": 250.0},
                   {"n": 10, "sum": 60.0, "sum_sq": 360.0})
    assert e.degenerate
    assert e.se == math.inf
    assert e.z == 0.0 and e.information == 0.0
    assert e.estimate == pytest.approx(1.0)


def test_relative_with_zero_control_mean():
    # The lift is undefined (control 0) but the score test of equal proportions is not:
    # z stays finite and equals the difference scale's.
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        e = effect("binary", {"n": 100, "successes": 0}, {"n": 100, "successes": 5},
                   scale="relative")
    d = effect("binary", {"n": 100, "successes": 0}, {"n": 100, "successes": 5})
    assert e.estimate == math.inf and e.se == math.inf
    assert e.z == pytest.approx(d.z, rel=1e-12) and np.isfinite(e.z)
    c = effect("continuous", {"n": 10, "mean": 0.0, "sd": 1.0},
               {"n": 10, "mean": 1.0, "sd": 1.0}, scale="relative")
    assert c.degenerate and c.z == 0.0 and c.information == 0.0


def test_mixed_degenerate_elements_in_array():
    e = effect("continuous", {"n": [10, 10], "sum": [50.0, 50.0], "sum_sq": [250.0, 300.0]},
               {"n": [10, 10], "sum": [60.0, 60.0], "sum_sq": [360.0, 400.0]})
    assert list(e.degenerate) == [True, False]
    assert e.z[0] == 0.0 and np.isfinite(e.z[1]) and e.z[1] != 0.0


def test_extreme_counts():
    # Very large n and very small proportions stay accurate: the pooled z test by hand
    # (textbook) in double precision.
    nc = nt = 10**10
    sc, st = 10, 25
    e = effect("binary", {"n": nc, "successes": sc}, {"n": nt, "successes": st})
    p = (sc + st) / (nc + nt)
    z_ref = (st / nt - sc / nc) / math.sqrt(p * (1 - p) * (1 / nc + 1 / nt))
    assert e.estimate / e.se == pytest.approx(z_ref, rel=1e-9)


def test_continuous_large_mean_cancellation():
    # Values around 1e6 with sd 1: sum_sq - sum^2/n cancels about 12 digits; the
    # variance must still be right to a few parts in 1e3 (float64 has ~16 digits).
    rng = np.random.default_rng(5)
    x = 1e6 + rng.normal(0, 1, 1000)
    y = 1e6 + 0.1 + rng.normal(0, 1, 1000)
    e = effect("continuous", {"n": 1000, "sum": x.sum(), "sum_sq": (x**2).sum()},
               {"n": 1000, "sum": y.sum(), "sum_sq": (y**2).sum()})
    ref = stats.ttest_ind(y, x, equal_var=False)  # Source: scipy Welch t.
    assert e.z == pytest.approx(ref.statistic, rel=5e-3)


@pytest.mark.parametrize(
    "kwargs, message",
    [
        (dict(kind="proportion", control={}, treatment={}), "kind: got .*; allowed is one of"),
        (dict(kind="binary", control={"n": 10, "successes": 1},
              treatment={"n": 10, "successes": 1}, scale="log"),
         "scale: got .*; allowed is one of"),
        (dict(kind="binary", control={"n": 10}, treatment={"n": 10, "successes": 1}),
         "control: missing successes"),
        (dict(kind="binary", control={"n": 0, "successes": 0},
              treatment={"n": 10, "successes": 1}), "control.n: got 0; allowed is positive"),
        (dict(kind="continuous", control={"n": 1, "sum": 1, "sum_sq": 1},
              treatment={"n": 10, "sum": 1, "sum_sq": 1}),
         "control.n: got 1; allowed is at least 2"),
        (dict(kind="rate", control={"exposure": 1, "events": 1},
              treatment={"exposure": [1, 0], "events": [1, 1]}),
         "treatment.exposure: got 0; allowed is positive"),
        (dict(kind="binary", control={"n": 10, "successes": 1},
              treatment={"n": 10, "successes": 1}, null=float("nan")), "null: got"),
    ],
)
def test_effect_rejects_bad_arguments(kwargs, message):
    with pytest.raises(ValueError, match=message):
        effect(**kwargs)


# ---------------------------------------------------------------------------
# validate_looks
# ---------------------------------------------------------------------------


def _binary_looks():
    return [
        {"control": {"n": 100, "successes": 10}, "treatment": {"n": 100, "successes": 12}},
        {"control": {"n": 200, "successes": 21}, "treatment": {"n": 205, "successes": 30}},
        {"control": {"n": 300, "successes": 33}, "treatment": {"n": 300, "successes": 41}},
    ]


def test_validate_looks_returns_canonical_arrays():
    out = validate_looks("binary", _binary_looks())
    assert set(out) == {"control", "treatment"}
    assert set(out["control"]) == {"n", "successes"}
    np.testing.assert_array_equal(out["treatment"]["n"], [100, 205, 300])
    assert out["control"]["successes"].shape == (3,)
    assert out["control"]["n"].dtype == np.float64


def test_validate_looks_converts_mean_sd():
    looks = [
        {"control": {"n": 10, "mean": 2.0, "sd": 1.5},
         "treatment": {"n": 10, "sum": 25.0, "sum_sq": 80.0}},
    ]
    out = validate_looks("continuous", looks)
    # sum = n mean; sum_sq = (n - 1) sd^2 + n mean^2 (definition of the sample sd).
    assert out["control"]["sum"][0] == pytest.approx(20.0)
    assert out["control"]["sum_sq"][0] == pytest.approx(9 * 2.25 + 10 * 4.0)
    assert set(out["control"]) == {"n", "sum", "sum_sq"}


def test_validate_looks_accepts_numpy_numbers_and_rates():
    looks = [
        {"control": {"exposure": np.float64(10.5), "events": np.int64(3)},
         "treatment": {"exposure": 11.0, "events": 4}},
        {"control": {"exposure": 20.0, "events": 3}, "treatment": {"exposure": 21.0, "events": 9}},
    ]
    out = validate_looks("rate", looks)
    np.testing.assert_array_equal(out["control"]["events"], [3, 3])


def _with(looks, k, arm, **changes):
    looks = [{a: dict(v) for a, v in look.items()} for look in looks]
    for f, v in changes.items():
        if v is None:
            del looks[k][arm][f]
        else:
            looks[k][arm][f] = v
    return looks


BAD_LOOKS = [
    # (kind, looks, look, arm, field, message parts)
    ("binary", _with(_binary_looks(), 2, "treatment", successes=320), 3, "treatment",
     "successes", ["look 3, arm treatment, field successes: 320 is above n = 300"]),
    ("binary", _with(_binary_looks(), 0, "control", successes=None), 1, "control",
     "successes", ["missing field successes", "expects n, successes"]),
    ("binary", _with(_binary_looks(), 1, "control", trials=5), 2, "control", "trials",
     ["unknown field trials", "expects n, successes"]),
    ("binary", _with(_binary_looks(), 1, "control", n="200"), 2, "control", "n",
     ["'200' is not a number"]),
    ("binary", _with(_binary_looks(), 1, "control", n=float("nan")), 2, "control", "n",
     ["nan is not a finite number"]),
    ("binary", _with(_binary_looks(), 1, "control", n=float("inf")), 2, "control", "n",
     ["inf is not a finite number"]),
    ("binary", _with(_binary_looks(), 1, "control", n=True), 2, "control", "n",
     ["True is not a number"]),
    ("binary", _with(_binary_looks(), 0, "treatment", successes=-1), 1, "treatment",
     "successes", ["-1 is negative"]),
    ("binary", _with(_binary_looks(), 0, "treatment", successes=2.5), 1, "treatment",
     "successes", ["2.5 is not a whole number"]),
    ("binary", _with(_binary_looks(), 0, "control", n=0, successes=0), 1, "control", "n",
     ["n is 0"]),
    ("binary", _with(_binary_looks(), 2, "control", n=150), 3, "control", "n",
     ["look 3, arm control, field n: 150 is below 200 at look 2", "must not go backwards"]),
    ("binary", _with(_binary_looks(), 1, "treatment", successes=11), 2, "treatment",
     "successes", ["11 is below 12 at look 1", "cumulative"]),
    ("rate", [{"control": {"exposure": 0.0, "events": 0},
               "treatment": {"exposure": 1.0, "events": 0}}], 1, "control", "exposure",
     ["exposure is 0"]),
    ("rate", [{"control": {"exposure": -1.0, "events": 0},
               "treatment": {"exposure": 1.0, "events": 0}}], 1, "control", "exposure",
     ["-1 is negative"]),
    ("rate", [{"control": {"exposure": 5.0, "events": 2},
               "treatment": {"exposure": 5.0, "events": 3}},
              {"control": {"exposure": 4.0, "events": 2},
               "treatment": {"exposure": 6.0, "events": 3}}], 2, "control", "exposure",
     ["4 is below 5 at look 1"]),
    ("rate", [{"control": {"exposure": 5.0, "events": 2},
               "treatment": {"exposure": 5.0, "events": 3}},
              {"control": {"exposure": 6.0, "events": 2},
               "treatment": {"exposure": 6.0, "events": 1}}], 2, "treatment", "events",
     ["1 is below 3 at look 1"]),
    ("continuous", [{"control": {"n": 10, "mean": 1.0, "sd": -0.5},
                     "treatment": {"n": 10, "mean": 1.0, "sd": 0.5}}], 1, "control", "sd",
     ["-0.5 is negative"]),
    ("continuous", [{"control": {"n": 10, "sum": 20.0, "sum_sq": 30.0},
                     "treatment": {"n": 10, "sum": 20.0, "sum_sq": 50.0}}], 1, "control",
     "sum_sq", ["30 is below sum^2 / n = 40", "variance negative"]),
    ("continuous", [{"control": {"n": 10, "sum": 20.0, "sd": 1.0},
                     "treatment": {"n": 10, "sum": 20.0, "sum_sq": 50.0}}], 1, "control",
     None, ["mixes sum with sd"]),
    ("continuous", [{"control": {"n": 1, "sum": 2.0, "sum_sq": 4.0},
                     "treatment": {"n": 10, "sum": 20.0, "sum_sq": 50.0}}], 1, "control",
     "n", ["n is 1", "at least 2"]),
    ("continuous", [{"control": {"n": 10, "sum": 20.0},
                     "treatment": {"n": 10, "sum": 20.0, "sum_sq": 50.0}}], 1, "control",
     "sum_sq", ["missing field sum_sq", "expects n, sum, sum_sq (or n, mean, sd)"]),
]


@pytest.mark.parametrize("kind, looks, look, arm, field, parts", BAD_LOOKS)
def test_validate_looks_refuses_bad_data(kind, looks, look, arm, field, parts):
    with pytest.raises(LookDataError) as info:
        validate_looks(kind, looks)
    err = info.value
    assert isinstance(err, ValueError)
    assert (err.look, err.arm, err.field) == (look, arm, field)
    text = str(err)
    assert text.startswith(f"look {look}, arm {arm}")
    if field is not None:
        assert f"field {field}" in text
    for part in parts:
        assert part in text


def test_validate_looks_unknown_and_missing_arms():
    looks = [{"control": {"n": 1, "successes": 0}, "variant": {"n": 1, "successes": 0}}]
    with pytest.raises(LookDataError, match="look 1, arm variant: unknown arm 'variant'") as info:
        validate_looks("binary", looks)
    assert info.value.arm == "variant" and info.value.field is None
    with pytest.raises(LookDataError, match="look 1, arm treatment: missing"):
        validate_looks("binary", [{"control": {"n": 1, "successes": 0}}])


def test_validate_looks_bad_containers_and_kind():
    with pytest.raises(ValueError,
                       match="kind: got .*; allowed is one of binary, continuous, rate, "
                             "ratio, adjusted, count"):
        validate_looks("proportion", _binary_looks())
    with pytest.raises(LookDataError, match="looks is empty"):
        validate_looks("binary", [])
    with pytest.raises(LookDataError, match="look 2: expected a mapping"):
        validate_looks("binary", [_binary_looks()[0], [1, 2]])
    with pytest.raises(LookDataError, match="look 1, arm control: expected a mapping"):
        validate_looks("binary", [{"control": 5, "treatment": {"n": 1, "successes": 0}}])


def test_validate_looks_allows_equal_totals_and_rounding_in_sum_sq():
    looks = _binary_looks()
    looks.append({a: dict(v) for a, v in looks[-1].items()})  # unchanged totals are fine
    assert validate_looks("binary", looks)["control"]["n"].shape == (4,)
    # sum_sq = sum^2/n exactly (zero variance) within float rounding is accepted.
    x = 0.1
    n = 30
    ok = [{"control": {"n": n, "sum": n * x, "sum_sq": n * x * x},
           "treatment": {"n": n, "sum": n * x, "sum_sq": n * x * x + 1.0}}]
    validate_looks("continuous", ok)


# ---------------------------------------------------------------------------
# Per-unit variances and sample size
# ---------------------------------------------------------------------------


def test_unit_variance_values():
    # Definitions: Bernoulli p(1-p); normal sd^2; Poisson count per unit exposure.
    assert unit_variance("binary", p=0.1) == pytest.approx(0.09)
    assert unit_variance("continuous", sd=3.0) == pytest.approx(9.0)
    assert unit_variance("rate", rate=0.25) == pytest.approx(0.25)
    np.testing.assert_allclose(unit_variance("binary", p=[0.0, 0.5, 1.0]), [0.0, 0.25, 0.0])


def test_unit_variance_gives_textbook_sample_size():
    # Source: REFERENCES.md fixed-sample formula n = 2 (z_{1-a/2} + z_{1-b})^2 sigma^2 /
    # delta^2 = 62.8 per arm for delta/sigma = 0.5, alpha 0.05 two-sided, power 0.8;
    # and statsmodels NormalIndPower.
    z = stats.norm.isf(0.025) + stats.norm.isf(0.2)
    info = (z / 0.5) ** 2
    v = unit_variance("continuous", sd=1.0)
    n = info * (v + v / 1.0)
    assert n == pytest.approx(62.8, abs=0.05)
    # statsmodels' two-sided power also counts the far tail (about 1e-6 here), which
    # the textbook formula ignores; its one-sided version at alpha/2 is the same
    # formula exactly. statsmodels solves for n by numerical root finding, which
    # agrees with the closed form to about 3e-8 relative; rel=1e-6 allows for that.
    power = NormalIndPower()
    ref = power.solve_power(effect_size=0.5, alpha=0.025, power=0.8, ratio=1.0,
                            alternative="larger")
    assert n == pytest.approx(ref, rel=1e-6)
    # Unequal allocation ratio 2 (treatment:control): statsmodels' nobs1 is the first
    # (control) group with nobs2 = ratio * nobs1.
    ref2 = power.solve_power(effect_size=0.5, alpha=0.025, power=0.8, ratio=2.0,
                             alternative="larger")
    assert info * (v + v / 2.0) == pytest.approx(ref2, rel=1e-6)


def test_binary_sample_size_textbook():
    # Source: textbook per-arm n for two proportions with unpooled variance,
    # n = (z_{1-a/2} + z_{1-b})^2 (p_c(1-p_c) + p_t(1-p_t)) / (p_t - p_c)^2
    # (e.g. Chow, Shao & Wang 2008, Sec. 4.2, from memory). p 0.10 -> 0.12,
    # alpha 0.05 two-sided, power 0.8: 2.8016^2 * 0.1956 / 0.0004 = 3838.1 (formula
    # evaluated by hand).
    z = stats.norm.isf(0.025) + stats.norm.isf(0.2)
    u_c, u_t = arm_unit_variances("binary", 0.10, 0.12)
    n = (z / 0.02) ** 2 * (u_c + u_t)
    assert n == pytest.approx(z**2 * (0.09 + 0.1056) / 0.0004, rel=1e-12)
    assert n == pytest.approx(3838.1, abs=0.1)


@pytest.mark.parametrize(
    "kind, control, treatment",
    [("binary", 0.10, 0.12), ("rate", 0.3, 0.33), ("continuous", (40.0, 10.0), (42.0, 11.0))],
)
def test_arm_unit_variances_relative_match_effect_se(kind, control, treatment):
    # Contract: Var(estimate) = u_c / n_c + u_t / n_t on the relative scale by the delta
    # method (Casella & Berger 2002, Sec. 5.5.4), the unpooled variance at the design
    # means. Continuous: effect()'s own se; binary and rate (whose test uses the
    # variance restricted to the null instead): the Katz log-ratio variance of
    # statsmodels (method="log" / "wald-log") times the squared ratio.
    nc, nt = 4000.0, 5000.0
    u_c, u_t = arm_unit_variances(kind, control, treatment, scale="relative")
    if kind == "binary":
        ref = sm_proportion.test_proportions_2indep(nt * treatment, nt, nc * control, nc,
                                                    method="log", compare="ratio",
                                                    correction=False)
        var = ref.ratio**2 * ref.variance
    elif kind == "rate":
        rr = treatment / control
        var = rr**2 * (1 / (nt * treatment) + 1 / (nc * control))  # Var log = 1/x_t + 1/x_c
    else:
        c = {"n": nc, "mean": control[0], "sd": control[1]}
        t = {"n": nt, "mean": treatment[0], "sd": treatment[1]}
        var = effect(kind, c, t, scale="relative").se ** 2
    assert var == pytest.approx(u_c / nc + u_t / nt, rel=1e-10)


@pytest.mark.parametrize(
    "kind, params, message",
    [
        ("binary", {"p": 1.5}, "p: got 1.5; allowed is a number in \\[0, 1\\]"),
        ("binary", {"sd": 1.0},
         "got the parameters sd; a binary metric takes exactly the parameter 'p'"),
        ("continuous", {"sd": -1.0}, "sd: got -1.0; allowed is a finite number >= 0"),
        ("rate", {"rate": float("inf")}, "rate: got inf; allowed is a finite number >= 0"),
        ("rate", {}, "got the parameters none"),
        ("count", {"rate": 1.0}, "kind: got .*; allowed is one of"),
    ],
)
def test_unit_variance_rejects(kind, params, message):
    with pytest.raises(ValueError, match=message):
        unit_variance(kind, **params)


def test_arm_unit_variances_rejects_zero_control_mean():
    with pytest.raises(ValueError, match="control: got 0.0; allowed is a non-zero mean"):
        arm_unit_variances("binary", 0.0, 0.1, scale="relative")


# ---------------------------------------------------------------------------
# Sample-ratio mismatch
# ---------------------------------------------------------------------------


@pytest.mark.parametrize(
    "nc, nt, allocation",
    [(5000, 5000, 1.0), (5000, 5300, 1.0), (10_000, 10_400, 1.0), (3300, 6700, 2.0),
     (12, 7, 1.0), (1, 0, 0.5), (49_500, 50_500, 1.0)],
)
def test_srm_matches_scipy_chisquare(nc, nt, allocation):
    # Source: scipy.stats.chisquare with expected counts from the planned allocation.
    total = nc + nt
    share = allocation / (1 + allocation)
    ref = stats.chisquare([nc, nt], f_exp=[total * (1 - share), total * share])
    r = srm_check(nc, nt, allocation=allocation)
    assert r.statistic == pytest.approx(ref.statistic, rel=1e-10, abs=1e-12)
    assert r.p_value == pytest.approx(ref.pvalue, rel=1e-10)
    assert r.expected_share == pytest.approx(share)
    assert r.observed_share == pytest.approx(nt / total)
    assert r.mismatch == (ref.pvalue < 0.001)


def test_srm_messages():
    bad = srm_check(10_000, 10_600)  # chi-square 17.5, p about 3e-5
    assert bad.mismatch
    assert "Sample ratio mismatch" in bad.message
    assert "51.46% of 20,600 units" in bad.message and "50.00%" in bad.message
    assert "do not trust" in bad.message
    ok = srm_check(10_000, 10_050)
    assert not ok.mismatch and "No sample ratio mismatch" in ok.message
    # A stricter threshold turns the first into no mismatch only if p >= threshold.
    assert srm_check(10_000, 10_600, threshold=1e-9).mismatch is False


def test_srm_extreme_p_value_uses_upper_tail():
    # p far below 1e-16 must not be rounded to 0 by 1 - cdf; chi2.sf keeps it.
    r = srm_check(10_000, 12_000)
    assert 0 < r.p_value < 1e-20
    assert r.p_value == pytest.approx(stats.chi2.sf(r.statistic, 1), rel=1e-12)


@pytest.mark.parametrize(
    "args, message",
    [
        ((-1, 5), "n_control: got -1; allowed is a whole number >= 0"),
        ((5, 2.5), "n_treatment: got 2.5; allowed is a whole number >= 0"),
        ((0, 0), "allowed are counts with a positive total"),
        ((5, 5, 0.0), "allocation: got 0.0; allowed is a finite number > 0"),
        ((5, 5, 1.0, 1.5), "threshold: got 1.5; allowed is a probability"),
        (("5", 5), "n_control: got .*; allowed is a whole number"),
    ],
)
def test_srm_rejects_bad_arguments(args, message):
    with pytest.raises(ValueError, match=message):
        srm_check(*args)


def test_effect_is_frozen():
    e = effect("binary", {"n": 10, "successes": 1}, {"n": 10, "successes": 2})
    assert isinstance(e, Effect)
    with pytest.raises(AttributeError):
        e.z = 1.0  # type: ignore[misc]
