"""Tests for seqtest.mixture: the normal-mixture test under continuous monitoring.

Every numerical check names its outside source beside it. Statistical checks use
fixed seeds; their Monte Carlo bounds are computed in the test (Clopper-Pearson).
"""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pytest
from scipy import integrate, optimize, special, stats

from seqtest import plan_from_dict
from seqtest.mixture import (
    DECISIONS,
    MixtureResult,
    always_valid,
    always_valid_effect,
    half_width,
    mixture_plan,
    optimal_variance_ratio,
)
from seqtest.monitoring import metrics


def clopper_pearson_upper(x: int, n: int, level: float = 0.99) -> float:
    """One-sided upper Clopper-Pearson bound (Clopper & Pearson 1934, Biometrika 26)."""
    return 1.0 if x >= n else float(stats.beta.ppf(level, x + 1, n - x))


# ---------------------------------------------------------------------------
# The mixture likelihood ratio against outside formulas
# ---------------------------------------------------------------------------


def test_log_lambda_hand_computed():
    # Hand computation from the closed form in REFERENCES.md (Johari et al. 2022):
    # V = 0.02, tau2 = 0.01, est = 0.3: s = tau2 / V = 0.5,
    # log Lambda = 0.5 * (0.09 / 0.02) * (0.5 / 1.5) - 0.5 * ln(1.5)
    #            = 0.75 - 0.2027326 = 0.5472674.
    r = always_valid(0.3, math.sqrt(0.02), 0.01)
    assert r.log_lambda[0] == pytest.approx(0.5472674, abs=1e-7)
    assert r.p_value[0] == pytest.approx(math.exp(-0.5472674), rel=1e-6)


def test_log_lambda_matches_closed_form_for_a_normal_stream():
    # Source: REFERENCES.md / Johari, Koomen, Pekelis & Walsh (2022), for a normal
    # stream of per-pair differences with variance 2 sigma^2 and mixing N(0, tau2):
    # Lambda_n = sqrt(2s2 / (2s2 + n tau2)) exp(n^2 tau2 xbar^2 / (2 2s2 (2s2 + n tau2))).
    rng = np.random.default_rng(42)
    sigma, tau2 = 1.3, 0.05
    d = rng.normal(0.2, math.sqrt(2) * sigma, size=60)
    n = np.arange(1, d.size + 1)
    xbar = np.cumsum(d) / n
    v = 2 * sigma**2
    ref = 0.5 * np.log(v / (v + n * tau2)) + n**2 * tau2 * xbar**2 / (2 * v * (v + n * tau2))
    r = always_valid(xbar, np.sqrt(v / n), tau2)
    np.testing.assert_allclose(r.log_lambda, ref, rtol=1e-12, atol=1e-13)


@pytest.mark.parametrize("x, V, tau2", [(0.3, 0.02, 0.01), (-0.05, 1e-3, 4e-4),
                                        (1.2, 0.5, 2.0), (0.0, 0.1, 0.1)])
def test_lambda_equals_mixture_integral(x, V, tau2):
    # Source: definition of the mixture likelihood ratio (Robbins 1970): integrate
    # the normal likelihood ratio of theta against 0 over theta ~ N(0, tau2),
    # numerically with scipy.integrate.quad.
    def lr(theta):
        return math.exp(theta * x / V - theta**2 / (2 * V))

    sd = math.sqrt(tau2)
    two, _ = integrate.quad(lambda t: stats.norm.pdf(t, 0, sd) * lr(t), -np.inf, np.inf,
                            epsabs=0, epsrel=1e-11)
    r2 = always_valid(x, math.sqrt(V), tau2, sides=2)
    assert r2.log_lambda[0] == pytest.approx(math.log(two), rel=1e-8, abs=1e-10)
    # One-sided: half-normal mixing on theta > 0 (density 2 phi).
    one, _ = integrate.quad(lambda t: 2 * stats.norm.pdf(t, 0, sd) * lr(t), 0, np.inf,
                            epsabs=0, epsrel=1e-11)
    r1 = always_valid(x, math.sqrt(V), tau2, sides=1)
    assert r1.log_lambda[0] == pytest.approx(math.log(one), rel=1e-8, abs=1e-10)


