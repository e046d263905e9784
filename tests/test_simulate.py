"""Tests for the simulation harness: seqtest.simulate, seqtest.scenarios, the
``simulate`` subcommand and the reduced validation grid of simulations/validate.py.

Every check names its source beside it. Statistical checks use fixed seeds and
Monte Carlo bounds computed in the test (the computation is stated beside each).
"""

from __future__ import annotations

import importlib.util
import json
import math
from pathlib import Path

import numpy as np
import pytest
from scipy import special, stats

import seqtest
from seqtest.cli import main as cli_main
from seqtest.monitoring.analysis import analyze
from seqtest.simulation.engine import (
    OUTCOMES,
    _draw_chunk,
    _job,
    clopper_pearson,
    plot_result,
    simulate,
)
from seqtest.simulation.scenarios import load_scenario, scenario_from_dict

ROOT = Path(__file__).resolve().parents[1]
SIMS = ROOT / "simulations"


def _plan(**kw):
    base = {"alpha": 0.05, "sides": 2, "power": 0.9, "looks": 5}
    base.update(kw)
    return seqtest.design(**base)


BINARY = {"kind": "binary", "baseline": 0.10, "mde": 0.02}


# ---------------------------------------------------------------------------
# The same decisions as monitoring
# ---------------------------------------------------------------------------

EQUIVALENCE_CASES = [
    # (plan keywords, scenario, futility obeyed)
    (dict(metric=BINARY),
     {"name": "binary-random-extra", "data": {"kind": "binary", "rate": 0.1},
      "effect": {"mde_multiple": 0.8},
      "traffic": {"mode": "random", "cv": 0.5, "extra_looks": [0.3]}}, True),
    (dict(sides=1, looks=4, futility="pocock-type", binding=True,
          metric={"kind": "continuous", "sd": 2.0, "mde": 0.3}),
     {"name": "normal-binding", "data": {"kind": "normal", "mean": 1.0, "sd": 2.0},
      "effect": {"mde_multiple": 0.5},
      "traffic": {"mode": "random", "cv": 0.2, "final": "scheduled"}}, True),
    (dict(looks=3, power=0.8, futility="pocock-type",
          metric={"kind": "rate", "baseline": 2.0, "mde": 0.3}),
     {"name": "counts-ignore", "data": {"kind": "counts", "rate": 2.0, "dispersion": 3.0},
      "traffic": {"mode": "random", "cap": False, "final": "scheduled"},
      "analysis": {"futility": "ignore"}}, False),
    (dict(looks=3, power=0.8, efficacy="pocock",
          metric={"kind": "continuous", "sd": 30.0, "mde": 5.0}),
     {"name": "revenue-uneven", "data": {"kind": "lognormal", "mean": 50.0, "sd": 75.0,
                                         "zero_share": 0.8},
      "effect": {"mde_multiple": 1.0},
      "traffic": {"mode": "uneven", "fractions": [0.3, 0.5, 1.1]}}, True),
    # tiny, wildly varying traffic: looks with too few users per arm are skipped,
    # some experiments reach the maximum early (the plan has no metric)
    (dict(),
     {"name": "tiny-traffic", "data": {"kind": "normal", "mean": 0.0, "sd": 1.0},
      "traffic": {"mode": "random", "cv": 1.0, "max_total": 30, "final": "scheduled"}},
     True),
]


@pytest.mark.parametrize("plan_kw, doc, obey", EQUIVALENCE_CASES,
                         ids=[c[1]["name"] for c in EQUIVALENCE_CASES])
