"""Experiments with every metric kind, in the two-arm convention of metrics.

Outside sources, named beside each check:

- the project's two-arm plans, sizing and analysis (seqtest.design with a metric,
  seqtest.analyze): an independent path (no experiment code) that a one-treatment,
  one-metric experiment must reproduce exactly;
- the previous release's experiment sizes (recorded by running the previous
  release's code on the same experiments written in its convention: ``direction``
  increase/decrease and non-negative ``margin`` and ``mde``), which the relabelled
  experiments must reproduce exactly;
- a Monte Carlo check of the null with a bound computed in the comment.
"""

from __future__ import annotations

import numpy as np
import pytest

import seqtest
from seqtest.core.errors import InputError
from seqtest.monitoring.experiment import analyze_experiment
from seqtest.planning.experiment import experiment_plan
from seqtest.simulation.engine import draw_totals

# one metric of each kind, with its data model for drawing looks (the two-arm
# simulator's: seqtest.simulation.engine.draw_totals), control then treatment
KINDS = {
    "binary": ({"kind": "binary", "baseline": 0.10, "mde": 0.02},
               "binary", {"p": 0.10}, {"p": 0.115}),
    "continuous": ({"kind": "continuous", "sd": 2.0, "mde": -0.2, "better": "lower"},
                   "normal", {"mean": 5.0, "sd": 2.0}, {"mean": 4.85, "sd": 2.0}),
    "rate": ({"kind": "rate", "baseline": 2.0, "mde": -0.1, "better": "lower",
              "margin": 0.05, "hypothesis": "non_inferiority"},
             "counts", {"rate": 2.0, "dispersion": None},
             {"rate": 1.95, "dispersion": None}),
    "ratio": ({"kind": "ratio", "numerator_mean": 2.0, "denominator_mean": 4.0,
               "numerator_sd": 3.0, "denominator_sd": 3.0, "covariance": 4.0,
               "mde": 0.05},
              "ratio", {"denominator_mean": 4.0, "dispersion": 2.0, "rate": 0.5},
              {"denominator_mean": 4.0, "dispersion": 2.0, "rate": 0.54}),
    "adjusted": ({"kind": "adjusted", "sd": 2.0, "correlation": 0.6, "mde": 0.1,
                  "margin": -0.05, "hypothesis": "non_inferiority"},
                 "pre_period", {"mean": 3.0, "pre_mean": 3.0, "sd": 2.0, "correlation": 0.6},
                 {"mean": 3.08, "pre_mean": 3.0, "sd": 2.0, "correlation": 0.6}),
    "count": ({"kind": "count", "baseline": 1.5, "dispersion": 2.0, "mde": 0.1,
               "margin": 0.02, "hypothesis": "superiority"},
              "counts", {"rate": 1.5, "dispersion": 2.0},
              {"rate": 1.62, "dispersion": 2.0}),
}


def _looks(plan, kind, data_kind, ctrl, trt, seed):
    """Cumulative totals at the plan's per-look sizes, one replicate."""
    rng = np.random.default_rng(seed)
    cum_c = np.asarray(plan.n_control, np.int64)[None, :]
    cum_t = np.asarray(plan.n_treatment, np.int64)[None, :]
    tc = draw_totals(data_kind, rng, cum_c, ctrl, metric_kind=kind)
    tt = draw_totals(data_kind, rng, cum_t, trt, metric_kind=kind)
    out = []
    for k in range(cum_c.shape[1]):
        out.append({"control": {f: float(v[0, k]) for f, v in tc.items()},
                    "treatment": {f: float(v[0, k]) for f, v in tt.items()}})
    return out