def test_half_width_inverts_lambda_numerically():
    # Check of the closed-form interval against root finding (scipy brentq) on
    # log Lambda(theta0) = log(1/alpha), for both sides.
    est, se, tau2, alpha = 0.4, 0.15, 0.03, 0.05
    for sides in (1, 2):
        w = float(half_width(se, tau2, alpha, sides))

        def f(theta0, sides=sides):
            return always_valid(est, se, tau2, sides=sides, null=theta0).log_lambda[0] \
                - math.log(1 / alpha)

        lower = optimize.brentq(f, est - 10, est, xtol=1e-14)
        assert est - w == pytest.approx(lower, abs=1e-10)
        r = always_valid(est, se, tau2, sides=sides, alpha=alpha)
        assert r.ci_lower[0] == pytest.approx(lower, abs=1e-10)
        if sides == 2:
            upper = optimize.brentq(f, est, est + 10, xtol=1e-14)
            assert r.ci_upper[0] == pytest.approx(upper, abs=1e-10)
        else:
            assert r.ci_upper[0] == math.inf


def test_extreme_statistics_do_not_overflow():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        r = always_valid([1e3, -1e3, 1e-300], [1e-3, 1e-3, 1e3], 1.0)
    assert np.all(np.isfinite(r.log_lambda))
    assert r.log_lambda[0] > 1e5  # z = 1e6
    assert r.p_value[0] == 0.0 and r.p_value[-1] == 0.0
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        r1 = always_valid([-50.0, 50.0], [1.0, 1.0], 1.0, sides=1)
    # z = -50 on the null side: the exponent and log Phi nearly cancel; Lambda+ < 1.
    assert np.isfinite(r1.log_lambda[0]) and r1.log_lambda[0] < 0
    assert r1.p_value[0] == 1.0 and r1.rejected[1]


def test_no_information_looks():
    # se = inf (e.g. a degenerate Effect) adds no evidence; nan estimate allowed there.
    r = always_valid([np.nan, 0.5, np.nan], [np.inf, 0.1, np.inf], 0.05)
    assert r.log_lambda[0] == 0.0 and r.log_lambda[2] == 0.0
    assert r.ci_lower[0] == -math.inf and r.ci_upper[0] == math.inf
    assert r.p_value[2] == r.p_value[1]  # running minimum kept
    assert r.ci_lower[2] == r.ci_lower[1]


# ---------------------------------------------------------------------------
# p-value and confidence sequence structure
# ---------------------------------------------------------------------------


@pytest.fixture(scope="module")
def some_streams():
    rng = np.random.default_rng(9)
    n = np.arange(1, 301)
    d = rng.normal(0.15, math.sqrt(2), size=(5, n.size))
    return np.cumsum(d, axis=1) / n, np.sqrt(2.0 / n)


@pytest.mark.parametrize("sides", [1, 2])
def test_p_value_is_running_minimum(some_streams, sides):
    est, se = some_streams
    r = always_valid(est, se, 0.02, sides=sides)
    # Definition (Johari et al. 2022): p_n = min(p_{n-1}, 1 / Lambda_n), p_0 = 1.
    for i in range(est.shape[0]):
        p = 1.0
        for k in range(est.shape[1]):
            p = min(p, math.exp(-r.log_lambda[i, k]))
            assert r.p_value[i, k] == pytest.approx(p, rel=1e-12)
    assert np.all(np.diff(r.p_value, axis=-1) <= 0)
    assert np.all((r.p_value > 0) & (r.p_value <= 1))


@pytest.mark.parametrize("sides", [1, 2])
def test_confidence_sequence_is_intersection_and_matches_p(some_streams, sides):
    est, se = some_streams
    alpha, tau2 = 0.05, 0.02
    r = always_valid(est, se, tau2, sides=sides, alpha=alpha)
    w = half_width(se, tau2, alpha, sides)
    assert np.all(np.diff(r.ci_lower, axis=-1) >= 0)
    np.testing.assert_allclose(r.ci_lower, np.maximum.accumulate(est - w, axis=-1))
    if sides == 2:
        assert np.all(np.diff(r.ci_upper, axis=-1) <= 0)
        np.testing.assert_allclose(r.ci_upper, np.minimum.accumulate(est + w, axis=-1))
        outside = (r.ci_lower > 0) | (r.ci_upper < 0)
    else:
        outside = r.ci_lower > 0
    # Duality: p_n <= alpha exactly when the null is outside the interval at n.
    np.testing.assert_array_equal(outside, r.rejected)
    np.testing.assert_array_equal(r.rejected, r.p_value <= alpha * (1 + 1e-12))