def test_decisions_are_those_of_analyze(plan_kw, doc, obey):
    # Reference: seqtest.monitor.analyze, the monitoring door, fed the very totals
    # the simulator drew (the looks it analysed), declaring the last one final. The
    # simulated stop look and outcome must be identical for every replicate.
    plan = _plan(**plan_kw)
    sc = scenario_from_dict(doc)
    reps = 40
    res = simulate(plan, sc, reps, seed=3, keep_paths=True, chunk_size=20)
    p = res.paths
    fields = {"binary": ("n", "successes"), "continuous": ("n", "sum", "sum_sq"),
              "rate": ("exposure", "events")}[sc.analysis_kind]
    codes = {"stop_efficacy": 1, "stop_futility": 2, "complete_not_significant": 3}
    assert not p["valid"].all() or sc.traffic.max_total is None
    for i in range(reps):
        idx = [j for j in range(p["looks"][i]) if p["valid"][i, j]]
        looks = [{arm: {f: float(p[arm][f][i, j]) for f in fields}
                  for arm in ("control", "treatment")} for j in idx]
        extra = {} if plan.metric else {"metric": sc.analysis_kind,
                                        "max_n": sc.traffic.max_total}
        decs = [x.decision for x in analyze(plan, looks, final=True, **extra).looks]
        first = next(j for j, d in enumerate(decs)
                     if d in ("stop_efficacy", "complete_not_significant")
                     or (d == "stop_futility" and obey))
        assert p["stop"][i] == idx[first], (i, decs)
        assert p["outcome"][i] == codes[decs[first]], (i, decs)


# ---------------------------------------------------------------------------
# The naive baseline against the published repeated-test rates
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("looks, published", [(3, 0.107), (4, 0.126)])
def test_naive_baseline_reproduces_repeated_test_rates(looks, published):
    # Source: Armitage, McPherson & Rowe (1969), JRSS A 132:235-244; Jennison &
    # Turnbull (2000) Table 1.1 (from memory, confirmed by computation; REFERENCES.md).
    # K = 2, 5, 10 are checked in the reduced grid below. Bound: the 99.9%
    # Clopper-Pearson interval of the naive rate (n = 100,000) must overlap the
    # published value +- 0.0005 (it is rounded to three decimals).
    plan = _plan(looks=looks, metric={"kind": "continuous", "sd": 1.0, "mde": 0.1})
    sc = scenario_from_dict({"name": "naive", "data": {"kind": "normal", "mean": 0.0,
                                                        "sd": 1.0}})
    res = simulate(plan, sc, 100_000, seed=20 + looks)
    lo, hi = clopper_pearson(res.naive.rejections, res.reps, 0.999)
    assert lo <= published + 0.0005 and hi >= published - 0.0005, (res.naive.rate, lo, hi)
    # the plan itself holds alpha (same 99.9% interval)
    lo, hi = clopper_pearson(res.rejections, res.reps, 0.999)
    assert lo <= 0.05


# ---------------------------------------------------------------------------
# Power and expected sample size against the plan's own integration
# ---------------------------------------------------------------------------


def test_power_and_expected_sample_size_match_the_plan():
    # Reference: the plan's power and expected sample size at the design effect,
    # computed by recursive numerical integration (a different method from Monte
    # Carlo). Bounds: the 99.9% Clopper-Pearson interval of the power must hold
    # 0.9; the mean total must be within 3.29 Monte Carlo standard errors (99.9%)
    # plus 2 users (per-look counts are rounded up, at most 1 per arm) of the plan's.
    plan = _plan(metric=BINARY)
    sc = scenario_from_dict({"name": "power", "data": {"kind": "binary", "rate": 0.1},
                             "effect": {"mde_multiple": 1.0}})
    res = simulate(plan, sc, 100_000, seed=5)
    lo, hi = clopper_pearson(res.rejections, res.reps, 0.999)
    assert lo <= 0.9 <= hi
    assert res.design_rate == pytest.approx(0.9, abs=1e-6)
    assert res.verdict == "consistent with the plan's power"
    expected = plan.sample_size().expected_alternative
    assert abs(res.expected_total - expected) <= 3.29 * res.expected_total_se + 2.0
    # downward rejections: the plan's probability of crossing the lower boundary at
    # the design effect, times the replicates, is the Poisson mean of their count;
    # the count must lie within its 99.9% upper quantile (scipy.stats.poisson)
    lam = res.reps * float(plan.characteristics(1.0).efficacy_lower.sum())
    assert res.rejections_lower <= stats.poisson.ppf(0.999, lam)


# ---------------------------------------------------------------------------
# Findings the harness must be able to make
# ---------------------------------------------------------------------------


