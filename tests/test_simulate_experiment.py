"""Simulating experiments: correlated metrics, the decision rule, reproducibility.

Outside sources, named beside each check: the multivariate probit's cells against a
direct Monte Carlo of its latent normal vector (numpy); the Wishart law of centred sums
of squares (Anderson 2003, An Introduction to Multivariate Statistical Analysis,
section 7.2: E W = (n - 1) Sigma, corr(W_11, W_22) = rho^2); Clopper-Pearson bounds
for rates. Bounds are 4 Monte Carlo standard errors unless said (computed in the
comments); seeds are fixed.
"""

from __future__ import annotations

import math
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pytest
from scipy import special

from seqtest.planning.experiment import experiment_plan
from seqtest.simulation.experiment import (
    _binary_cells,
    _draw_group,
    _Group,
    experiment_scenario_from_dict,
    simulate_experiment,
)

NORMAL = {"kind": "continuous", "sd": 1.0, "mde": 0.1}


def test_probit_cells_have_the_rates_and_the_latent_correlation():
    # the cells' margins are the rates (inclusion-exclusion is exact up to the CDF's
    # 1e-9), and the cells match a direct Monte Carlo of the latent normal: 400,000
    # draws, standard error sqrt(p (1 - p) / n) <= 0.0008, bound 4 of them
    p = np.array([0.10, 0.30, 0.55])
    corr = np.array([[1.0, 0.5, -0.2], [0.5, 1.0, 0.3], [-0.2, 0.3, 1.0]])
    cells = _binary_cells(p, corr)
    for i in range(3):
        bit = np.array([(s >> i) & 1 for s in range(8)], bool)
        assert cells[bit].sum() == pytest.approx(p[i], abs=1e-8)
    rng = np.random.default_rng(5)
    z = rng.standard_normal((400_000, 3)) @ np.linalg.cholesky(corr).T
    success = z < special.ndtri(p)
    idx = (success * np.array([1, 2, 4])).sum(axis=1)
    freq = np.bincount(idx, minlength=8) / idx.size
    se = np.sqrt(cells * (1 - cells) / idx.size)
    assert np.all(np.abs(freq - cells) <= 4 * se + 1e-12)


def test_correlated_normal_sums_have_their_joint_law():
    # one look of 50 users, 20,000 replicates: the arm means are correlated rho
    # (standard error (1 - rho^2) / sqrt(R) = 0.0053), the centred sums of squares
    # have mean (n - 1) sigma^2 (standard error sigma^2 sqrt(2 (n - 1) / R)) and
    # correlation rho^2 (Anderson 2003, 7.2; standard error (1 - rho^4) / sqrt(R))
    rho, n, reps = 0.6, 50, 20_000
    g = _Group(("a", "b"), "normal", np.array([[1.0, rho], [rho, 1.0]]))
    rng = np.random.default_rng(9)
    cum = np.full((reps, 1), n)
    a, b = _draw_group(g, rng, cum, [{"mean": 1.0, "sd": 2.0}, {"mean": -1.0, "sd": 0.5}])
    ma, mb = a["sum"][:, 0] / n, b["sum"][:, 0] / n
    assert np.mean(ma) == pytest.approx(1.0, abs=4 * 2.0 / math.sqrt(n * reps))
    r = np.corrcoef(ma, mb)[0, 1]
    assert r == pytest.approx(rho, abs=4 * (1 - rho ** 2) / math.sqrt(reps))
    wa = a["sum_sq"][:, 0] - a["sum"][:, 0] ** 2 / n
    wb = b["sum_sq"][:, 0] - b["sum"][:, 0] ** 2 / n
    assert np.mean(wa) == pytest.approx((n - 1) * 4.0,
                                        abs=4 * 4.0 * math.sqrt(2 * (n - 1) / reps))
    assert np.corrcoef(wa, wb)[0, 1] == pytest.approx(rho ** 2,
                                                      abs=4 * (1 - rho ** 4) / math.sqrt(reps))


def _null(name: str = "y") -> dict:
    return {"name": "null", "metrics": [{"name": name, "data": {"kind": "normal",
                                                                "mean": 0.0, "sd": 1.0}}]}