# ---------------------------------------------------------------------------
# Decisions
# ---------------------------------------------------------------------------


def test_decisions_direction_and_stickiness():
    se = np.array([1.0, 0.5, 0.2, 0.1, 0.1, 0.1])
    est = np.array([0.1, 0.2, 0.5, 0.6, 0.0, 0.0])
    r = always_valid(est, se, 0.25)
    k = int(r.first_rejection)
    assert k >= 0 and r.rejected[k] and not r.rejected[:k].any()
    assert list(r.decision[:k]) == ["continue"] * k
    assert set(r.decision[k:]) == {"stop_efficacy"}  # stays after the estimate falls
    assert r.direction == "treatment_better"
    assert r.final_decision == "stop_efficacy"
    neg = always_valid(-est, se, 0.25)
    assert neg.direction == "control_better"
    none = always_valid(est * 0.01, se, 0.25)
    assert none.direction is None and none.first_rejection == -1
    assert none.final_decision == "continue"


def test_cap_gives_complete_not_significant():
    plan = mixture_plan(mde=0.5, max_n_per_arm=300)
    se = np.array([0.5, 0.3, 0.2, 0.15, 0.1])
    n = np.array([50, 100, 200, 300, 400])
    r = always_valid(np.zeros(5), se, plan, n=n)
    assert list(r.decision) == ["continue"] * 3 + ["complete_not_significant"] * 2
    assert r.stop_index == 3 and r.first_rejection == -1
    # Rejection exactly at the cap look: efficacy wins.
    big = np.array([0.0, 0.0, 0.0, 2.0, 2.0])
    r2 = always_valid(big, se, plan, n=n)
    assert r2.first_rejection == 3 and list(r2.decision[3:]) == ["stop_efficacy"] * 2
    # Without n the cap cannot be applied.
    r3 = always_valid(np.zeros(5), se, plan)
    assert set(r3.decision) == {"continue"}


def test_decision_codes_index_decisions():
    r = always_valid(np.array([[0.0, 3.0], [0.0, 0.0]]), np.array([0.5, 0.5]), 0.5)
    assert r.decision.shape == (2, 2)
    np.testing.assert_array_equal(np.asarray(DECISIONS)[r.decision_code], r.decision)
    assert list(r.final_decision) == ["stop_efficacy", "continue"]
    assert list(r.direction) == ["treatment_better", None]


def test_vectorised_equals_per_stream():
    rng = np.random.default_rng(4)
    est = rng.normal(0, 0.3, size=(3, 4, 25))
    se = np.linspace(1, 0.1, 25)
    r = always_valid(est, se, 0.1)
    assert r.log_lambda.shape == (3, 4, 25) and np.shape(r.first_rejection) == (3, 4)
    for i in range(3):
        for j in range(4):
            rij = always_valid(est[i, j], se, 0.1)
            np.testing.assert_allclose(rij.log_lambda, r.log_lambda[i, j], rtol=1e-14)
            np.testing.assert_allclose(rij.ci_upper, r.ci_upper[i, j], rtol=1e-14)
            assert rij.first_rejection == r.first_rejection[i, j]
            assert rij.direction_sign == r.direction_sign[i, j]


def test_relative_scale_runs_on_log_ratio():
    # Contract: relative estimates r with se are mapped to log(1 + r), se / (1 + r).
    r_est = np.array([0.05, 0.12, 0.2])
    se = np.array([0.1, 0.06, 0.04])
    rel = always_valid(r_est, se, 0.01, scale="relative", null=0.02)
    log = always_valid(np.log1p(r_est), se / (1 + r_est), 0.01, null=math.log1p(0.02))
    np.testing.assert_allclose(rel.log_lambda, log.log_lambda, rtol=1e-13)
    np.testing.assert_allclose(rel.ci_lower, np.expm1(log.ci_lower), rtol=1e-13)
    np.testing.assert_allclose(rel.ci_upper, np.expm1(log.ci_upper), rtol=1e-13)
    # A treatment mean of 0 (r = -1) carries no information.
    z = always_valid([-1.0], [0.5], 0.01, scale="relative")
    assert z.log_lambda[0] == 0.0