def test_overdispersed_counts_leak_by_the_variance_inflation():
    # Fact (gamma-mixed Poisson counts, common practice): with shape k per unit of
    # exposure the variance is m + m^2/k, here 2 + 4/2 = 4, twice the Poisson
    # variance the rate metric assumes, so z is inflated by sqrt(2) and a one-look
    # two-sided test at 0.05 rejects with probability 2 Phi(-1.96 / sqrt 2) = 0.166
    # (normal approximation, n = 8,816 units of exposure). Bound: 99.9% CP interval.
    plan = _plan(looks=1, metric={"kind": "rate", "baseline": 2.0, "mde": 0.1})
    sc = scenario_from_dict({"name": "od", "data": {"kind": "counts", "rate": 2.0,
                                                     "dispersion": 2.0}})
    res = simulate(plan, sc, 50_000, seed=8)
    theory = 2.0 * special.ndtr(-special.ndtri(0.975) / math.sqrt(2.0))
    lo, hi = clopper_pearson(res.rejections, res.reps, 0.999)
    assert lo <= theory <= hi, (res.rate, theory)
    assert res.leaks and res.verdict.startswith("leaks alpha (total against 0.05; upper tail")


def test_skewed_revenue_single_look_matches_welch_statistic_on_user_values():
    # Reference: a brute-force simulation of every user's value (scipy.stats.lognorm
    # for the amounts), scored with scipy.stats.ttest_ind(equal_var=False)'s
    # statistic against the same critical value z_{0.975} (one-sided 0.025), with
    # 200 control and 800 treatment users and 95% zeros. The two rejection rates
    # (independent, 40,000 replicates each) must agree within 3.29 standard errors of
    # their difference (99.9%): sqrt(p (1 - p) (1/n1 + 1/n2)).
    plan = seqtest.design(alpha=0.025, sides=1, power=0.9, looks=1)
    doc = {"name": "skew", "allocation": 4.0,
           "data": {"kind": "lognormal", "mean": 50.0, "sd": 200.0, "zero_share": 0.95},
           "traffic": {"mode": "fixed", "max_total": 1000}}
    n = 40_000
    res = simulate(plan, scenario_from_dict(doc), n, seed=13)
    s2 = math.log1p(4.0 ** 2)
    amounts = stats.lognorm(s=math.sqrt(s2), scale=50.0 * math.exp(-0.5 * s2))
    rng = np.random.default_rng(99)
    hits = 0
    for _block in range(8):
        m = n // 8
        c = amounts.rvs(size=(m, 200), random_state=rng) * (rng.random((m, 200)) < 0.05)
        t = amounts.rvs(size=(m, 800), random_state=rng) * (rng.random((m, 800)) < 0.05)
        with np.errstate(invalid="ignore", divide="ignore"):
            stat = stats.ttest_ind(t, c, axis=1, equal_var=False).statistic
        hits += int(np.sum(np.nan_to_num(stat, nan=0.0) >= special.ndtri(0.975)))
    brute = hits / n
    p = 0.5 * (brute + res.rate)
    assert abs(brute - res.rate) <= 3.29 * math.sqrt(p * (1 - p) * 2 / n), (brute, res.rate)
    # and the finding itself: far above the nominal 0.025
    assert res.ci_lower > 0.025


# ---------------------------------------------------------------------------
# The draws: exact laws of the per-arm totals
# ---------------------------------------------------------------------------


def _draws(plan, doc, n, seed=1):
    job = _job(plan, scenario_from_dict(doc), seed, n, False)
    return job, _draw_chunk(job, 0, n)


def test_normal_totals_have_the_exact_sampling_laws():
    # Source: for n normal values, the mean is N(mu, sd^2/n) and (n-1) s^2 / sd^2 is
    # chi-square with n-1 degrees of freedom, independent of the mean (Cochran 1934).
    # Check at every look by Kolmogorov-Smirnov against scipy.stats.norm and
    # scipy.stats.chi2; p-value above 0.001 (fixed seed).
    plan = _plan(looks=3, metric={"kind": "continuous", "sd": 2.0, "mde": 0.8})
    job, (n_c, n_t, end, ctrl, trt) = _draws(
        plan, {"name": "n", "data": {"kind": "normal", "mean": 3.0, "sd": 2.0}}, 20_000)
    for j in range(3):
        n = float(n_c[0, j])
        mean = ctrl["sum"][:, j] / n
        s2 = (ctrl["sum_sq"][:, j] - ctrl["sum"][:, j] * mean) / (n - 1)
        assert stats.kstest((mean - 3.0) / (2.0 / math.sqrt(n)), "norm").pvalue > 1e-3
        assert stats.kstest((n - 1) * s2 / 4.0, stats.chi2(n - 1).cdf).pvalue > 1e-3
        assert abs(np.corrcoef(mean, s2)[0, 1]) < 4.0 / math.sqrt(20_000)