@pytest.mark.parametrize("name", list(KINDS))
@pytest.mark.parametrize("sides", [1, 2])
def test_one_treatment_experiment_of_each_kind_is_the_two_arm_plan_and_analysis(name,
                                                                                sides):
    # reference: the two-arm plan and analysis of the same metric description
    metric, data_kind, ctrl, trt = KINDS[name]
    kw = {"alpha": 0.05 if sides == 2 else 0.025, "sides": sides, "looks": 4}
    two = seqtest.design(**kw, metric=metric)
    e = experiment_plan(2, metric, **kw)
    c = e.comparisons[0]
    assert c.plan == two                       # boundaries, drift, metric, sizes
    np.testing.assert_array_equal(c.plan.efficacy_z, two.efficacy_z)
    np.testing.assert_array_equal(e.sizes[name]["control"], two.n_control)
    np.testing.assert_array_equal(e.sizes[name]["treatment"], two.n_treatment)
    assert c.planned_power == pytest.approx(two.power, abs=1e-6)
    assert e.metrics[0].units == ("exposure" if name == "rate" else "users")
    for seed in (1, 2):
        looks = _looks(two, name, data_kind, ctrl, trt, seed)
        a2 = seqtest.analyze(two, looks)
        ae = analyze_experiment(e, looks)
        comp = ae.comparisons[0]
        assert len(comp.looks) == len(a2.looks)
        for x, y in zip(comp.looks, a2.looks, strict=True):
            assert x.z == y.z and x.estimate == y.estimate
            assert abs(x.efficacy_z) == pytest.approx(abs(y.efficacy_z), abs=1e-12)
            assert x.decision == y.decision
        assert ae.arms[0].decision == a2.decision
        if a2.decision.value == "stop_efficacy":
            assert comp.direction == a2.direction


# the previous release's numbers: its code run on these experiments written in its
# convention (direction increase/decrease, margin >= 0, mde > 0); the relabelling is
# exact, so the sizes and planned powers must be the same
PREVIOUS = [
    # churn: direction decrease, margin 0.005, mde 0.03
    (dict(arms=["control", "a", "b"], metrics=[
        {"name": "churn", "kind": "binary", "baseline": 0.2, "mde": -0.03,
         "better": "lower", "margin": -0.005, "hypothesis": "superiority"}],
        alpha=0.05, sides=1, looks=3),
     {"churn": 5126}, {"a/churn": 0.9}),
    # spend: margin 0.05, mde 0.3; errors: guardrail, direction decrease, margin 0.005,
    # mde 0.02, power 0.8
    (dict(arms=["control", "a", "b"], metrics=[
        {"name": "spend", "kind": "continuous", "sd": 2.0, "mde": 0.3, "margin": 0.05,
         "hypothesis": "superiority"},
        {"name": "errors", "role": "guardrail", "kind": "binary", "baseline": 0.05,
         "mde": 0.02, "better": "lower", "margin": 0.005, "power": 0.8}],
        alpha=0.05, sides=2, looks=4),
     {"spend": 3720, "errors": 3720}, {"a/spend": 0.9991025236409546, "a/errors": 0.8}),
    # tickets: relative rate, direction decrease, margin 0.02, mde 0.1
    (dict(arms=["control", "a"], metrics=[
        {"name": "tickets", "kind": "rate", "baseline": 0.5, "mde": -0.1,
         "scale": "relative", "relative": True, "better": "lower", "margin": -0.02,
         "hypothesis": "superiority"}], alpha=0.025, sides=1, looks=3),
     {"tickets": 6184}, {"a/tickets": 0.9}),
    # Dunnett-type, margin 0.002
    (dict(arms=["control", "a", "b", "c"], metrics=[
        {"name": "orders", "kind": "binary", "baseline": 0.1, "mde": 0.02,
         "margin": 0.002, "hypothesis": "superiority"}],
        alpha=0.025, sides=1, looks=3, method="dunnett"),
     {"orders": 8060}, {"a/orders": 0.9}),
    # power for any arm: direction decrease, margin 0.05, mde 0.2
    (dict(arms=["control", "a", "b"], metrics=[
        {"name": "spend", "kind": "continuous", "sd": 1.0, "mde": -0.2, "margin": -0.05,
         "better": "lower", "hypothesis": "superiority"}],
        alpha=0.05, sides=2, looks=3, power_for="any"),
     {"spend": 814}, {"a/spend": 0.7797570568159432}),
    # a rate guardrail, direction decrease, margin 0.05, mde 0.2, power 0.9
    (dict(arms=["control", "a"], metrics=[
        {"name": "orders", "kind": "binary", "baseline": 0.1, "mde": 0.02},
        {"name": "latency_events", "role": "guardrail", "kind": "rate", "baseline": 2.0,
         "mde": 0.2, "better": "lower", "margin": 0.05, "power": 0.9}],
        alpha=0.05, sides=2, looks=3),
     {"orders": 5203, "latency_events": 1854}, {"a/latency_events": 0.9}),
]


@pytest.mark.parametrize("kw, sizes, powers", PREVIOUS)
def test_relabelled_experiments_keep_the_previous_release_sizes(kw, sizes, powers):
    e = experiment_plan(**kw)
    for m, n in sizes.items():
        assert e.max_n(m, "control") == n
    for label, pw in powers.items():
        arm, m = label.split("/")
        assert e.comparison(arm, m).planned_power == pytest.approx(pw, abs=1e-9)


