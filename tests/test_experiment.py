"""Experiments with many arms and several metrics: plans, documents, monitoring.

Outside sources, named beside each check:

- Dunnett (1955), JASA 50:1096-1121: one-look critical values for many-to-one
  comparisons, equal allocation, infinite degrees of freedom, alpha 0.05 (from memory,
  as in tests/test_multiarm.py);
- scipy.stats.dunnett (many-to-one comparisons of samples, multivariate t) on data;
- scipy.stats.chisquare (Pearson's goodness of fit);
- Bretz, Maurer, Brannath and Posch (2009), Statistics in Medicine 28:586-604,
  algorithm 1: graph updates worked by hand (from memory of the algorithm) and
  Holm's procedure as the equal-weight, equal-split graph (their section 3);
- the project's two-arm plans and analysis (seqtest.design, seqtest.analyze);
- facts of the trade (common practice): the correlation sqrt(a_i a_j / ((1 + a_i)
  (1 + a_j))) of comparisons sharing a control.

Monte Carlo checks use fixed seeds and bounds of 3.3 to 4 standard errors, computed in
the comments.
"""

from __future__ import annotations

import copy
import json
import math

import numpy as np
import pytest
from scipy import stats

import seqtest
from seqtest.core.errors import InputError, LookDataError, PlanDocumentError
from seqtest.core.vocabulary import DECISIONS, Decision
from seqtest.monitoring import metrics
from seqtest.monitoring.experiment import ExperimentAnalysis, analyze_experiment, srm_test
from seqtest.planning.documents import plan_from_dict
from seqtest.planning.experiment import (
    default_transitions,
    experiment_plan,
    graph_update,
    graph_update_many,
)

BINARY = {"kind": "binary", "baseline": 0.10, "mde": 0.02}
NORMAL = {"kind": "continuous", "sd": 1.0, "mde": 0.1}


# ---------------------------------------------------------------------------------
# The vocabulary
# ---------------------------------------------------------------------------------

def test_stop_harm_is_appended_so_earlier_codes_keep_their_meaning():
    assert [d.value for d in DECISIONS] == ["continue", "stop_efficacy", "stop_futility",
                                            "complete_not_significant", "stop_harm"]
    assert Decision.STOP_HARM.code == 4 and Decision.STOP_HARM.terminal


# ---------------------------------------------------------------------------------
# One treatment, one metric: the two-arm plan
# ---------------------------------------------------------------------------------

@pytest.mark.parametrize("kw", [
    {"alpha": 0.025, "sides": 1, "looks": 5, "metric": BINARY},
    {"alpha": 0.05, "sides": 2, "looks": 4, "metric": NORMAL},
    {"alpha": 0.05, "sides": 2, "information_fractions": [0.2, 0.5, 0.7, 1.0],
     "metric": {**BINARY, "relative": True, "mde": 0.15, "scale": "relative"},
     "futility": "pocock-type"},
    {"alpha": 0.025, "sides": 1, "looks": 3, "metric": NORMAL, "futility": "hsd:-2",
     "binding": True, "efficacy": "pocock-type"},
    {"alpha": 0.05, "sides": 2, "looks": 3, "metric": BINARY, "efficacy": "obrien-fleming"},
    {"alpha": 0.025, "sides": 1, "looks": 4, "metric": {**NORMAL, "allocation": 2.0}},
])
@pytest.mark.parametrize("method", ["graphical", "dunnett"])
def test_one_treatment_one_metric_reproduces_the_two_arm_plan_exactly(kw, method):
    # the project's two-arm plan (seqtest.design) is the reference
    kw = dict(kw)
    metric = dict(kw.pop("metric"))
    alloc = metric.pop("allocation", None)
    two = seqtest.design(**kw, metric={**metric, **({} if alloc is None
                                                     else {"allocation": alloc})})
    fr = kw.pop("information_fractions", None)
    e = experiment_plan(2, metric, allocations=alloc, method=method,
                        information_fractions=fr, **kw)
    c = e.comparisons[0]
    assert c.plan == two                       # every input and computed number
    np.testing.assert_array_equal(c.plan.efficacy_z, two.efficacy_z)
    assert c.plan.drift == two.drift
    np.testing.assert_array_equal(e.sizes[metric["kind"]]["control"], two.n_control)
    np.testing.assert_array_equal(e.sizes[metric["kind"]]["treatment"], two.n_treatment)
    assert c.level == kw["alpha"]
    assert c.planned_power == pytest.approx(two.power, abs=1e-6)