def test_lognormal_sums_match_user_by_user_draws():
    # Reference: sums of 20 zero-inflated log-normal values drawn one by one with
    # scipy.stats.lognorm; two-sample Kolmogorov-Smirnov on the sums and on the sums
    # of squares, p-value above 0.001 (fixed seeds).
    plan = seqtest.design(looks=1)
    doc = {"name": "ln", "data": {"kind": "lognormal", "mean": 3.0, "sd": 6.0,
                                  "zero_share": 0.5},
           "traffic": {"mode": "fixed", "max_total": 40}}
    job, (n_c, n_t, end, ctrl, trt) = _draws(plan, doc, 20_000, seed=4)
    assert n_c[0, 0] == 20
    s2 = math.log1p(4.0)
    amounts = stats.lognorm(s=math.sqrt(s2), scale=3.0 * math.exp(-0.5 * s2))
    rng = np.random.default_rng(7)
    x = amounts.rvs(size=(20_000, 20), random_state=rng) * (rng.random((20_000, 20)) < 0.5)
    assert stats.ks_2samp(ctrl["sum"][:, 0], x.sum(axis=1)).pvalue > 1e-3
    assert stats.ks_2samp(ctrl["sum_sq"][:, 0], (x * x).sum(axis=1)).pvalue > 1e-3


def _gof(sample, dist, bins=10):
    """Chi-square goodness of fit on quantile bins of a discrete reference law."""
    qs = np.unique(dist.ppf(np.linspace(0, 1, bins + 1)[1:-1]))
    edges = np.concatenate(([-np.inf], qs, [np.inf]))
    obs = np.histogram(sample, bins=edges + 0.5)[0]
    cdf = dist.cdf(edges[1:-1])
    exp = np.diff(np.concatenate(([0.0], cdf, [1.0]))) * sample.size
    return stats.chisquare(obs, exp).pvalue


def test_binary_and_count_totals_follow_their_laws():
    # Sources: successes of m users are Binomial(m, p); the events of m units of
    # exposure with gamma-mixed Poisson counts of shape k are negative binomial with
    # shape m k and p = k / (k + lambda) (sum of independent negative binomials).
    # Chi-square goodness of fit against scipy.stats.binom / nbinom on quantile
    # bins, p-value above 0.001 (fixed seed).
    plan = _plan(looks=2, metric=BINARY)
    _, (n_c, _, _, ctrl, _) = _draws(plan, {"name": "b", "data": {"kind": "binary",
                                                                   "rate": 0.1}}, 20_000)
    m = int(n_c[0, 0])
    assert _gof(ctrl["successes"][:, 0], stats.binom(m, 0.1)) > 1e-3
    plan = _plan(looks=2, metric={"kind": "rate", "baseline": 2.0, "mde": 0.2})
    _, (n_c, _, _, ctrl, _) = _draws(plan, {"name": "c", "data": {
        "kind": "counts", "rate": 2.0, "dispersion": 1.5}}, 20_000)
    m = int(n_c[0, 0])
    assert _gof(ctrl["events"][:, 0], stats.nbinom(m * 1.5, 1.5 / 3.5)) > 1e-3
    inc = ctrl["events"][:, 1] - ctrl["events"][:, 0]
    m2 = int(n_c[0, 1] - n_c[0, 0])
    assert _gof(inc, stats.nbinom(m2 * 1.5, 1.5 / 3.5)) > 1e-3