@pytest.mark.parametrize("method", ["graphical", "dunnett"])
def test_family_wise_error_under_the_global_null(method):
    # 20,000 replicates: at alpha 0.025 the standard error is 0.0011; graphical
    # (Bonferroni-based, conservative) must not exceed alpha by more than 3.3 of them,
    # Dunnett-type boundaries spend alpha exactly (within 3.3 standard errors, plus
    # their own quasi-Monte Carlo error, below 1e-4)
    e = experiment_plan(4, NORMAL, alpha=0.025, sides=1, looks=4, method=method)
    res = simulate_experiment(e, experiment_scenario_from_dict(_null("continuous")),
                              20_000, seed=4)
    se = math.sqrt(0.025 * 0.975 / 20_000)
    assert res.null and len(res.true_nulls) == 3
    assert res.rate <= 0.025 + 3.3 * se
    if method == "dunnett":
        assert abs(res.rate - 0.025) <= 3.3 * se + 1e-4
    assert res.false_win.count == res.rejections      # one-sided: every rejection a win


def test_one_arm_has_its_planned_power_and_the_null_arms_hold_alpha():
    # Dunnett-type, k = 2: the better arm's power is its planned power (a comparison
    # stops on its own; standard error sqrt(0.09 / 20,000) = 0.0021, bound 4 of them)
    e = experiment_plan(3, NORMAL, alpha=0.025, sides=1, looks=3, method="dunnett")
    sc = experiment_scenario_from_dict({"metrics": [
        {"name": "continuous", "data": {"kind": "normal", "mean": 0.0, "sd": 1.0},
         "effects": {"treatment_1": 1.0}, "effect_type": "mde_multiple"}]})
    res = simulate_experiment(e, sc, 20_000, seed=8)
    better = res.hypotheses["treatment_1/continuous"]
    assert better.planned == pytest.approx(0.9, abs=1e-6)
    assert abs(better.rate - 0.9) <= 4 * math.sqrt(0.09 / 20_000)
    assert res.true_nulls == ["treatment_2/continuous"]
    assert res.rate <= 0.025 + 4 * math.sqrt(0.025 * 0.975 / 20_000)


def test_runs_repeat_bit_for_bit_whatever_runs_the_chunks():
    e = experiment_plan(3, [{"name": "y", **NORMAL},
                            {"name": "g", "role": "guardrail", "kind": "binary",
                             "baseline": 0.2, "mde": 0.05, "better": "lower"}],
                        alpha=0.025, sides=1, looks=3)
    sc = experiment_scenario_from_dict({"metrics": [
        {"name": "y", "data": {"kind": "normal", "mean": 0.0, "sd": 1.0},
         "effects": {"treatment_1": 0.1}},
        {"name": "g", "data": {"kind": "binary", "rate": 0.2},
         "effects": {"treatment_2": 0.03}}]})
    one = simulate_experiment(e, sc, 3_000, seed=3, chunk_size=1_000)
    with ThreadPoolExecutor(2) as ex:
        two = simulate_experiment(e, sc, 3_000, seed=3, chunk_size=1_000, executor=ex)
    assert one.to_dict() == two.to_dict()
    other = simulate_experiment(e, sc, 3_000, seed=4, chunk_size=1_000)
    assert other.to_dict() != one.to_dict()
    # harm on treatment_2 is found; no harm on treatment_1
    assert one.guardrails["treatment_2/g"].rate > 0.5
    assert one.guardrails["treatment_1/g"].planned == 0.05


@pytest.mark.parametrize("doc, message", [
    ({"metrics": [{"name": "z", "data": {"kind": "normal", "mean": 0, "sd": 1}}]},
     "metrics: the plan's continuous has no data"),
    ({"metrics": [{"name": "continuous", "data": {"kind": "binary", "rate": 0.1}}]},
     "analysed as binary"),
    ({"metrics": [{"name": "continuous", "data": {"kind": "normal", "mean": 0, "sd": 1},
                   "effects": {"purple": 0.1}}]}, "effects.purple: not a treatment arm"),
])
def test_scenarios_that_do_not_fit_the_plan_are_refused(doc, message):
    e = experiment_plan(3, NORMAL, alpha=0.025, sides=1, looks=2)
    with pytest.raises(ValueError, match=message.replace("(", r"\(").replace(")", r"\)")):
        simulate_experiment(e, experiment_scenario_from_dict(doc), 10)