def test_one_treatment_analysis_decides_as_the_two_arm_analysis():
    # the project's two-arm analysis is the reference (no futility boundary, so the
    # two treat every look alike)
    plan = seqtest.design(alpha=0.05, sides=2, looks=4, metric=BINARY)
    e = experiment_plan(2, BINARY, alpha=0.05, sides=2, looks=4)
    rng = np.random.default_rng(7)
    for effect in (0.0, 0.03):
        looks, s_c, s_t = [], 0, 0
        for k in range(4):
            n = int(plan.n_control[k])
            m = n - (int(plan.n_control[k - 1]) if k else 0)
            s_c += int(rng.binomial(m, 0.10))
            s_t += int(rng.binomial(m, 0.10 + effect))
            looks.append({"control": {"n": n, "successes": s_c},
                          "treatment": {"n": n, "successes": s_t}})
        two = seqtest.analyze(plan, looks)
        exp = seqtest.analyze(e, looks)
        assert isinstance(exp, ExperimentAnalysis)
        comp = exp.comparisons[0]
        assert len(comp.looks) == len(two.looks)
        for a, b in zip(comp.looks, two.looks, strict=True):
            assert a.z == b.z and a.efficacy_z == b.efficacy_z
            assert a.interval_lower == pytest.approx(b.interval_lower, abs=1e-12)
            assert a.decision == b.decision
        assert exp.arms[0].decision == two.decision
        if two.final is not None:
            assert comp.final.p_value == pytest.approx(two.final.p_value, rel=1e-9)
            assert comp.final.ci_lower == pytest.approx(two.final.ci_lower, rel=1e-9)


# ---------------------------------------------------------------------------------
# Many arms: levels, Dunnett-type boundaries, sizing
# ---------------------------------------------------------------------------------

@pytest.mark.parametrize("k, one_sided, two_sided", [(2, 1.916, 2.212), (3, 2.062, 2.349)])
def test_one_look_dunnett_plan_reproduces_dunnett_1955(k, one_sided, two_sided):
    # Dunnett (1955) table, infinite df, equal allocation, alpha 0.05 (3 decimals)
    e1 = experiment_plan(k + 1, NORMAL, alpha=0.05, sides=1, looks=1, method="dunnett")
    e2 = experiment_plan(k + 1, NORMAL, alpha=0.05, sides=2, looks=1, method="dunnett")
    assert e1.comparisons[0].plan.efficacy_z[0] == pytest.approx(one_sided, abs=6e-4)
    assert e2.comparisons[0].plan.efficacy_z[0] == pytest.approx(two_sided, abs=6e-4)
    assert len({float(c.plan.efficacy_z[0]) for c in e1.comparisons}) == 1


def test_one_look_dunnett_adjusted_p_against_scipy_dunnett():
    # scipy.stats.dunnett (multivariate t with the pooled variance, df = N - k - 1)
    # against the analysis' Dunnett-adjusted p-value (multivariate normal, Welch
    # variances). Each arm's sample is scaled to the same standard deviation, so the
    # pooled and the unpooled standard errors are equal and the statistics identical;
    # what remains is the t with 3,000+ df against the normal (under 0.5% of p here)
    # and scipy's own integration error
    rng = np.random.default_rng(11)
    e = experiment_plan(["control", "a", "b", "c"], NORMAL, alpha=0.05, sides=1, looks=1,
                        method="dunnett")
    n = int(e.sizes["continuous"]["control"][0])

    def sample(mean: float) -> np.ndarray:
        x = rng.normal(0, 1, n)
        return mean + (x - x.mean()) / x.std(ddof=1)

    data = {"control": sample(0.0), "a": sample(0.05), "b": sample(0.0),
            "c": sample(0.09)}
    look = {arm: {"n": n, "sum": float(x.sum()), "sum_sq": float((x * x).sum())}
            for arm, x in data.items()}
    an = analyze_experiment(e, [look], final=True)
    ref = stats.dunnett(data["a"], data["b"], data["c"], control=data["control"],
                        alternative="greater", rng=np.random.default_rng(0))
    for i, arm in enumerate(("a", "b", "c")):
        c = an.comparison(arm, "continuous")
        assert c.adjusted_p == pytest.approx(ref.pvalue[i], rel=0.01, abs=2e-4)
        assert (c.decision == Decision.STOP_EFFICACY) == (ref.pvalue[i] < 0.05)