def test_random_traffic_arrivals_split_cap_and_final_look():
    # Model (documented in seqtest.simulate): users between looks are negative
    # binomial with mean (tau_j - tau_{j-1}) n_max and shape (tau_j - tau_{j-1})
    # days / cv^2; arms split binomially. Chi-square goodness of fit against
    # scipy.stats.nbinom (p > 0.001), the treatment share within 4 standard errors
    # of 1/2, and with cap + at_max every experiment ends at exactly n_max.
    plan = _plan(metric=BINARY)
    n_max = plan.sample_size().total
    doc = {"name": "r", "data": {"kind": "binary", "rate": 0.1},
           "traffic": {"mode": "random", "days": 20, "cv": 0.5, "cap": False,
                       "final": "scheduled"}}
    job, (n_c, n_t, end, _, _) = _draws(plan, doc, 20_000)
    users = np.diff(n_c + n_t, axis=1, prepend=0)
    shape, mean = 0.2 * 20 / 0.25, 0.2 * n_max
    assert _gof(users[:, 2], stats.nbinom(shape, shape / (shape + mean))) > 1e-3
    total_t, total = n_t[:, -1].sum(), (n_c + n_t)[:, -1].sum()
    assert abs(total_t / total - 0.5) <= 4 * math.sqrt(0.25 / total)
    assert np.all(end == 5)
    doc["traffic"].update(cap=True, final="at_max")
    job, (n_c, n_t, end, _, _) = _draws(plan, doc, 20_000)
    tot = n_c + n_t
    assert np.all(tot <= n_max)
    last = tot[np.arange(tot.shape[0]), end - 1]
    assert np.all(last == n_max)
    assert np.all(np.diff(tot, axis=1) >= 0)
    assert np.all(np.diff(n_t, axis=1) >= 0) and np.all(np.diff(n_c, axis=1) >= 0)
    assert 0 < np.sum(end < 5) < 20_000   # some experiments reached the maximum early


# ---------------------------------------------------------------------------
# Reproducibility
# ---------------------------------------------------------------------------


def test_same_result_for_any_number_of_workers():
    # Bit for bit: chunk i always draws from SeedSequence(seed, spawn_key=(i,)).
    plan = _plan(looks=3, metric=BINARY)
    sc = scenario_from_dict({"name": "w", "data": {"kind": "binary", "rate": 0.1},
                             "traffic": {"mode": "random", "cv": 0.3}})
    one = simulate(plan, sc, 300, seed=4, chunk_size=100, workers=1).to_dict()
    two = simulate(plan, sc, 300, seed=4, chunk_size=100, workers=2).to_dict()
    assert json.dumps(one) == json.dumps(two)
    other = simulate(plan, sc, 300, seed=5, chunk_size=100, workers=1).to_dict()
    assert json.dumps(other) != json.dumps(one)


def test_progress_callback_sees_every_replicate():
    plan = _plan(looks=2, metric=BINARY)
    sc = scenario_from_dict({"name": "p", "data": {"kind": "binary", "rate": 0.1}})
    seen = []
    res = simulate(plan, sc, 2_500, seed=1, chunk_size=1_000,
                   progress=lambda d, t: seen.append((d, t)))
    # every chunk's end is reported (progress inside a slow chunk may add calls between)
    assert {(1_000, 2_500), (2_000, 2_500), (2_500, 2_500)} <= set(seen)
    done = [d for d, _ in seen]
    assert done == sorted(done) and done[-1] == 2_500 and {t for _, t in seen} == {2_500}
    assert res.stops.sum() == 2_500
    assert res.stops.shape == (2, len(OUTCOMES))


# ---------------------------------------------------------------------------
# Monte Carlo interval
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("k, n", [(0, 50), (3, 50), (4_970, 100_000), (50, 50)])
def test_clopper_pearson_is_the_beta_quantile_interval(k, n):
    # Source: Clopper & Pearson (1934), Biometrika 26: lower = Beta(k, n-k+1) quantile
    # at (1-c)/2, upper = Beta(k+1, n-k) quantile at (1+c)/2 (0 and 1 at the ends).
    lo, hi = clopper_pearson(k, n, 0.95)
    ref_lo = 0.0 if k == 0 else stats.beta.ppf(0.025, k, n - k + 1)
    ref_hi = 1.0 if k == n else stats.beta.isf(0.025, k + 1, n - k)
    assert lo == pytest.approx(ref_lo, rel=1e-8, abs=1e-12)
    assert hi == pytest.approx(ref_hi, rel=1e-8, abs=1e-12)


# ---------------------------------------------------------------------------
# Bad input
# ---------------------------------------------------------------------------

