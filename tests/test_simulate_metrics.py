"""The simulator's data models for ratio metrics, pre-period covariates and
over-dispersed counts, and plans with margins: the same decisions as monitoring, the
exact sampling laws, the variance the covariate removes, and alpha held where the
Poisson variance leaks. Every bound is computed in a comment; seeds are fixed.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

import seqtest
from seqtest.monitoring.analysis import analyze
from seqtest.monitoring.metrics import METRIC_FIELDS, effect
from seqtest.simulation.engine import _draw_chunk, _job, clopper_pearson, simulate
from seqtest.simulation.scenarios import scenario_from_dict

RATIO_DATA = {"kind": "ratio", "rate": 0.5, "denominator_mean": 3.0, "dispersion": 2.0}
# per-user moments of RATIO_DATA (sessions D = 1 + Poisson(2), clicks Poisson(D r G),
# G ~ gamma(2, 1/2)): E D = 3, var D = 2, E N = 1.5, var N = 1.5 + 0.25 var(D G) =
# 1.5 + 0.25 (11 x 1.5 - 9) = 3.375, cov(N, D) = r var D = 1
RATIO_METRIC = {"kind": "ratio", "numerator_mean": 1.5, "denominator_mean": 3.0,
                "numerator_sd": math.sqrt(3.375), "denominator_sd": math.sqrt(2.0),
                "covariance": 1.0, "mde": 0.2, "relative": True}


@pytest.mark.parametrize("plan_kw, doc", [
    (dict(looks=4, metric=RATIO_METRIC),
     {"name": "ratio-random", "data": RATIO_DATA, "effect": {"mde_multiple": 0.7},
      "traffic": {"mode": "random", "cv": 0.5, "extra_looks": [0.4]}}),
    (dict(sides=1, alpha=0.025, looks=3, futility="pocock-type",
          metric={"kind": "adjusted", "sd": 1.0, "correlation": 0.6, "mde": 0.0,
                  "margin": 0.1, "better": "lower", "hypothesis": "non_inferiority"}),
     {"name": "adjusted-margin-lower", "effect": {"mde_multiple": 0.6},
      "data": {"kind": "pre_period", "mean": 5.0, "sd": 1.0, "correlation": 0.6},
      "traffic": {"mode": "random", "cv": 0.3, "final": "scheduled"}}),
    (dict(looks=3, metric={"kind": "count", "baseline": 2.0, "dispersion": 2.0,
                           "mde": 0.4}),
     {"name": "count-robust", "data": {"kind": "counts", "rate": 2.0, "dispersion": 2.0},
      "effect": {"mde_multiple": 0.8}, "traffic": {"mode": "uneven",
                                                   "fractions": [0.2, 0.6, 1.05]}}),
    (dict(sides=1, alpha=0.025, looks=3,
          metric={"kind": "binary", "baseline": 0.3, "mde": 0.0, "relative": True,
                  "scale": "relative", "margin": -0.1, "hypothesis": "non_inferiority"}),
     {"name": "binary-relative-margin", "data": {"kind": "binary", "rate": 0.3},
      "effect": {"mde_multiple": 0.5}, "traffic": {"mode": "random", "cv": 0.4}}),
])
def test_decisions_are_those_of_analyze(plan_kw, doc):
    # Reference: seqtest.analyze, the monitoring door, fed the very totals the simulator
    # drew (the looks it analysed), the last one declared final: the same stop look and
    # outcome for every replicate (margins and lower-is-better included).
    base = {"alpha": 0.05, "sides": 2, "power": 0.9}
    plan = seqtest.design(**{**base, **plan_kw})
    sc = scenario_from_dict(doc)
    reps = 40
    res = simulate(plan, sc, reps, seed=3, keep_paths=True, chunk_size=20)
    p = res.paths
    fields = METRIC_FIELDS[plan.metric["kind"]]
    codes = {"stop_efficacy": 1, "stop_futility": 2, "complete_not_significant": 3}
    outcomes = set()
    for i in range(reps):
        idx = [j for j in range(p["looks"][i]) if p["valid"][i, j]]
        looks = [{arm: {f: float(p[arm][f][i, j]) for f in fields}
                  for arm in ("control", "treatment")} for j in idx]
        a = analyze(plan, looks, final=True)
        decs = [x.decision for x in a.looks]
        first = next(j for j, d in enumerate(decs)
                     if d in ("stop_efficacy", "complete_not_significant", "stop_futility"))
        assert p["stop"][i] == idx[first], (i, decs)
        assert p["outcome"][i] == codes[decs[first]], (i, decs)
        outcomes.add(decs[first])
    assert "stop_efficacy" in outcomes          # the cases do exercise the stops


def test_pre_period_totals_have_the_exact_bivariate_law():
    # Reference: 30 users' (y, x) drawn one by one from the bivariate normal with
    # numpy's multivariate_normal; two-sample Kolmogorov-Smirnov on every sufficient
    # statistic (sum y, sum y^2, sum x, sum x^2, sum x y), p-value above 0.001 each
    # (fixed seeds; five tests, so a chance failure has probability below 0.005).
    plan = seqtest.design(looks=1)
    doc = {"name": "pp", "data": {"kind": "pre_period", "mean": 2.0, "sd": 1.5,
                                  "correlation": 0.8},
           "traffic": {"mode": "fixed", "max_total": 60}}
    job = _job(plan, scenario_from_dict({**doc, "analysis": {"kind": "adjusted"}}), 4,
               20_000, False)
    n_c, _, _, ctrl, _ = _draw_chunk(job, 0, 20_000)
    assert n_c[0, 0] == 30
    rng = np.random.default_rng(8)
    cov = 2.25 * np.array([[1.0, 0.8], [0.8, 1.0]])
    yx = rng.multivariate_normal([2.0, 2.0], cov, size=(20_000, 30))
    y, x = yx[..., 0], yx[..., 1]
    for field, ref in (("sum", y.sum(1)), ("sum_sq", (y * y).sum(1)),
                       ("covariate", x.sum(1)), ("covariate_sq", (x * x).sum(1)),
                       ("cross", (x * y).sum(1))):
        assert stats.ks_2samp(ctrl[field][:, 0], ref).pvalue > 1e-3, field


def test_ratio_users_have_the_documented_moments():
    # The data model's per-user means (module docstring of the scenarios): sessions
    # 3, clicks 3 x 0.5 = 1.5, and the ratio's delta-method spread: over 20,000
    # replicates of 300 users the sd of the control ratio equals the delta-method se of
    # the moments above, sqrt((3.375 - 2 x 0.5 x 1 + 0.25 x 2) / 9 / 300) = 0.03263;
    # the sample sd has relative sd 1/sqrt(2 x 19,999) = 0.5%, bound 2.5% (5 of them,
    # with the delta method's O(1/n) = 0.3% at n = 300).
    plan = seqtest.design(looks=1)
    doc = {"name": "r", "data": RATIO_DATA, "traffic": {"mode": "fixed", "max_total": 600}}
    job = _job(plan, scenario_from_dict(doc), 6, 20_000, False)
    n_c, _, _, ctrl, _ = _draw_chunk(job, 0, 20_000)
    n = 300
    assert n_c[0, 0] == n
    num, den = ctrl["numerator"][:, 0], ctrl["denominator"][:, 0]
    # means: sd of a mean of 20,000 x 300 users is sqrt(var / 6e6); bound 5 of them
    assert den.mean() / n == pytest.approx(3.0, abs=5 * math.sqrt(2.0 / 6e6))
    assert num.mean() / n == pytest.approx(1.5, abs=5 * math.sqrt(3.375 / 6e6))
    se = math.sqrt((3.375 - 2 * 0.5 * 1.0 + 0.25 * 2.0) / 9.0 / n)
    assert np.std(num / den, ddof=1) / se == pytest.approx(1.0, abs=0.025)


def test_adjustment_removes_the_share_rho_squared_of_the_variance_and_holds_alpha():
    # Deng, Xu, Kohavi and Walker (2013): the adjusted difference has (1 - rho^2) times
    # the variance of the unadjusted one. 20,000 simulated null experiments (seeded,
    # rho = 0.7, so 1 - rho^2 = 0.51), both estimates from the same totals at the
    # final look. Bound for the log of the ratio of the two sample variances: for
    # estimates with correlation r, var(log s_A^2 - log s_U^2) = 4 (1 - r^2) / N
    # (delta method for normal samples), 4 standard errors; the finite-n excess of
    # the adjusted variance (theta estimated) is O(1/n) = 0.1%, far inside.
    rho = 0.7
    metric = {"kind": "adjusted", "sd": 1.0, "correlation": rho, "mde": 0.1}
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=4, metric=metric)
    sc = scenario_from_dict({"name": "pp-null", "data": {"kind": "pre_period",
                                                          "mean": 4.0, "sd": 1.0,
                                                          "correlation": rho}})
    reps = 20_000
    res = simulate(plan, sc, reps, seed=11, keep_paths=True)
    p = res.paths
    last = {a: {f: p[a][f][:, -1] for f in METRIC_FIELDS["adjusted"]}
            for a in ("control", "treatment")}
    adj = effect("adjusted", last["control"], last["treatment"])
    raw = effect("continuous", *({f: last[a][f] for f in ("n", "sum", "sum_sq")}
                                 for a in ("control", "treatment")))
    a_est, u_est = np.asarray(adj.estimate), np.asarray(raw.estimate)
    r = np.corrcoef(a_est, u_est)[0, 1]
    ratio = np.var(a_est, ddof=1) / np.var(u_est, ddof=1)
    bound = 4 * math.sqrt(4 * (1 - r * r) / reps)
    assert abs(math.log(ratio / (1 - rho * rho))) < bound, (ratio, bound)
    # the estimated variances say the same (their mean ratio; its spread is tiny)
    se_ratio = np.mean(np.square(adj.se)) / np.mean(np.square(raw.se))
    assert se_ratio == pytest.approx(1 - rho * rho, rel=0.01)
    # alpha held: the 99.9% Clopper-Pearson interval of the rejection rate covers 0.05
    lo, hi = clopper_pearson(res.rejections, reps, 0.999)
    assert lo <= 0.05 <= hi, (res.rate, lo, hi)
    # and the plan is sized for the reduced variance: its power holds at the design
    # effect (4,000 replicates: the 99.9% interval must reach 0.9)
    pw = simulate(plan, scenario_from_dict({"name": "pp-alt", "data": sc.data | {
        "kind": "pre_period"}, "effect": {"mde_multiple": 1.0}}), 4_000, seed=12)
    plo, phi = clopper_pearson(pw.rejections, pw.reps, 0.999)
    assert plo <= 0.9 <= phi, (pw.rate, plo, phi)


def test_robust_counts_hold_alpha_where_the_poisson_variance_leaks():
    # The validation grid's finding: over-dispersed counts (negative binomial, variance
    # 2 + 4/2 = 4, twice the Poisson variance) analysed as Poisson rates reject far
    # more than alpha (z inflated by sqrt 2). The same data analysed as a count metric
    # (the per-user counts' own variance) hold it. 20,000 replicates each, 5-look
    # O'Brien-Fleming-type plans, 2,000 users in total, seeded; bounds are 99.9%
    # Clopper-Pearson intervals.
    base = {"alpha": 0.05, "sides": 2, "power": 0.9, "looks": 5}
    data = {"kind": "counts", "rate": 2.0, "dispersion": 2.0}
    traffic = {"mode": "fixed", "max_total": 2_000}
    poisson = seqtest.design(**base, metric={"kind": "rate", "baseline": 2.0, "mde": 0.4})
    robust = seqtest.design(**base, metric={"kind": "count", "baseline": 2.0,
                                            "dispersion": 2.0, "mde": 0.4})
    sc = {"name": "od", "data": data, "traffic": traffic}
    leak = simulate(poisson, scenario_from_dict(sc), 20_000, seed=21)
    hold = simulate(robust, scenario_from_dict(sc), 20_000, seed=21)
    assert leak.analysis_kind == "rate" and hold.analysis_kind == "count"
    lo, _ = clopper_pearson(leak.rejections, leak.reps, 0.999)
    assert lo > 0.15 and leak.leaks
    lo, hi = clopper_pearson(hold.rejections, hold.reps, 0.999)
    assert lo <= 0.05 <= hi, (hold.rate, lo, hi)
    for tail in hold.tails:
        t_lo, _ = clopper_pearson(tail.rejections, hold.reps, 0.999)
        assert t_lo <= 0.025, tail


def test_scenario_analysis_kind_and_its_refusals():
    sc = scenario_from_dict({"data": {"kind": "counts", "rate": 1.0},
                             "analysis": {"kind": "count"}})
    assert sc.analysis_kind == "count" and sc.to_dict()["analysis"]["kind"] == "count"
    with pytest.raises(ValueError, match="analysis.kind: got 'ratio'; counts data are "
                                         "analysed as rate or count"):
        scenario_from_dict({"data": {"kind": "counts", "rate": 1.0},
                            "analysis": {"kind": "ratio"}})
    with pytest.raises(ValueError, match="data.denominator_mean: got 0.5"):
        scenario_from_dict({"data": {"kind": "ratio", "rate": 1.0,
                                     "denominator_mean": 0.5}})
    with pytest.raises(ValueError, match="data.correlation: got 1.0"):
        scenario_from_dict({"data": {"kind": "pre_period", "mean": 1.0, "sd": 1.0,
                                     "correlation": 1.0}})
    plan = seqtest.design(looks=2, metric={"kind": "count", "baseline": 2.0, "sd": 2.0,
                                           "mde": 0.3})
    with pytest.raises(ValueError, match="data.kind: the scenario's normal data are "
                                         "analysed as a continuous metric but the plan is "
                                         "for a count metric"):
        simulate(plan, scenario_from_dict({"data": {"kind": "normal", "mean": 1.0,
                                                    "sd": 1.0}}), 10)