def test_graphical_levels_split_alpha_over_arms_and_primaries():
    e = experiment_plan(["control", "a", "b", "c"],
                        [{"name": "orders", **BINARY}, {"name": "visits", **NORMAL}],
                        alpha=0.025, sides=1, looks=3)
    assert e.hypotheses == ["a/orders", "b/orders", "c/orders", "a/visits", "b/visits",
                            "c/visits"]
    assert [c.level for c in e.primaries] == pytest.approx([0.025 / 6] * 6)
    np.testing.assert_allclose(e.transitions, default_transitions(6))
    w = experiment_plan(["control", "a", "b"], BINARY, alpha=0.025, sides=1, looks=3,
                        weights={"a": 0.8, "b": 0.2})
    assert [c.level for c in w.primaries] == pytest.approx([0.02, 0.005])


def test_each_comparison_gets_its_power_and_at_least_one_arm_needs_fewer_users():
    each = experiment_plan(4, NORMAL, alpha=0.025, sides=1, looks=3)
    anyone = experiment_plan(4, NORMAL, alpha=0.025, sides=1, looks=3, power_for="any")
    assert all(c.planned_power == pytest.approx(0.9, abs=1e-6) for c in each.primaries)
    assert anyone.max_n("continuous", "control") < each.max_n("continuous", "control")
    # at the sizes of power_for="any", P(some arm crosses) when all have the mde is the
    # power asked for (seqtest.core.multiarm's joint crossing; QMC error about 1e-4,
    # rounding to whole users about 1e-4)
    from seqtest.core import multiarm
    c = anyone.primaries[0]
    eta = 0.1 * math.sqrt(anyone.max_n("continuous", "control") / 2.0)
    cr = multiarm.multiarm_crossing(c.plan.efficacy_z, anyone.info_fractions, [1, 1, 1],
                                    drifts=[eta] * 3, count="upper")
    assert cr.cumulative[-1] == pytest.approx(0.9, abs=2e-3)


def test_unequal_allocations_size_every_arm_from_the_control():
    e = experiment_plan(["control", "big", "small"], BINARY, allocations=[2.0, 0.5],
                        alpha=0.025, sides=1, looks=2)
    n0 = e.max_n("binary", "control")
    assert e.max_n("binary", "big") == pytest.approx(2 * n0, abs=1)
    assert e.max_n("binary", "small") == pytest.approx(0.5 * n0, abs=1)
    # the arm with half the users is the one that drives the size
    powers = {c.arm: c.planned_power for c in e.primaries}
    assert powers["small"] == pytest.approx(0.9, abs=1e-6) and powers["big"] > 0.9


def test_a_guardrail_with_a_power_enters_the_sizing():
    base = [{"name": "orders", **BINARY}]
    g = {"name": "load", "role": "guardrail", "kind": "continuous", "sd": 1.0, "mde": 0.02,
         "better": "lower", "alpha": 0.05}
    e1 = experiment_plan(3, base + [g], alpha=0.025, sides=1, looks=3)
    e2 = experiment_plan(3, base + [{**g, "power": 0.8}], alpha=0.025, sides=1, looks=3)
    assert e1.guardrails[0].planned_power < 0.8
    assert e2.guardrails[0].planned_power == pytest.approx(0.8, abs=1e-6)
    assert e2.max_n("orders", "control") > e1.max_n("orders", "control")


@pytest.mark.parametrize("metric", [BINARY, NORMAL, {"kind": "rate", "baseline": 2.0,
                                                     "mde": 0.1}])
def test_planned_power_inverts_the_sizing(metric):
    # the power at a comparison's own size is its plan's power (both directions of
    # the score test's sizing, and the drift of continuous metrics)
    from seqtest.planning.sizing import max_control, power_at
    e = experiment_plan(2, {**metric, "margin": metric["mde"] / 4,
                            "hypothesis": "superiority"}, alpha=0.025, sides=1,
                        looks=4, futility="pocock-type")
    c = e.primaries[0]
    n = max_control(c.plan, c.plan.metric)[0]
    assert power_at(c.plan, c.plan.metric, n) == pytest.approx(0.9, abs=1e-7)