def test_always_valid_effect_uses_plan_scale_and_cap():
    looks = [
        {"control": {"n": 1000, "successes": 100}, "treatment": {"n": 1000, "successes": 110}},
        {"control": {"n": 2000, "successes": 200}, "treatment": {"n": 2000, "successes": 260}},
        {"control": {"n": 3000, "successes": 300}, "treatment": {"n": 3000, "successes": 330}},
    ]
    arr = metrics.validate_looks("binary", looks)
    plan = mixture_plan(mde=0.2, scale="relative", max_n_per_arm=3000)
    eff = metrics.effect("binary", arr["control"], arr["treatment"], scale="relative")
    r = always_valid_effect(eff, plan)
    # on the relative scale the test runs on the log ratio whose standard error makes
    # it the score statistic (seqtest.core.score.log_ratio)
    ref = always_valid(eff.log_ratio_estimate, eff.log_ratio_se, plan,
                       n=np.array([1000, 2000, 3000]), on_log_ratio=True)
    np.testing.assert_array_equal(r.decision, ref.decision)
    assert r.decision[-1] in ("stop_efficacy", "complete_not_significant")
    with pytest.raises(ValueError, match="difference scale but the plan on the relative"):
        always_valid_effect(metrics.effect("binary", arr["control"], arr["treatment"]), plan)


# ---------------------------------------------------------------------------
# Choice of tau2
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("alpha", [0.2, 0.05, 0.01, 1e-4])
def test_optimal_ratio_two_sided_lambert_w(alpha):
    # Closed form: s = 2 log(1/alpha) + log(1 + s) gives 1 + s = -W_{-1}(-e^{-(2 log(1/a)+1)})
    # (Lambert W, scipy.special.lambertw); and a direct numerical minimisation.
    s, c = optimal_variance_ratio(alpha, 2)
    ref = -special.lambertw(-math.exp(-(2 * math.log(1 / alpha) + 1)), k=-1).real - 1
    assert s == pytest.approx(ref, rel=1e-12)
    assert c == pytest.approx(math.sqrt(1 + s), rel=1e-14)

    def boundary(log_s):
        return float(half_width(1.0, math.exp(log_s), alpha, 2))

    res = optimize.minimize_scalar(boundary, bracket=(-2, 2, 6), tol=1e-12)
    assert res.fun == pytest.approx(c, rel=1e-10)


@pytest.mark.parametrize("alpha", [0.1, 0.05, 0.025, 0.001])
def test_optimal_ratio_one_sided_is_minimum(alpha):
    s, c = optimal_variance_ratio(alpha, 1)
    assert float(half_width(1.0, s, alpha, 1)) == pytest.approx(c, rel=1e-12)
    # No ratio on a fine grid gives a smaller boundary (to 1e-9 relative).
    # With tau2 = 1 the ratio s = tau2 / se^2 is swept through the standard error.
    grid = np.exp(np.linspace(-3, 6, 4001))
    se = 1.0 / np.sqrt(grid)
    assert np.min(half_width(se, 1.0, alpha, 1) / se) >= c * (1 - 1e-9)


def test_mde_rule_puts_mde_on_the_boundary_earliest():
    alpha, mde = 0.05, 0.02
    plan = mixture_plan(alpha, 2, mde=mde)
    s, c = optimal_variance_ratio(alpha, 2)
    assert plan.tau2_rule == "mde"
    assert plan.tau2 == pytest.approx(s * mde**2 / c**2, rel=1e-14)
    # For alpha = 0.05: tau = 0.944 mde (values from the closed form, s = 8.212).
    assert math.sqrt(plan.tau2) / mde == pytest.approx(0.9441, abs=1e-4)
    v_star = mde**2 / c**2
    at = always_valid(mde, math.sqrt(v_star), plan).log_lambda[0]
    assert at == pytest.approx(math.log(1 / alpha), rel=1e-10)
    for factor in (0.5, 0.8, 1.25, 2.0):
        other = always_valid(mde, math.sqrt(v_star), plan.tau2 * factor).log_lambda[0]
        assert other < math.log(1 / alpha)