BAD_SCENARIOS = [
    ({"name": "x"}, "data: missing"),
    ({"data": {"kind": "gamma"}}, "data.kind"),
    ({"data": {"kind": "binary", "rate": 1.5}}, "data.rate"),
    ({"data": {"kind": "binary"}}, "data.rate: missing"),
    ({"data": {"kind": "normal", "mean": 0, "sd": -1}}, "data.sd"),
    ({"data": {"kind": "lognormal", "mean": 5, "sd": 1, "zero_share": 1.0}},
     "data.zero_share"),
    ({"data": {"kind": "counts", "rate": 1, "dispersion": 0}}, "data.dispersion"),
    ({"data": {"kind": "binary", "rate": 0.1, "colour": 1}}, "unknown field"),
    ({"data": {"kind": "binary", "rate": 0.1}, "effect": {"difference": 0.1,
                                                          "relative": 0.1}},
     "exactly one"),
    ({"data": {"kind": "binary", "rate": 0.1}, "effect": {"difference": 0.95}},
     "treatment rate"),
    ({"data": {"kind": "binary", "rate": 0.1}, "traffic": {"mode": "sometimes"}},
     "traffic.mode"),
    ({"data": {"kind": "binary", "rate": 0.1}, "traffic": {"mode": "uneven"}},
     "traffic.fractions: missing"),
    ({"data": {"kind": "binary", "rate": 0.1},
      "traffic": {"mode": "uneven", "fractions": [0.5, 0.4, 1.0]}}, "strictly increasing"),
    ({"data": {"kind": "binary", "rate": 0.1},
      "traffic": {"mode": "fixed", "cv": 0.3}}, "unknown field"),
    ({"data": {"kind": "binary", "rate": 0.1},
      "traffic": {"mode": "random", "cv": -1}}, "traffic.cv"),
    ({"data": {"kind": "binary", "rate": 0.1}, "traffic": {"extra_looks": [1.2]}},
     "traffic.extra_looks[0]"),
    ({"data": {"kind": "binary", "rate": 0.1}, "analysis": {"futility": "maybe"}},
     "analysis.futility"),
    ({"data": {"kind": "binary", "rate": 0.1}, "allocation": 0}, "allocation"),
]


@pytest.mark.parametrize("doc, words", BAD_SCENARIOS)
def test_bad_scenarios_are_refused_naming_the_field(doc, words):
    with pytest.raises(ValueError, match=None) as info:
        scenario_from_dict(doc)
    assert words in str(info.value)


def test_scenario_that_does_not_fit_the_plan_is_refused():
    plan = _plan(metric=BINARY)
    with pytest.raises(ValueError, match="data.kind"):
        simulate(plan, scenario_from_dict({"data": {"kind": "normal", "mean": 0,
                                                     "sd": 1}}), 10)
    with pytest.raises(ValueError, match="traffic.looks"):
        simulate(plan, scenario_from_dict({"data": {"kind": "binary", "rate": 0.1},
                                           "traffic": {"looks": 20}}), 10)
    with pytest.raises(ValueError, match="traffic.max_total"):
        simulate(_plan(), scenario_from_dict({"data": {"kind": "binary", "rate": 0.1}}), 10)
    binding = _plan(futility="pocock-type", binding=True, metric=BINARY)
    with pytest.raises(ValueError, match="analysis.futility"):
        simulate(binding, scenario_from_dict({"data": {"kind": "binary", "rate": 0.1},
                                              "analysis": {"futility": "ignore"}}), 10)


@pytest.mark.parametrize("kw, name", [({"reps": 0}, "reps"), ({"seed": -1}, "seed"),
                                       ({"workers": -2}, "workers"),
                                       ({"chunk_size": 0}, "chunk_size"),
                                       ({"confidence": 1.0}, "confidence")])
def test_bad_arguments_are_refused_naming_them(kw, name):
    plan = _plan(metric=BINARY)
    sc = scenario_from_dict({"data": {"kind": "binary", "rate": 0.1}})
    args = {"reps": 10, **kw}
    reps = args.pop("reps")
    with pytest.raises(ValueError, match=name):
        simulate(plan, sc, reps, **args)


# ---------------------------------------------------------------------------
# Shipped scenarios and the command line
# ---------------------------------------------------------------------------

