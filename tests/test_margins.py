"""Non-inferiority and superiority by a margin: design, sizing, monitoring and adjusted
inference at a null value other than zero, and metrics where lower is better. Each
check names its outside source (statsmodels' score tests and power functions, a
published worked example, exact algebraic facts) or its Monte Carlo bound.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import special
from statsmodels.stats import proportion as sm_proportion
from statsmodels.stats import rates as sm_rates

import seqtest
from seqtest.planning.mixture import mixture_plan
from seqtest.simulation.engine import clopper_pearson, simulate
from seqtest.simulation.scenarios import scenario_from_dict


def _one_look(metric: dict, alpha: float = 0.025, power: float = 0.8) -> seqtest.Plan:
    return seqtest.design(alpha=alpha, sides=1, power=power, looks=1, metric=metric)


# ---------------------------------------------------------------------------
# Monitoring at the margin against statsmodels' score tests
# ---------------------------------------------------------------------------


def test_binary_ratio_non_inferiority_is_the_score_test_at_the_margin():
    # Source: statsmodels test_proportions_2indep(method="score", compare="ratio",
    # value=1 + margin, correction=False), the Miettinen-Nurminen / Farrington-Manning
    # statistic restricted to the margin. The look's (test_estimate - margin) / se is it;
    # z adds the skewness correction, and the one-look adjusted p-value is P(Z >= z).
    metric = {"kind": "binary", "baseline": 0.2, "mde": 0.0, "relative": True,
              "scale": "relative", "margin": -0.1, "hypothesis": "non_inferiority"}
    plan = _one_look(metric)
    for (sc, nc, st, nt) in ((400, 2_000, 395, 2_000), (210, 1_000, 190, 1_100),
                             (1_000, 5_000, 1_040, 5_000)):
        a = seqtest.analyze(plan, [{"control": {"n": nc, "successes": sc},
                                    "treatment": {"n": nt, "successes": st}}],
                            max_n=nc + nt)
        x = a.looks[0]
        ref = sm_proportion.test_proportions_2indep(st, nt, sc, nc, method="score",
                                                    compare="ratio", value=0.9,
                                                    correction=False, alternative="larger")
        assert (x.test_estimate - (-0.1)) / x.se == pytest.approx(ref.statistic, rel=1e-8)
        assert x.unadjusted_p == pytest.approx(special.ndtr(-x.z), rel=1e-12)
        assert a.margin == -0.1 and a.hypothesis == "non_inferiority"
        assert a.final is not None
        assert a.final.p_value == pytest.approx(special.ndtr(-x.z), rel=1e-6)
        if a.decision == "stop_efficacy":
            assert a.direction == "treatment_non_inferior"
            assert a.final.ci_lower > -0.1


@pytest.mark.parametrize("scale, margin, value", [("relative", -0.05, 0.95),
                                                  ("difference", -0.1, -0.1)])
def test_rate_non_inferiority_is_the_score_test_at_the_margin(scale, margin, value):
    # Source: statsmodels test_poisson_2indep(method="score", compare="ratio" with
    # value = 1 + margin, or compare="diff" with value = margin).
    metric = {"kind": "rate", "baseline": 2.0, "mde": 0.0, "scale": scale,
              "relative": scale == "relative", "margin": margin,
              "hypothesis": "non_inferiority"}
    plan = _one_look(metric)
    compare = "ratio" if scale == "relative" else "diff"
    for (xc, ec, xt, et) in ((4_000, 2_000.0, 3_950, 2_000.0), (900, 500.0, 1_010, 520.0)):
        a = seqtest.analyze(plan, [{"control": {"exposure": ec, "events": xc},
                                    "treatment": {"exposure": et, "events": xt}}],
                            max_n=ec + et)
        x = a.looks[0]
        ref = sm_rates.test_poisson_2indep(xt, et, xc, ec, value=value, method="score",
                                           compare=compare, alternative="larger")
        assert (x.test_estimate - margin) / x.se == pytest.approx(ref.statistic, rel=1e-8)


def test_rate_difference_sizing_at_the_margin_matches_statsmodels_power():
    # Source: statsmodels power_poisson_diff_2indep(method_var="score", value=margin),
    # the power of the score test with the null variance restricted to the margin
    # (Farrington and Manning's construction for rates). The plan's fixed-sample size
    # (no skewness term, as the reference) is the smallest with that power.
    l_c, margin = 2.0, -0.2
    metric = {"kind": "rate", "baseline": l_c, "mde": 0.0, "margin": margin,
              "hypothesis": "non_inferiority"}
    plan = seqtest.design(alpha=0.025, sides=1, power=0.8, looks=3, metric=metric)
    n = plan.sample_size().fixed_control

    def power(m: float) -> float:
        # statsmodels' diff is rate1 - rate2 (control first here, so the null is
        # -margin and the alternative "smaller")
        return float(sm_rates.power_poisson_diff_2indep(
            l_c, l_c, m, nobs_ratio=1, alpha=0.025, value=-margin, method_var="score",
            alternative="smaller", return_results=False))

    assert power(n) >= 0.8 > power(n - 1)


def test_continuous_non_inferiority_worked_example():
    # Chow, Shao and Wang (2008), Sample Size Calculations in Clinical Research, 2nd
    # ed., sec. 3.2 (from memory): non-inferiority of two means, sd 0.10, margin 0.05,
    # true difference 0, one-sided alpha 0.05, power 80%: n = (z_a + z_b)^2 2 sigma^2
    # / (margin)^2 = 49.5, so 50 per arm; confirmed by computation with the exact
    # quantiles: (1.6449 + 0.8416)^2 * 2 * 0.01 / 0.0025 = 49.46.
    plan = _one_look({"kind": "continuous", "sd": 0.10, "mde": 0.0, "margin": -0.05,
                      "hypothesis": "non_inferiority"}, alpha=0.05)
    ss = plan.sample_size()
    n = (special.ndtri(0.95) + special.ndtri(0.8)) ** 2 * 2 * 0.01 / 0.0025
    assert n == pytest.approx(49.46, abs=0.01)
    assert ss.n_control == ss.n_treatment == 50
    # the same where lower is better (margin +0.05): the mirror image
    low = _one_look({"kind": "continuous", "sd": 0.10, "mde": 0.0, "margin": 0.05,
                     "hypothesis": "non_inferiority", "better": "lower"}, alpha=0.05)
    assert low.sample_size().n_control == 50


# ---------------------------------------------------------------------------
# Adjusted inference at the margin: exact properties
# ---------------------------------------------------------------------------


def _looks_continuous(shift: float = 0.0, scale: float = 1.0) -> list[dict]:
    rng = np.random.default_rng(7)
    out = []
    yc, yt = rng.normal(10.0, 2.0, 900), rng.normal(10.1, 2.0, 900)
    for m in (300, 600, 900):
        c, t = yc[:m] * scale, (yt[:m] + shift) * scale
        out.append({"control": {"n": m, "sum": c.sum(), "sum_sq": (c * c).sum()},
                    "treatment": {"n": m, "sum": t.sum(), "sum_sq": (t * t).sum()}})
    return out


def test_stagewise_inference_at_a_margin_is_the_translate_of_the_one_at_zero():
    # Exact fact for a difference of means: testing effect = m on data equals testing
    # effect = 0 on the data with the treatment moved by -m (same z at every look, same
    # boundaries), so the stage-wise p-value is the same and the adjusted interval and
    # median-unbiased estimate move by m. The repeated intervals are about the effect
    # and do not depend on the margin.
    m = -0.3
    with_margin = seqtest.design(alpha=0.025, sides=1, power=0.9, looks=3,
                                 metric={"kind": "continuous", "sd": 2.0, "mde": 0.0,
                                         "margin": m, "hypothesis": "non_inferiority"})
    plain = seqtest.design(alpha=0.025, sides=1, power=0.9, looks=3,
                           metric={"kind": "continuous", "sd": 2.0, "mde": -m})
    assert with_margin.sample_size().n_control == plain.sample_size().n_control
    a = seqtest.analyze(with_margin, _looks_continuous())
    b = seqtest.analyze(plain, _looks_continuous(shift=-m))
    assert a.decision == b.decision == "stop_efficacy"
    assert a.stopped_at == b.stopped_at
    assert [x.z for x in a.looks] == pytest.approx([x.z for x in b.looks], rel=1e-12)
    assert a.final is not None and b.final is not None
    assert a.final.p_value == pytest.approx(b.final.p_value, rel=1e-9)
    assert a.final.ci_lower == pytest.approx(b.final.ci_lower + m, abs=1e-9)
    assert a.final.median_unbiased == pytest.approx(b.final.median_unbiased + m, abs=1e-9)
    # the interval excludes the margin, as the stop says; the p-value is below alpha
    assert a.final.ci_lower > m and a.final.p_value <= 0.025
    no_margin = seqtest.analyze(plain, _looks_continuous(), final=False)
    k = min(len(a.looks), len(no_margin.looks))
    assert [x.interval_lower for x in a.looks[:k]] == pytest.approx(
        [x.interval_lower for x in no_margin.looks[:k]], rel=1e-12)
    assert a.direction == "treatment_non_inferior" and b.direction == "treatment_better"


@pytest.mark.parametrize("kind", ["continuous", "binary"])
def test_lower_is_better_is_the_mirror_image(kind):
    # Exact fact: a metric where lower is better, margin +m, on data v is the metric
    # where higher is better, margin -m, on the mirrored data (-v for values; failures
    # for successes, whose difference of proportions is the negative): the same
    # decisions, p-values and boundaries, and mirrored intervals and estimates.
    rng = np.random.default_rng(9)
    looks_low, looks_high = [], []
    if kind == "continuous":
        yc, yt = rng.normal(5.0, 1.0, 800), rng.normal(4.95, 1.0, 800)
        for m in (200, 500, 800):
            lo = {a: {"n": m, "sum": y[:m].sum(), "sum_sq": (y[:m] ** 2).sum()}
                  for a, y in (("control", yc), ("treatment", yt))}
            hi = {a: {"n": m, "sum": -v["sum"], "sum_sq": v["sum_sq"]} for a, v in lo.items()}
            looks_low.append(lo)
            looks_high.append(hi)
        base = {"kind": "continuous", "sd": 1.0, "mde": 0.0}
        margin = 0.15
    else:
        yc, yt = rng.random(3_000) < 0.30, rng.random(3_000) < 0.29
        for m in (1_000, 2_000, 3_000):
            lo = {a: {"n": m, "successes": int(y[:m].sum())}
                  for a, y in (("control", yc), ("treatment", yt))}
            hi = {a: {"n": m, "successes": m - v["successes"]} for a, v in lo.items()}
            looks_low.append(lo)
            looks_high.append(hi)
        base = {"kind": "binary", "baseline": 0.3, "mde": 0.0}
        margin = 0.05
    hyp = {"hypothesis": "non_inferiority"}
    high_base = dict(base, baseline=0.7) if kind == "binary" else base
    p_low = seqtest.design(alpha=0.025, sides=1, power=0.8, looks=3,
                           metric={**base, "margin": margin, "better": "lower", **hyp})
    p_high = seqtest.design(alpha=0.025, sides=1, power=0.8, looks=3,
                            metric={**high_base, "margin": -margin, **hyp})
    assert p_low.sample_size().n_control == p_high.sample_size().n_control
    a = seqtest.analyze(p_low, looks_low)
    b = seqtest.analyze(p_high, looks_high)
    assert a.decision == b.decision and a.direction == b.direction
    assert a.better == "lower" and b.better == "higher"
    for x, y in zip(a.looks, b.looks, strict=True):
        assert x.z == pytest.approx(-y.z, rel=1e-9)
        assert x.efficacy_z == pytest.approx(-y.efficacy_z, rel=1e-12)
        assert x.unadjusted_p == pytest.approx(y.unadjusted_p, rel=1e-9)
        assert x.interval_upper == pytest.approx(-y.interval_lower, rel=1e-9)
    if a.final is not None and b.final is not None:
        assert a.final.p_value == pytest.approx(b.final.p_value, rel=1e-6)
        assert a.final.ci_upper == pytest.approx(-b.final.ci_lower, rel=1e-6)
        assert a.final.ci_lower == -math.inf and b.final.ci_upper == math.inf


def test_mixture_plan_at_a_margin_is_the_translate_and_the_mirror():
    # The always-valid p-value at margin m on the data is the one at 0 on the data moved
    # by -m (difference of means, exact), and a metric where lower is better gives the
    # mirror image.
    m = -0.3
    a = seqtest.analyze(mixture_plan(alpha=0.05, sides=1, metric={
        "kind": "continuous", "sd": 2.0, "mde": 0.0, "margin": m,
        "hypothesis": "non_inferiority"}), _looks_continuous())
    b = seqtest.analyze(mixture_plan(alpha=0.05, sides=1, metric={
        "kind": "continuous", "sd": 2.0, "mde": -m}), _looks_continuous(shift=-m))
    c = seqtest.analyze(mixture_plan(alpha=0.05, sides=1, metric={
        "kind": "continuous", "sd": 2.0, "mde": 0.0, "margin": -m, "better": "lower",
        "hypothesis": "non_inferiority"}), _looks_continuous(scale=-1.0))
    for x, y, w in zip(a.looks, b.looks, c.looks, strict=True):
        assert x.always_valid_p == pytest.approx(y.always_valid_p, rel=1e-9)
        assert x.always_valid_p == pytest.approx(w.always_valid_p, rel=1e-9)
        assert x.interval_lower == pytest.approx(y.interval_lower + m, abs=1e-9)
        assert x.interval_lower == pytest.approx(-w.interval_upper, abs=1e-9)
    assert a.decision == b.decision == c.decision


# ---------------------------------------------------------------------------
# The plan's spelling and its refusals
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("metric, words", [
    ({"margin": 0.01, "hypothesis": "non_inferiority"},
     "metric.margin: got 0.01 for a non_inferiority test where higher is better; allowed "
     "is a negative margin"),
    ({"margin": -0.01, "hypothesis": "non_inferiority", "better": "lower"},
     "metric.margin: got -0.01 for a non_inferiority test where lower is better; allowed "
     "is a positive margin"),
    ({"margin": -0.01, "hypothesis": "superiority"},
     "metric.margin: got -0.01 for a superiority test where higher is better; allowed is "
     "0 or a positive margin"),
    ({"margin": -0.01}, "metric.hypothesis: missing; a margin"),
    ({"hypothesis": "non_inferiority"}, "metric.margin: got 0"),
    ({"margin": -0.01, "hypothesis": "equivalence"}, "metric.hypothesis: got 'equivalence'"),
    ({"margin": -0.01, "hypothesis": "non_inferiority", "better": "up"},
     "metric.better: got 'up'"),
    ({"margin": -0.01, "hypothesis": "non_inferiority", "mde": -0.02},
     "metric.mde: got -0.02, which is not above the margin -0.01"),
    ({"better": "lower", "mde": 0.02}, "metric.mde: got 0.02, which is not below"),
])
def test_margin_on_the_wrong_side_is_refused_naming_the_field(metric, words):
    base = {"kind": "binary", "baseline": 0.2, "mde": 0.0}
    with pytest.raises(ValueError, match="^" + words.replace("(", r"\(").replace(")", r"\)")):
        seqtest.design(alpha=0.025, sides=1, looks=2, metric={**base, **metric})


def test_plans_without_a_margin_are_unchanged_and_documents_round_trip():
    # The fields appear only when given: today's plan documents are the same.
    plain = seqtest.design(alpha=0.05, sides=2, looks=3,
                           metric={"kind": "binary", "baseline": 0.1, "mde": 0.02})
    assert set(plain.metric) == {"kind", "relative", "scale", "allocation", "mde",
                                 "baseline"}
    ni = seqtest.design(alpha=0.025, sides=1, looks=3, metric={
        "kind": "ratio", "numerator_mean": 1.5, "denominator_mean": 3.0,
        "numerator_sd": 1.8, "denominator_sd": 1.4, "covariance": 1.0, "mde": 0.0,
        "margin": -0.05, "hypothesis": "non_inferiority", "scale": "relative"})
    back = seqtest.plan_from_dict(ni.to_dict())
    assert back == ni and back.metric["margin"] == -0.05
    assert "non-inferiority" in ni.summary()


# ---------------------------------------------------------------------------
# Simulation: alpha at the margin
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("metric, data, effect", [
    ({"kind": "binary", "baseline": 0.3, "mde": 0.0, "margin": -0.05,
      "hypothesis": "non_inferiority"}, {"kind": "binary", "rate": 0.3},
     {"difference": -0.05}),
    ({"kind": "adjusted", "sd": 1.0, "correlation": 0.6, "mde": 0.0, "margin": 0.1,
      "better": "lower", "hypothesis": "non_inferiority"},
     {"kind": "pre_period", "mean": 5.0, "sd": 1.0, "correlation": 0.6},
     {"mde_multiple": 0.0}),
])
def test_non_inferiority_holds_alpha_at_the_margin(metric, data, effect):
    # 20,000 simulated experiments with the true effect at the margin (seeded); the
    # rejection rate's 99.9% Clopper-Pearson interval must reach down to alpha (a leak
    # of 0.004 at alpha 0.025 would be caught: the interval's half-width is about
    # 0.0037). The upper tail is the better side (non-inferior).
    plan = seqtest.design(alpha=0.025, sides=1, power=0.9, looks=4, metric=metric)
    sc = scenario_from_dict({"name": "margin", "data": data, "effect": effect})
    res = simulate(plan, sc, 20_000, seed=5)
    assert res.null
    lo, hi = clopper_pearson(res.rejections, res.reps, 0.999)
    assert lo <= 0.025, (res.rate, lo, hi)
    assert res.rate > 0.015            # and the test is not trivially conservative
    power = simulate(plan, scenario_from_dict({"name": "alt", "data": data,
                                               "effect": {"mde_multiple": 1.0}}),
                     4_000, seed=6)
    assert not power.null and power.rate > 0.85


# ---------------------------------------------------------------------------
# The command line
# ---------------------------------------------------------------------------


def _cli(args: list[str], capsys) -> tuple[int, str, str]:
    from seqtest.cli import main
    rc = main(args)
    out, err = capsys.readouterr()
    return rc, out, err


def test_cli_plan_with_a_margin_and_the_new_kinds_is_the_library_plan(capsys, tmp_path):
    path = tmp_path / "plan.json"
    rc, _, _ = _cli(["plan", "--sides", "1", "--alpha", "0.025", "--looks", "3",
                     "--metric", "ratio", "--numerator-mean", "1.5", "--denominator-mean",
                     "3", "--numerator-sd", "1.8", "--denominator-sd", "1.4",
                     "--covariance", "1", "--mde", "0", "--margin", "0.05", "--better",
                     "lower", "--hypothesis", "non_inferiority", "--json", str(path)],
                    capsys)
    assert rc == 0
    lib = seqtest.design(alpha=0.025, sides=1, looks=3, metric={
        "kind": "ratio", "numerator_mean": 1.5, "denominator_mean": 3.0,
        "numerator_sd": 1.8, "denominator_sd": 1.4, "covariance": 1.0, "mde": 0.0,
        "margin": 0.05, "better": "lower", "hypothesis": "non_inferiority",
        "allocation": 1.0})
    import json
    assert seqtest.plan_from_dict(json.loads(path.read_text())) == lib
    for args in (["--metric", "adjusted", "--sd", "2", "--correlation", "0.6",
                  "--mde", "0.3"],
                 ["--metric", "count", "--baseline", "2", "--dispersion", "1.5",
                  "--mde", "0.2"]):
        rc, out, _ = _cli(["plan", "--looks", "2", *args], capsys)
        assert rc == 0 and "maximum users per arm" in out


@pytest.mark.parametrize("args, words", [
    (["--metric", "binary", "--baseline", "0.3", "--mde", "0", "--margin", "0.05",
      "--hypothesis", "non_inferiority"], "metric.margin: got 0.05 for a non_inferiority"),
    (["--margin", "-0.05"], "--margin needs --metric"),
    (["--metric", "adjusted", "--sd", "1", "--mde", "0.1"], "metric.correlation: missing"),
    (["--metric", "count", "--baseline", "2", "--mde", "0.1"], "metric.sd, "
                                                               "metric.dispersion"),
])
def test_cli_plan_refuses_bad_metric_options_with_status_2(args, words, capsys):
    rc, _, err = _cli(["plan", "--sides", "1", "--alpha", "0.025", *args], capsys)
    assert rc == 2 and words in err and len(err.strip().splitlines()) == 1


def test_a_rule_refuses_an_effect_computed_at_another_null():
    # The experiment layer computes each comparison's effect itself: an effect at 0 for
    # a plan with a margin would test the wrong hypothesis, so it is refused.
    from seqtest.monitoring.metrics import effect
    from seqtest.monitoring.rules import rule_for
    plan = seqtest.design(alpha=0.025, sides=1, looks=2, metric={
        "kind": "continuous", "sd": 1.0, "mde": 0.0, "margin": -0.2,
        "hypothesis": "non_inferiority"})
    c, t = {"n": 100, "mean": 1.0, "sd": 1.0}, {"n": 100, "mean": 1.0, "sd": 1.0}
    rule = rule_for(plan, max_n=1_000)
    with pytest.raises(ValueError, match=r"eff: computed at the null 0.0 but the plan "
                                         r"tests at its margin -0.2"):
        rule.evaluate(effect("continuous", c, t), final=False, warnings=[])
    table = rule.evaluate(effect("continuous", c, t, null=-0.2), final=False, warnings=[])
    assert table.decision == "continue"