def test_max_n_rule_minimises_final_boundary():
    plan = mixture_plan(0.05, 2, max_n_per_arm=20_000, unit_variance=0.18)
    s, c = optimal_variance_ratio(0.05, 2)
    v_max = 0.18 / 20_000
    assert plan.tau2_rule == "max_n" and plan.tau2 == pytest.approx(s * v_max, rel=1e-14)
    best = float(half_width(math.sqrt(v_max), plan.tau2))
    assert best == pytest.approx(c * math.sqrt(v_max), rel=1e-12)
    for factor in (0.5, 2.0):
        assert float(half_width(math.sqrt(v_max), plan.tau2 * factor)) > best


def test_plan_from_metric():
    # Unit variance of a difference of proportions at the design alternative:
    # p_c(1-p_c) + p_t(1-p_t) = 0.09 + 0.1056 (binomial variance; common practice).
    plan = mixture_plan(metric={"kind": "binary", "baseline": 0.10, "mde": 0.02},
                        max_n_per_arm=50_000)
    assert plan.mde == pytest.approx(0.02)
    assert plan.unit_variance == pytest.approx(0.1956)
    assert plan.scale == "difference" and plan.metric["kind"] == "binary"
    rel = mixture_plan(metric={"kind": "binary", "baseline": 0.10, "mde": 0.2,
                               "relative": True, "scale": "relative"})
    assert rel.scale == "relative" and rel.mde == pytest.approx(0.2)
    s, c = optimal_variance_ratio(0.05, 2)
    assert rel.tau2 == pytest.approx(s * math.log1p(0.2) ** 2 / c**2, rel=1e-12)
    # Variance of the log ratio: (1-p_t)/p_t + (1-p_c)/p_c per unit (Katz et al. 1978).
    assert rel.unit_variance == pytest.approx(0.88 / 0.12 + 0.9 / 0.1, rel=1e-12)


def test_plan_round_trips_through_json():
    plans = [
        mixture_plan(mde=0.1),
        mixture_plan(0.01, 1, mde=0.3, max_n_per_arm=12_000),
        mixture_plan(metric={"kind": "continuous", "sd": 2.0, "mde": 0.25},
                     max_n_per_arm=5000),
        mixture_plan(tau2=0.123, scale="relative"),
    ]
    for plan in plans:
        d = plan.to_dict()
        assert d["kind"] == "mixture" and "version" in d
        back = plan_from_dict(json.loads(json.dumps(d)))
        assert back == plan
        assert back.to_dict() == d


@pytest.mark.parametrize(
    "kwargs, message",
    [
        (dict(), "tau2: cannot be chosen"),
        (dict(alpha=0.0, mde=0.1), r"alpha: got 0.0; allowed is a number in \(0, 0.5\]"),
        (dict(alpha=0.7, mde=0.1), "alpha: got 0.7"),
        (dict(sides=3, mde=0.1), "sides: got 3; allowed is one of 1, 2"),
        (dict(sides=True, mde=0.1), "sides: got True"),
        (dict(mde=0.0), "mde: got 0"),
        (dict(mde=float("nan")), "mde: got nan"),
        (dict(sides=1, mde=-0.1), "one-sided plan detects a positive effect"),
        (dict(tau2=-1.0), "tau2: got -1.0; allowed is a finite number > 0"),
        (dict(mde=0.1, max_n_per_arm=10.5), "max_n_per_arm: got 10.5"),
        (dict(mde=0.1, max_n_per_arm=0), "max_n_per_arm: got 0"),
        (dict(max_n_per_arm=100), "tau2: cannot be chosen"),
        (dict(mde=0.1, scale="ratio"), "scale: got 'ratio'"),
        (dict(mde=-1.5, scale="relative"), "a relative effect must be above -1"),
        (dict(metric={"kind": "binary", "baseline": 0.1, "mde": 0.02}, mde=0.03),
         "give the effect in one place"),
        (dict(metric={"kind": "binary", "baseline": 0.1, "mde": 0.02}, scale="relative"),
         "metric.scale is 'difference'"),
        (dict(metric={"kind": "binary", "mde": 0.02}), "metric.baseline"),
        (dict(mde=0.1, unit_variance=-2.0, max_n_per_arm=10), "unit_variance: got -2.0"),
    ],
)
def test_mixture_plan_rejects_bad_arguments(kwargs, message):
    with pytest.raises(ValueError, match=message):
        mixture_plan(**kwargs)