def test_a_guardrail_is_sized_as_the_two_arm_harm_test():
    # reference: the two-arm one-sided plan whose better side is the guardrail's harm
    # side, at the guardrail's alpha and spending
    g = {"kind": "count", "baseline": 1.5, "sd": 2.0, "mde": 0.2, "margin": 0.05}
    e = experiment_plan(2, [{"name": "y", "kind": "binary", "baseline": 0.3, "mde": 0.2},
                            {"name": "g", "role": "guardrail", "better": "lower",
                             "alpha": 0.05, "power": 0.8, **g}],
                        alpha=0.025, sides=1, looks=3)
    two = seqtest.design(alpha=0.05, sides=1, power=0.8, looks=3, efficacy="pocock-type",
                         metric={**g, "better": "higher", "hypothesis": "superiority"})
    c = e.comparison("treatment", "g")
    np.testing.assert_array_equal(c.plan.efficacy_z, two.efficacy_z)
    # the primary (mde 0.2) needs fewer users: the guardrail sizes the experiment
    assert e.max_n("g", "control") == two.n_control[-1] == e.max_n("y", "control")
    assert c.planned_power == pytest.approx(0.8, abs=1e-6)
    assert c.plan.metric["better"] == "higher" and c.plan.metric["margin"] == 0.05


@pytest.mark.parametrize("metric, field, words", [
    ({"role": "guardrail", "kind": "binary", "baseline": 0.1, "mde": 0.02},
     "better", "higher or lower"),
    ({"role": "guardrail", "kind": "binary", "baseline": 0.1, "mde": 0.02,
      "better": "lower", "hypothesis": "superiority"}, "hypothesis", "left out"),
    # harm where lower is better is an increase: a negative margin is on the good side
    ({"role": "guardrail", "kind": "binary", "baseline": 0.1, "mde": 0.02,
      "better": "lower", "margin": -0.01}, "margin", "0 or a positive number"),
    # the harm to detect must lie beyond the margin on the worse side
    ({"role": "guardrail", "kind": "binary", "baseline": 0.1, "mde": 0.01,
      "better": "lower", "margin": 0.02}, "mde", "the harm to detect"),
    ({"kind": "continuous", "sd": 1.0, "mde": 0.1, "better": "lower"}, "mde",
     "not below the margin"),
    ({"kind": "continuous", "sd": 1.0, "mde": 0.1, "margin": 0.05,
      "hypothesis": "non_inferiority"}, "margin", "negative margin"),
    ({"kind": "continuous", "sd": 1.0, "mde": 0.1, "margin": -0.05}, "hypothesis",
     "needs the hypothesis"),
    ({"kind": "continuous", "sd": 1.0, "mde": 0.1, "direction": "increase"}, "direction",
     "better (higher or lower)"),
    ({"kind": "ratio", "numerator_mean": 1.0, "mde": 0.1}, "denominator_mean", "missing"),
])
def test_metric_fields_are_refused_naming_the_metric_field_and_value(metric, field,
                                                                     words):
    ms = [{"name": "orders", "kind": "binary", "baseline": 0.1, "mde": 0.02},
          {"name": "load", **metric}]
    with pytest.raises(InputError) as exc:
        experiment_plan(2, ms, alpha=0.025, sides=1, looks=2)
    text = str(exc.value)
    assert text.startswith(f"metrics[1].{field} (load): "), text
    assert words in text


def test_a_non_inferiority_primary_says_so_when_it_stops():
    # the two-arm analysis says treatment_non_inferior for the same stop
    metric = {"kind": "continuous", "sd": 1.0, "mde": 0.0, "margin": -0.1,
              "hypothesis": "non_inferiority"}
    two = seqtest.design(alpha=0.025, sides=1, looks=2, metric=metric)
    e = experiment_plan(["control", "a"], metric, alpha=0.025, sides=1, looks=2)
    n = int(two.n_control[0])
    look = {"control": {"n": n, "mean": 5.0, "sd": 1.0},
            "treatment": {"n": n, "mean": 5.1, "sd": 1.0}}
    a2 = seqtest.analyze(two, [look])
    ae = analyze_experiment(e, [{"control": look["control"], "a": look["treatment"]}])
    assert a2.direction == "treatment_non_inferior"
    assert ae.comparisons[0].direction == "treatment_non_inferior"
    assert ae.arms[0].winner and "not worse than control" in ae.arms[0].reason