# ---------------------------------------------------------------------------------
# The graph (Bretz et al. 2009)
# ---------------------------------------------------------------------------------

def test_graph_update_is_holm_with_equal_weights_and_splits():
    # Bretz et al. (2009), section 3: equal weights, transitions 1/2, is Holm's
    # procedure; worked by hand: reject H1 -> (0, 1/2, 1/2) and H2 <-> H3 fully
    w, g = graph_update([1 / 3] * 3, default_transitions(3), 0)
    np.testing.assert_allclose(w, [0, 0.5, 0.5])
    np.testing.assert_allclose(g, [[0, 0, 0], [0, 0, 1], [0, 1, 0]])
    w, g = graph_update(w, g, 2)
    np.testing.assert_allclose(w, [0, 1, 0])
    np.testing.assert_allclose(g, np.zeros((3, 3)))


def test_graph_update_on_a_hand_worked_gatekeeping_graph():
    # Algorithm 1 of Bretz et al. (2009) worked by hand on two primaries H1, H2 with
    # secondaries H3, H4 (w = (1/2, 1/2, 0, 0); H1 -> H3, H2 -> H4, H3 -> H2, H4 -> H1,
    # all 1). Reject H1: w3 = 1/2; g43 = (0 + g41 g13) / (1 - g41 g14) = 1.
    # Reject H3: w2 = 1/2 + 1/2 g32 = 1; g24 = (1 + g23 g34) / (1 - g23 g32) = 1,
    # g42 = (0 + g43 g32) / (1 - g43 g34) = 1.
    g0 = np.zeros((4, 4))
    g0[0, 2] = g0[1, 3] = g0[2, 1] = g0[3, 0] = 1.0
    w, g = graph_update([0.5, 0.5, 0, 0], g0, 0)
    np.testing.assert_allclose(w, [0, 0.5, 0.5, 0])
    assert g[3, 2] == 1.0 and g[1, 3] == 1.0 and g[2, 1] == 1.0 and g[3, 0] == 0.0
    w, g = graph_update(w, g, 2)
    np.testing.assert_allclose(w, [0, 1, 0, 0])
    assert g[1, 3] == 1.0 and g[3, 1] == 1.0
    # the vectorised form updates each graph on its own (-1: unchanged)
    ws = np.array([[0.5, 0.5, 0, 0]] * 3)
    gs = np.array([g0] * 3)
    w2, g2 = graph_update_many(ws, gs, np.array([0, -1, 1]))
    np.testing.assert_allclose(w2[0], [0, 0.5, 0.5, 0])
    np.testing.assert_allclose(w2[1], ws[1])
    np.testing.assert_allclose(w2[2], [0.5, 0, 0, 0.5])


def test_alpha_passes_to_the_other_arms_at_the_same_look():
    e = experiment_plan(["control", "a", "b"], NORMAL, alpha=0.025, sides=1, looks=3)
    n = [int(x) for x in e.sizes["continuous"]["control"]]
    se = math.sqrt(2.0 / n[1])
    c_half = e.primaries[0].plan.efficacy_z      # level 0.0125
    full = seqtest.design(alpha=0.025, sides=1, looks=3).efficacy_z
    # a crosses at look 2; b is between the two boundaries there: rejected only once
    # a's level has been passed on
    z_b = 0.5 * (c_half[1] + full[1])
    looks = []
    for k in range(2):
        nk = n[k]
        mean_a = (c_half[1] + 0.5) * se if k == 1 else 0.0
        mean_b = z_b * se if k == 1 else 0.0
        looks.append({arm: {"n": nk, "mean": mu, "sd": 1.0}
                      for arm, mu in (("control", 0.0), ("a", mean_a), ("b", mean_b))})
    an = analyze_experiment(e, looks)
    assert an.arm("a").decision == Decision.STOP_EFFICACY
    assert an.arm("b").decision == Decision.STOP_EFFICACY
    b = an.comparison("b", "continuous")
    assert b.level == pytest.approx(0.025)
    assert b.looks[-1].efficacy_z == pytest.approx(full[1], abs=1e-9)
    assert an.decision == Decision.STOP_EFFICACY and an.reason["winners"] == ["a", "b"]
    # the graphical adjusted p-value is at most alpha exactly when rejected
    assert b.adjusted_p <= 0.025 and an.comparison("a", "continuous").adjusted_p <= 0.025