#: scenario file -> plan file it is written for (simulations/README.md)
EXAMPLES = {
    "binary_null_fixed": "binary_obf5",
    "binary_power_fixed": "binary_obf5",
    "binary_null_random": "binary_obf5",
    "binary_null_uneven": "binary_obf5",
    "binary_null_extra_looks": "binary_pocock5_futility",
    "normal_null_fixed": "normal_obf5",
    "revenue_null_fixed": "revenue_obf5",
    "revenue_skewed_small": "revenue_small_onesided",
    "counts_null_fixed": "counts_obf5",
    "counts_overdispersed": "counts_obf5",
    "binary_rare_small": "binary_rare_onesided",
    "normal_tiny": "normal_tiny",
    "mixture_null_random": "binary_mixture",
}


def test_every_shipped_scenario_has_a_plan_and_loads():
    files = sorted(p.stem for p in (SIMS / "scenarios").glob("*.toml"))
    assert files == sorted(EXAMPLES)
    for name in files:
        load_scenario(SIMS / "scenarios" / f"{name}.toml")


@pytest.mark.parametrize("scenario", sorted(EXAMPLES))
def test_cli_runs_every_shipped_example(scenario, capsys):
    plan = SIMS / "plans" / f"{EXAMPLES[scenario]}.json"
    code = cli_main(["simulate", "--plan", str(plan), "--scenario",
                              str(SIMS / "scenarios" / f"{scenario}.toml"), "--reps", "300",
                              "--json", "--no-progress"])
    out = capsys.readouterr().out
    assert code == 0
    doc = json.loads(out)
    assert doc["reps"] == 300 and sum(sum(x[o] for o in OUTCOMES) for x in doc["looks"]) == 300


def test_cli_table_plot_and_check(tmp_path, capsys):
    args = ["simulate", "--plan", str(SIMS / "plans" / "counts_obf5.json"), "--scenario",
            str(SIMS / "scenarios" / "counts_overdispersed.toml"), "--reps", "20000",
            "--seed", "2", "--plot", str(tmp_path / "r.png"), "--check"]
    assert cli_main(args) == 1          # the overdispersed counts leak
    out = capsys.readouterr().out
    assert "Verdict: leaks alpha" in out and "Naive baseline" in out
    png = (tmp_path / "r.png").read_bytes()
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    args[4] = str(SIMS / "scenarios" / "counts_null_fixed.toml")
    assert cli_main(args) == 0


@pytest.mark.parametrize("change, words", [
    ({"--plan": "missing.json"}, "--plan"),
    ({"--scenario": "missing.toml"}, "--scenario"),
    ({"--scenario": "simulations/scenarios/normal_tiny.toml"}, "data.kind"),
    ({"--confidence": "2"}, "--confidence"),
])
def test_cli_bad_input_is_one_line_and_status_2(change, words, capsys, monkeypatch):
    monkeypatch.chdir(ROOT)
    opts = {"--plan": "simulations/plans/binary_obf5.json",
            "--scenario": "simulations/scenarios/binary_null_fixed.toml", "--reps": "10"}
    opts.update(change)
    argv = ["simulate", *[x for kv in opts.items() for x in kv], "--no-progress"]
    assert cli_main(argv) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and words in err