@pytest.mark.parametrize(
    "doc, message",
    [
        ({"kind": "mixtures"}, "kind: got 'mixtures'"),
        ([], "plan: got \\[\\]; allowed is a JSON object"),
        ({"kind": "mixture", "inputs": {}, "computed": {}}, "inputs.alpha: missing"),
    ],
)
def test_from_dict_rejects(doc, message):
    # common practice: a refused document names the field at fault
    with pytest.raises(ValueError, match=message):
        plan_from_dict(doc)


def test_from_dict_revalidates_values():
    d = mixture_plan(mde=0.1).to_dict()
    d["computed"]["tau2"] = 0.0
    with pytest.raises(ValueError, match="tau2: got 0.0"):
        plan_from_dict(d)


@pytest.mark.parametrize(
    "args, kwargs, message",
    [
        ((0.1, 0.0, 0.01), {}, "se: got a value that is not > 0"),
        ((0.1, np.nan, 0.01), {}, "se: got a value that is not > 0"),
        ((np.nan, 0.1, 0.01), {}, "estimate: got a value that is not finite"),
        ((0.1, 0.1, -0.01), {}, "tau2: got -0.01"),
        ((0.1, 0.1, 0.01), {"alpha": 0.6}, "alpha: got 0.6"),
        ((0.1, 0.1, 0.01), {"scale": "log"}, "scale: got 'log'"),
        ((0.1, 0.1, 0.01), {"scale": "relative", "null": -1.0}, "relative null"),
        ((0.1, 0.1, {"kind": "mixture"}), {}, "read plan documents"),
    ],
)
def test_always_valid_rejects_bad_arguments(args, kwargs, message):
    with pytest.raises(ValueError, match=message):
        always_valid(*args, **kwargs)


def test_always_valid_refuses_settings_that_contradict_the_plan():
    plan = mixture_plan(mde=0.1)
    with pytest.raises(ValueError, match="alpha: got 0.1 but the plan has 0.05"):
        always_valid(0.1, 0.1, plan, alpha=0.1)
    with pytest.raises(ValueError, match="scale: got 'relative' but the plan"):
        always_valid(0.1, 0.1, plan, scale="relative")
    assert isinstance(always_valid(0.1, 0.1, plan, alpha=0.05, sides=2), MixtureResult)


# ---------------------------------------------------------------------------
# Error rates by simulation (Ville's inequality)
# ---------------------------------------------------------------------------

N_STREAMS = 2000
N_STEPS = 10_000
CHUNK = 250