# ---------------------------------------------------------------------------------
# Monitoring: guardrails, dropped arms, bad input
# ---------------------------------------------------------------------------------

def _gplan(**kw):
    return experiment_plan(
        ["control", "a", "b"],
        [{"name": "orders", **BINARY},
         {"name": "load", "role": "guardrail", "kind": "continuous", "sd": 1.0,
          "mde": 0.1, "better": "lower", "margin": 0.02, "alpha": 0.05}],
        alpha=0.025, sides=1, looks=3, **kw)


def _look(plan, k, orders, load):
    n = int(plan.sizes["orders"]["control"][k])
    return {"orders": {arm: {"n": n, "successes": int(round(p * n))}
                       for arm, p in orders.items()},
            "load": {arm: {"n": n, "mean": mu, "sd": 1.0} for arm, mu in load.items()}}


def test_a_guardrail_crossing_stops_the_arm_for_harm_whatever_the_primary_says():
    e = _gplan()
    looks = [_look(e, 0, {"control": 0.10, "a": 0.14, "b": 0.10},
                   {"control": 1.0, "a": 1.3, "b": 1.0})]
    an = analyze_experiment(e, looks)
    a = an.arm("a")
    assert a.decision == Decision.STOP_HARM and a.harmed == ["load"] and not a.winner
    g = an.comparison("a", "load")
    assert g.decision == Decision.STOP_HARM and g.direction == "harm"
    assert g.orientation == 1.0       # load is better when it decreases: harm is up
    # the primary crossed, but passes nothing on: b keeps its level
    assert an.comparison("b", "orders").level == pytest.approx(0.0125)
    assert an.decision == Decision.CONTINUE
    # the harm test's own inference at its alpha, one-sided in the harm direction
    assert g.final is not None and g.final.ci_upper == math.inf
    assert g.final.ci_lower > 0.02 and g.inference_level == 0.05


def test_a_dropped_arm_may_be_posted_or_left_out_and_is_not_analysed():
    e = _gplan()
    first = _look(e, 0, {"control": 0.10, "a": 0.10, "b": 0.10},
                  {"control": 1.0, "a": 1.3, "b": 1.0})
    second = _look(e, 1, {"control": 0.10, "a": 0.10, "b": 0.11},
                   {"control": 1.0, "a": 1.0, "b": 1.0})
    without = {m: {arm: t for arm, t in v.items() if arm != "a"} for m, v in second.items()}
    an1 = analyze_experiment(e, [first, second])
    an2 = analyze_experiment(e, [first, without])
    assert an1.arm("a").decision == an2.arm("a").decision == Decision.STOP_HARM
    assert len(an1.comparison("a", "orders").looks) == 1
    assert an1.comparison("b", "orders").looks[-1].z == an2.comparison("b", "orders").looks[-1].z
    # a dropped arm's totals that go backwards are refused all the same
    back = copy.deepcopy(second)
    back["orders"]["a"]["successes"] = 5
    with pytest.raises(LookDataError) as exc:
        analyze_experiment(e, [first, back])
    assert exc.value.arm == "a" and exc.value.look == 2 and exc.value.field == "successes"
    assert "orders" in str(exc.value) and "go backwards" in str(exc.value)


def test_an_arm_still_running_must_be_posted():
    e = _gplan()
    first = _look(e, 0, {"control": 0.10, "a": 0.10, "b": 0.10},
                  {"control": 1.0, "a": 1.0, "b": 1.0})
    second = _look(e, 1, {"control": 0.10, "a": 0.10, "b": 0.10},
                   {"control": 1.0, "a": 1.0, "b": 1.0})
    del second["orders"]["b"]
    with pytest.raises(LookDataError) as exc:
        analyze_experiment(e, [first, second])
    assert exc.value.arm == "b" and exc.value.look == 2 and "still running" in str(exc.value)