def test_cli_bad_toml_is_refused(tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text("[data\nkind = 'binary'\n")
    argv = ["simulate", "--plan", str(SIMS / "plans" / "binary_obf5.json"),
            "--scenario", str(bad), "--reps", "10"]
    assert cli_main(argv) == 2
    assert "not valid TOML" in capsys.readouterr().err


def test_registered_on_the_seqtest_command(capsys):
    from seqtest import cli
    code = cli.main(["simulate", "--plan", str(SIMS / "plans" / "binary_obf5.json"),
                     "--scenario", str(SIMS / "scenarios" / "binary_null_fixed.toml"),
                     "--reps", "200", "--json", "--no-progress"])
    assert code == 0 and json.loads(capsys.readouterr().out)["reps"] == 200


def test_plot_result_writes_a_png(tmp_path):
    plan = _plan(metric=BINARY, futility="pocock-type")
    sc = scenario_from_dict({"data": {"kind": "binary", "rate": 0.1},
                             "effect": {"mde_multiple": 0.5}})
    res = simulate(plan, sc, 2_000, seed=1)
    path = plot_result(res, tmp_path / "p.png")
    assert path.read_bytes()[:4] == b"\x89PNG"
    table = res.table().splitlines()
    header = next(line for line in table if line.strip().startswith("look"))
    assert all(o in header for o in OUTCOMES)
    rows = [line for line in table[table.index(header) + 2:] if line.strip()]
    assert len(rows) == res.looks
    # each row's counts are the stops tallied at that look
    for j, line in enumerate(rows):
        cells = line.split()
        assert [int(c.replace(",", "")) for c in cells[3:3 + len(OUTCOMES)]] == \
            res.stops[j].tolist()


# ---------------------------------------------------------------------------
# The reduced validation grid (what CI runs)
# ---------------------------------------------------------------------------


def _validate_module():
    import sys
    if "seqtest_validate" not in sys.modules:
        spec = importlib.util.spec_from_file_location("seqtest_validate",
                                                      SIMS / "validate.py")
        mod = importlib.util.module_from_spec(spec)
        sys.modules["seqtest_validate"] = mod
        spec.loader.exec_module(mod)
    return sys.modules["seqtest_validate"]


def test_reduced_grid_holds_alpha_and_reproduces_the_naive_rates(tmp_path):
    # Fails if any shipped design leaks alpha: a gated cell leaks when the lower end
    # of its Clopper-Pearson interval at the Bonferroni level 1 - 2 x 0.05 / M (M
    # gated cells) is above alpha. The naive cells are checked against Armitage,
    # McPherson & Rowe (1969) / Jennison & Turnbull Table 1.1 for K = 2, 5, 10.
    v = _validate_module()
    a = v.run("reduced", tmp_path, workers=2)
    assert a.leaks == []
    assert a.naive_failures == []
    ks = sorted(r["labels"]["K"] for r in a.rows if r["naive_reference"] is not None)
    assert ks == [2, 5, 10]
    assert all(r["reps"] >= 100_000 for r in a.rows
               if not r["id"].startswith(("random-", "mixture-normal", "experiment-")))
    # experiments: the family-wise error cells at 100,000, the others at 20,000
    exp = [r for r in a.rows if r["id"].startswith("experiment-")]
    assert exp and all(r["reps"] >= (100_000 if r["id"].startswith(
        ("experiment-null", "experiment-lfc")) else 20_000) for r in exp)
    # a guardrail finds the harm of its mde at its planned power: within 4 standard
    # errors (sqrt(0.8 x 0.2 / 20,000) = 0.0028), less the chance, at most the
    # primaries' alpha 0.025, that the arm stopped for efficacy before the harm showed
    g = next(r for r in exp if r["id"] == "experiment-guardrail-power")["experiment"]
    x = g["guardrails"]["treatment_1/load"]
    se = math.sqrt(x["planned"] * (1 - x["planned"]) / 20_000)
    assert x["planned"] - 4 * se - 0.025 <= x["rate"] <= x["planned"] + 4 * se
    # the composed decision: false wins and false harm stops within the plan's bounds
    for r in exp:
        e = r["experiment"]
        assert e["false_win"]["ci95"][0] <= e["false_win"]["planned"]
        assert e["false_harm"]["ci95"][0] <= e["false_harm"]["planned"]
    report = (tmp_path / "report.md").read_text()
    assert "leaking gated cells: 0" in report
    for png in ("naive.png", "standardised.png", "fixed-traffic-binary.png"):
        assert (tmp_path / png).read_bytes()[:4] == b"\x89PNG"


def test_the_grid_rule_flags_a_leaking_cell():
    # The rule must be able to fail: a cell whose rate is far above alpha (the
    # overdispersed counts, which leak by construction) is flagged.
    v = _validate_module()
    cell = v.Cell("leaky", "test", {}, {}, 20_000)
    plan = _plan(looks=1, metric={"kind": "rate", "baseline": 2.0, "mde": 0.1})
    sc = scenario_from_dict({"data": {"kind": "counts", "rate": 2.0, "dispersion": 2.0}})
    res = simulate(plan, sc, 20_000, seed=3)
    a = v.assess([v.CellResult(cell, res, 0.0)])
    assert a.leaks == ["leaky"]