def _normal_streams(seed: int, drift: float):
    """Per-pair differences with variance 2 (sigma = 1 per arm), cumulative means."""
    rng = np.random.default_rng(seed)
    n = np.arange(1, N_STEPS + 1)
    for _ in range(N_STREAMS // CHUNK):
        d = rng.standard_normal((CHUNK, N_STEPS))
        d *= math.sqrt(2.0)
        d += drift
        est = np.cumsum(d, axis=1)
        est /= n
        yield est, np.sqrt(2.0 / n)


@pytest.fixture(scope="module")
def known_variance_null():
    """Look after every pair of observations, n = 1..10,000 per arm, true effect 0."""
    plan2 = mixture_plan(0.05, 2, mde=0.1)
    plan1 = mixture_plan(0.05, 1, mde=0.1)
    out = {"two": 0, "one": 0, "naive": 0}
    for est, se in _normal_streams(20240601, 0.0):
        out["two"] += int((always_valid(est, se, plan2).first_rejection >= 0).sum())
        out["one"] += int((always_valid(est, se, plan1).first_rejection >= 0).sum())
        out["naive"] += int((np.abs(est / se) > 1.96).any(axis=1).sum())
    return out


def test_type_one_error_under_continuous_monitoring(known_variance_null):
    # Ville (1939): P(sup_n Lambda_n >= 1/alpha) <= alpha under the null. With 2000
    # streams the one-sided 99% Clopper-Pearson upper bound of the rejection rate
    # must be at most alpha = 0.05 (it is near 0.034 + 2.33 * sqrt(0.034 * 0.966 /
    # 2000) = 0.044 for the observed rate).
    x = known_variance_null["two"]
    assert clopper_pearson_upper(x, N_STREAMS) <= 0.05


def test_one_sided_type_one_error(known_variance_null):
    # Half-normal mixture: exact mean-one martingale, so Ville's bound holds too.
    x = known_variance_null["one"]
    assert clopper_pearson_upper(x, N_STREAMS) <= 0.05


def test_naive_repeated_testing_contrast(known_variance_null):
    # The same streams tested with |z| > 1.96 at every look reject far more often
    # (Armitage, McPherson & Rowe 1969: 0.32 already at 50 looks; 10,000 looks are
    # many more), so the simulation is able to detect an invalid rule.
    assert known_variance_null["naive"] / N_STREAMS > 0.32


@pytest.fixture(scope="module")
def known_variance_effect():
    mde = 0.1
    plan2 = mixture_plan(0.05, 2, mde=mde)
    plan1 = mixture_plan(0.05, 1, mde=mde)
    out = {"miss2": 0, "miss1": 0, "power": 0}
    for est, se in _normal_streams(20240602, mde):
        r2 = always_valid(est, se, plan2)
        covered = (r2.ci_lower <= mde) & (r2.ci_upper >= mde)
        out["miss2"] += int((~covered.all(axis=1)).sum())
        out["power"] += int((r2.first_rejection >= 0).sum())
        r1 = always_valid(est, se, plan1)
        out["miss1"] += int((r1.ci_lower > mde).any(axis=1).sum())
    return out


def test_confidence_sequence_covers_at_every_look(known_variance_effect):
    # Time-uniform coverage (Howard et al. 2021; Johari et al. 2022): the true
    # effect is inside the intersected interval at all 10,000 looks in >= 95% of
    # streams; checked by the 99% Clopper-Pearson upper bound of the miss rate.
    assert clopper_pearson_upper(known_variance_effect["miss2"], N_STREAMS) <= 0.05
    assert clopper_pearson_upper(known_variance_effect["miss1"], N_STREAMS) <= 0.05


def test_power_at_the_mde(known_variance_effect):
    # At the mde the boundary is reached near n = 2 c^2 / mde^2 = 1842 per arm
    # (c = 3.035 for alpha 0.05); by 10,000 per arm nearly every stream rejects.
    # This keeps the error-rate checks honest: the test is not merely timid.
    assert known_variance_effect["power"] / N_STREAMS > 0.95


@pytest.fixture(scope="module")
def binary_null():
    """Binary metric, 10% in both arms, variance estimated at each look.

    The plug-in standard error of metrics.effect (unpooled, zero-count floor) is
    used as if known: se_n enters Lambda_n in place of the true standard error, so
    validity is asymptotic (Johari et al. 2022); looks start at the very first unit.
    """
    rng = np.random.default_rng(20240603)
    n = np.arange(1, N_STEPS + 1)
    plan_d = mixture_plan(0.05, 2, mde=0.02)
    plan_r = mixture_plan(0.05, 2, mde=0.2, scale="relative")
    out = {"difference": 0, "relative": 0}
    for _ in range(N_STREAMS // CHUNK):
        sc = np.cumsum(rng.random((CHUNK, N_STEPS)) < 0.1, axis=1)
        st = np.cumsum(rng.random((CHUNK, N_STEPS)) < 0.1, axis=1)
        c, t = {"n": n, "successes": sc}, {"n": n, "successes": st}
        e = metrics.effect("binary", c, t)
        out["difference"] += int((always_valid_effect(e, plan_d).first_rejection >= 0).sum())
        e = metrics.effect("binary", c, t, scale="relative")
        out["relative"] += int((always_valid_effect(e, plan_r).first_rejection >= 0).sum())
    return out


def test_type_one_error_with_estimated_variance(binary_null):
    # Same Ville bound, 99% Clopper-Pearson upper bound <= alpha.
    assert clopper_pearson_upper(binary_null["difference"], N_STREAMS) <= 0.05


def test_type_one_error_relative_scale(binary_null):
    assert clopper_pearson_upper(binary_null["relative"], N_STREAMS) <= 0.05