@pytest.mark.parametrize("edit, message, arm", [
    (lambda lk: lk["orders"].update({"purple": {"n": 1, "successes": 0}}), "unknown arm",
     "purple"),
    (lambda lk: lk.update({"revenue": {}}), "unknown metric", None),
    (lambda lk: lk["orders"].pop("control"), "control's totals are missing", "control"),
    (lambda lk: lk.pop("load"), "metric 'load' is missing", None),
    (lambda lk: lk["load"]["a"].update({"sd": -1.0}), "negative", "a"),
])
def test_bad_looks_name_the_look_arm_and_metric(edit, message, arm):
    e = _gplan()
    look = _look(e, 0, {"control": 0.10, "a": 0.10, "b": 0.10},
                 {"control": 1.0, "a": 1.0, "b": 1.0})
    edit(look)
    with pytest.raises(LookDataError) as exc:
        analyze_experiment(e, [look])
    assert message in str(exc.value) and exc.value.look == 1
    assert exc.value.arm == arm


def test_an_arm_posted_twice_is_refused():
    e = experiment_plan(["control", "a", "b"], BINARY, alpha=0.025, sides=1, looks=2)
    rows = [{"arm": "control", "n": 100, "successes": 10},
            {"arm": "a", "n": 100, "successes": 11},
            {"arm": "A", "n": 100, "successes": 12},
            {"arm": "b", "n": 100, "successes": 12}]
    with pytest.raises(LookDataError, match="posted twice") as exc:
        analyze_experiment(e, [rows])
    assert exc.value.arm == "a"


@pytest.mark.parametrize("kw, name", [
    ({"arms": 1}, "arms"), ({"arms": 10}, "arms"), ({"arms": ["control"]}, "arms"),
    ({"arms": ["control"] + [f"t{i}" for i in range(9)]}, "arms"),
    ({"arms": ["control", "a", "A"]}, "arms"),
    ({"arms": 3, "allocations": [1.0, 0.0]}, "allocations['treatment_2']"),
    ({"arms": 3, "allocations": 0}, "allocations"),
    ({"metrics": [BINARY, {"kind": "continuous", "sd": 1, "mde": 0.1,
                           "role": "guardrail", "name": "load"}]}, "metrics[0].name"),
    ({"metrics": [{**BINARY, "name": "x"}, {"kind": "continuous", "sd": 1, "mde": 0.1,
                                            "role": "guardrail", "name": "load"}]},
     "metrics[1].better"),
    ({"metrics": {**BINARY, "mde": -0.02}}, "metrics[0].mde"),
    ({"metrics": {**BINARY, "margin": 0.03, "hypothesis": "superiority"}},
     "metrics[0].mde"),
    ({"metrics": {**BINARY, "margin": 0.005}}, "metrics[0].hypothesis"),
    ({"metrics": {**BINARY, "direction": "increase"}}, "metrics[0].direction"),
    ({"metrics": [{"name": "g", "role": "guardrail", "better": "higher", **NORMAL,
                   "mde": -0.1}]}, "metrics"),
    ({"method": "dunnett", "metrics": [{**BINARY, "name": "a"}, {**NORMAL, "name": "b"}]},
     "method"),
    ({"weights": [0.9, 0.9]}, "weights"),
    ({"transitions": [[0.5, 0.5], [0.0, 0.0]]}, "transitions[0][0]"),
    ({"efficacy": "pocock"}, "efficacy"),
])
def test_bad_plans_are_refused_naming_the_argument(kw, name):
    args = {"arms": 3, "metrics": BINARY, "alpha": 0.025, "sides": 1, "looks": 3, **kw}
    with pytest.raises(InputError) as exc:
        experiment_plan(args.pop("arms"), args.pop("metrics"), **args)
    assert str(exc.value).startswith(name + ":") or str(exc.value).startswith(name + " ")