@pytest.mark.parametrize("corr, message", [
    ({"a": {"x": 0.3}}, "not a metric"),
    ([["a", "b", 0.95], ["b", "c", 0.95], ["a", "c", -0.95]], "positive definite"),
    ([["a", "d", 0.3]], "correlations are drawn between"),
    ([["a", "a", 0.3]], "with itself"),
])
def test_bad_correlations_are_refused(corr, message):
    doc = {"metrics": [{"name": x, "data": {"kind": "normal", "mean": 0, "sd": 1}}
                       for x in ("a", "b", "c")]
           + [{"name": "d", "data": {"kind": "binary", "rate": 0.1}}],
           "correlation": corr}
    with pytest.raises(ValueError, match=message):
        sc = experiment_scenario_from_dict(doc)
        from seqtest.simulation.experiment import _groups
        _groups(sc)


def test_a_count_metric_experiment_holds_its_error_and_power():
    # count metrics (per-user counts, robust variance) drawn by the two-arm simulator's
    # data model (negative binomial counts, shape 2). treatment_2 is a true null, so the
    # family-wise error is its rejection rate: at most 0.025 (one-sided, Holm over two
    # arms) up to Monte Carlo error, 4 standard errors of 20,000 replicates at 0.025 =
    # 4 sqrt(0.025 x 0.975 / 20,000) = 0.0044. treatment_1 has the mde: its power is at
    # least the planned 0.9 at its initial level (alpha passed on only adds), less 4
    # standard errors sqrt(0.09 / 20,000) = 0.0085
    metric = {"name": "visits", "kind": "count", "baseline": 1.5, "dispersion": 2.0,
              "mde": 0.3}
    e = experiment_plan(3, metric, alpha=0.025, sides=1, looks=3)
    sc = experiment_scenario_from_dict({"metrics": [
        {"name": "visits", "data": {"kind": "counts", "rate": 1.5, "dispersion": 2.0},
         "effects": {"treatment_1": 1.0}, "effect_type": "mde_multiple"}]})
    n = 20_000
    res = simulate_experiment(e, sc, n, seed=11)
    assert res.true_nulls == ["treatment_2/visits"]
    assert res.rate <= 0.025 + 4 * math.sqrt(0.025 * 0.975 / n)
    power = res.hypotheses["treatment_1/visits"]
    assert power.planned == pytest.approx(0.9, abs=1e-6)
    assert power.rate >= 0.9 - 4 * math.sqrt(0.09 / n)


def test_new_kinds_draw_the_totals_their_metric_reads():
    # a rate, a ratio and an adjusted metric side by side: each gets its kind's totals
    # (seqtest.monitoring.metrics.METRIC_FIELDS) and the run is repeatable
    from seqtest.monitoring.metrics import METRIC_FIELDS
    from seqtest.simulation.experiment import prepare_experiment
    e = experiment_plan(2, [
        {"name": "r", "kind": "rate", "baseline": 2.0, "mde": 0.2},
        {"name": "q", "kind": "ratio", "numerator_mean": 2.0, "denominator_mean": 4.0,
         "numerator_sd": 3.0, "denominator_sd": 3.0, "covariance": 4.0, "mde": 0.1},
        {"name": "a", "kind": "adjusted", "sd": 2.0, "correlation": 0.6, "mde": 0.3}],
        alpha=0.025, sides=1, looks=2)
    sc = experiment_scenario_from_dict({"metrics": [
        {"name": "r", "data": {"kind": "counts", "rate": 2.0}},
        {"name": "q", "data": {"kind": "ratio", "rate": 0.5, "denominator_mean": 4.0}},
        {"name": "a", "data": {"kind": "pre_period", "mean": 3.0, "sd": 2.0,
                               "correlation": 0.6}}]})
    prep = prepare_experiment(e, sc, 10)
    for g in prep.job.groups:
        drawn = _draw_group(g, np.random.default_rng(0),
                            np.broadcast_to(prep.job.counts["control"], (3, 2)),
                            [prep.job.params[g.names[0]]["control"]])[0]
        assert set(drawn) == set(METRIC_FIELDS[e.metric_by_name(g.names[0]).kind])
    one = simulate_experiment(e, sc, 400, seed=2)
    assert one.to_dict() == simulate_experiment(e, sc, 400, seed=2).to_dict()