def test_srm_across_all_arms_is_pearsons_chi_square():
    # scipy.stats.chisquare against the planned shares
    counts, alloc = [1000, 1010, 2080, 470], [1.0, 1.0, 2.0, 0.5]
    stat, p, expected = srm_test(counts, alloc)
    ref = stats.chisquare(counts, f_exp=np.asarray(alloc) / sum(alloc) * sum(counts))
    assert stat == pytest.approx(ref.statistic, rel=1e-12)
    assert p == pytest.approx(ref.pvalue, rel=1e-10)
    e = experiment_plan(["control", "a", "b", "c"], BINARY, allocations=[1.0, 2.0, 0.5],
                        alpha=0.025, sides=1, looks=2)
    look = {arm: {"n": n, "successes": n // 10}
            for arm, n in zip(e.arms, [1000, 1010, 2080, 470], strict=True)}
    an = analyze_experiment(e, [look])
    assert an.srm[0].p_value == pytest.approx(ref.pvalue, rel=1e-10)
    skewed = {**look, "c": {"n": 300, "successes": 30}}
    an = analyze_experiment(e, [skewed])
    assert an.sample_ratio_mismatch == [1]
    assert any("sample ratio mismatch" in w for w in an.warnings)


def test_margins_and_directions_orient_the_test():
    # a metric better when it decreases, with a margin of 0.05: the null is a decrease
    # of 0.05, and a decrease of 0.45 (z = -0.40 / 0.109 = -3.7 against it, beyond the
    # first look's 2.96) rejects
    e = experiment_plan(["control", "a"], {**NORMAL, "mde": -0.3, "better": "lower",
                                           "margin": -0.05, "hypothesis": "superiority"},
                        alpha=0.025, sides=1, looks=2)
    n = int(e.sizes["continuous"]["control"][0])
    look = {"control": {"n": n, "mean": 5.0, "sd": 1.0},
            "a": {"n": n, "mean": 4.55, "sd": 1.0}}
    an = analyze_experiment(e, [look])
    c = an.comparison("a", "continuous")
    se = math.sqrt(2.0 / n)
    assert c.orientation == -1.0
    assert c.looks[0].z == pytest.approx((-0.45 + 0.05) / se, rel=1e-9)
    assert c.decision == Decision.STOP_EFFICACY and c.direction == "treatment_better"
    assert c.final.ci_upper < -0.05 and c.final.ci_lower == -math.inf


# ---------------------------------------------------------------------------------
# Dunnett-type monitoring
# ---------------------------------------------------------------------------------

def test_dunnett_monitoring_reuses_the_plan_and_solves_unplanned_looks(monkeypatch):
    from seqtest.core import multiarm
    from seqtest.monitoring import experiment as mexp
    e = experiment_plan(3, NORMAL, alpha=0.025, sides=1, looks=3, method="dunnett")
    n = [int(x) for x in e.sizes["continuous"]["control"]]
    mk = [{arm: {"n": nk, "mean": 0.0, "sd": 1.0} for arm in e.arms} for nk in n]
    calls: list = []
    real = multiarm.dunnett_bounds

    def spy(*a, **kw):
        calls.append(kw.get("previous"))
        return real(*a, **kw)

    monkeypatch.setattr(multiarm, "dunnett_bounds", spy)
    mexp._DUNNETT_CACHE.clear()
    an = analyze_experiment(e, mk[:2])
    assert calls == []        # planned fractions: the plan's own boundaries
    np.testing.assert_array_equal([x.efficacy_z for x in an.comparisons[0].looks],
                                  e.dunnett.z[:2])
    # an unplanned look between the first two: solved with the first as `previous`
    extra = {arm: {"n": (n[0] + n[1]) // 2, "mean": 0.0, "sd": 1.0} for arm in e.arms}
    an = analyze_experiment(e, [mk[0], extra, mk[1]])
    assert len(calls) == 2 and calls[0] is not None
    t = np.array([n[0], (n[0] + n[1]) // 2, n[1]]) / n[-1]
    cum = seqtest.spending.obrien_fleming()(t, 0.025)
    ref = real(t, cum, [1.0, 1.0])
    got = [x.efficacy_z for x in an.comparisons[0].looks]
    # the same control paths whatever comes after: equal to a solve of all three looks
    # within the reported errors
    np.testing.assert_allclose(got, ref.z, atol=4 * float(ref.z_error.max()) + 1e-9)
    calls.clear()
    analyze_experiment(e, [mk[0], extra, mk[1]])
    assert calls == []        # cached in the process


# ---------------------------------------------------------------------------------
# Plan documents of kind experiment
# ---------------------------------------------------------------------------------

def test_experiment_documents_round_trip_and_refuse_edits():
    e = _gplan(futility="pocock-type")
    doc = json.loads(json.dumps(e.to_dict()))
    assert doc["kind"] == "experiment"
    assert plan_from_dict(doc) == e
    assert plan_from_dict(doc, trust=True) == e
    edits = [
        (("computed", "comparisons", 1, "efficacy_z", 2), 1.9,
         "computed.comparisons[1].efficacy_z[2]"),
        (("computed", "comparisons", 0, "level"), 0.025, "computed.comparisons[0].level"),
        (("computed", "comparisons", 2, "drift"), 1.0, "computed.comparisons[2].drift"),
        (("computed", "sample_size", "orders", "a", 2), 99999,
         "computed.sample_size.orders.a[2]"),
        (("computed", "errors", "family_wise"), 0.05, "computed.errors"),
        (("computed", "comparisons", 0, "arm"), "b", "computed.comparisons[0].arm"),
    ]
    for path, value, field in edits:
        bad = copy.deepcopy(doc)
        node = bad
        for key in path[:-1]:
            node = node[key]
        node[path[-1]] = value
        with pytest.raises(PlanDocumentError) as exc:
            plan_from_dict(bad)
        assert exc.value.field == field, (path, str(exc.value))
    for where, key in (("inputs", "colour"), ("computed", "colour")):
        bad = copy.deepcopy(doc)
        bad[where][key] = 1
        with pytest.raises(PlanDocumentError) as exc:
            plan_from_dict(bad)
        assert exc.value.field == f"{where}.colour"
    bad = copy.deepcopy(doc)
    bad["inputs"]["arms"][1]["allocation"] = 0
    with pytest.raises(PlanDocumentError, match="allocation"):
        plan_from_dict(bad)
    bad = copy.deepcopy(doc)
    bad["version"] = "0.1.0"
    with pytest.raises(PlanDocumentError) as exc:
        plan_from_dict(bad)
    assert exc.value.field == "version"


def test_dunnett_documents_are_checked_within_their_errors_not_widened_by_them():
    e = experiment_plan(3, NORMAL, alpha=0.025, sides=1, looks=2, method="dunnett")
    doc = json.loads(json.dumps(e.to_dict()))
    assert plan_from_dict(doc) == e
    z_err = float(e.dunnett.z_error[1])
    ok = copy.deepcopy(doc)
    for c in ok["computed"]["comparisons"]:
        c["efficacy_z"][1] += 2 * z_err         # within 7 reported errors
    plan_from_dict(ok)
    bad = copy.deepcopy(doc)
    bad["computed"]["dunnett"]["z_error"] = [1.0, 1.0]      # cannot buy a wide tolerance
    for c in bad["computed"]["comparisons"]:
        c["efficacy_z"][1] -= 0.05
    with pytest.raises(PlanDocumentError) as exc:
        plan_from_dict(bad)
    assert exc.value.field == "computed.comparisons[0].efficacy_z[1]"


# ---------------------------------------------------------------------------------
# The statistics the decisions rest on
# ---------------------------------------------------------------------------------

def test_comparisons_sharing_a_control_are_correlated_as_derived():
    # common practice: corr = sqrt(a_i a_j / ((1 + a_i)(1 + a_j))). Checked on the z
    # statistics of seqtest.monitoring.metrics.effect from simulated arms (5,000
    # replicates: the correlation's standard error is (1 - rho^2) / sqrt(n) <= 0.014;
    # bound 4 standard errors)
    from seqtest.simulation.engine import draw_totals
    rng = np.random.default_rng(3)
    alloc = [1.0, 2.0, 0.5]
    n_c = 400
    reps = 5000
    ctrl = draw_totals("normal", rng, np.full((reps, 1), n_c), {"mean": 0.0, "sd": 1.0})
    z = []
    for a in alloc:
        arm = draw_totals("normal", rng, np.full((reps, 1), int(n_c * a)),
                          {"mean": 0.0, "sd": 1.0})
        z.append(np.asarray(metrics.effect("continuous", ctrl, arm).z)[:, 0])
    r = np.corrcoef(np.vstack(z))
    for i in range(3):
        for j in range(i + 1, 3):
            a, b = alloc[i], alloc[j]
            rho = math.sqrt(a * b / ((1 + a) * (1 + b)))
            assert r[i, j] == pytest.approx(rho, abs=4 * (1 - rho ** 2) / math.sqrt(reps))
