"""The plain-language summary (seqtest.reporting.summarize), its numbers and the exit
statuses.

Every number a sentence shows is read back out of the sentence and compared with the
analysis it summarises, to the rounding the sentence shows (half a unit of its last
digit): the expected values come from the Analysis, never from this file. The
analysis numbers themselves are checked against outside references in
test_monitor.py and test_inference.py. Units are facts of the trade: a difference of
two rates is read in percentage points, a relative effect in percent.
"""

from __future__ import annotations

import dataclasses
import json
import math
import re

import pytest
from reporting_cases import EXPECTED_DECISION, cases
from scipy import stats

import seqtest
from seqtest.reporting import ExitStatus, exit_status, summarize
from seqtest.reporting import numbers as num

CASES = cases()
NUM = r"[+-]?\d[\d,]*(?:\.\d+)?"


@pytest.fixture(scope="module")
def analyses() -> dict:
    return {name: case.analyze() for name, case in CASES.items()}


def value(text: str) -> float:
    return float(text.replace(",", ""))


def assert_shown(text: str, true: float, what: str) -> None:
    """``text`` is ``true`` rounded to the decimals ``text`` shows."""
    decimals = len(text.split(".")[1]) if "." in text else 0
    tol = 0.5 * 10.0 ** (-decimals) * (1 + 1e-9) + 1e-12
    assert abs(value(text) - true) <= tol, f"{what}: shown {text}, true {true}"


def factor(a) -> float:
    # percent for a relative effect, percentage points for a difference of rates
    return 100.0 if (a.scale == "relative" or a.metric_kind == "binary") else 1.0


def shown_estimate(a):
    """What the summary must show: the adjusted estimate at a stop or the end of a
    group-sequential plan, the observed one at a mixture stop or while continuing."""
    if a.decision != "continue" and a.final is not None:
        est = a.final.naive_estimate if a.plan_kind == "mixture" else a.final.median_unbiased
        return est, a.final.ci_lower, a.final.ci_upper, a.final.p_value
    last = a.looks[-1]
    return last.estimate, last.interval_lower, last.interval_upper, last.always_valid_p


def test_the_cases_reach_the_decisions_they_are_named_for(analyses):
    for name, a in analyses.items():
        assert a.decision == EXPECTED_DECISION[name], name


@pytest.mark.parametrize("name", list(CASES))
def test_the_effect_and_interval_in_the_sentence_are_the_analysis(analyses, name):
    a = analyses[name]
    s = summarize(a)
    text = s.text
    f = factor(a)
    est, lo, hi, p = shown_estimate(a)
    # the unrounded numbers behind the sentence are the analysis' own
    fig = s.figures
    assert fig["estimate"] == est and fig["interval_lower"] == lo
    assert fig["interval_upper"] == (None if math.isinf(hi) else hi)
    assert fig["p_value"] == (None if (a.plan_kind != "mixture" and a.decision == "continue")
                              else p)
    assert fig["factor"] == f and fig["look"] == (a.stopped_at or a.looks[-1].look)
    # the effect, in the metric's units, with its direction in words
    m = re.search(rf"by (?:about )?({NUM})( points|%)?", text)
    assert m, text
    assert_shown(m.group(1), abs(est) * f, "effect")
    if a.scale == "relative":
        assert m.group(2) == "%"
    elif a.metric_kind == "binary":
        assert m.group(2) == " points"
    words = ("rose", "up") if est > 0 else ("fell", "down")
    assert re.search(rf"\b({words[0]}|is {words[1]}) by", text), text
    # a difference is also given in percent of the control value
    at = next(x for x in a.looks if x.look == (a.stopped_at or a.looks[-1].look))
    if a.scale == "difference":
        m = re.search(rf"\(({NUM})%;", text)
        assert m, text
        assert_shown(m.group(1), 100 * est / at.control_value, "relative change")
    # the arms' own values at that look
    vf = 100.0 if a.metric_kind == "binary" else 1.0
    m = re.search(rf"({NUM})%? with control, ({NUM})%? with the treatment at look (\d+)",
                  text)
    assert m, text
    assert int(m.group(3)) == at.look
    assert_shown(m.group(1), at.control_value * vf, "control value")
    assert_shown(m.group(2), at.treatment_value * vf, "treatment value")
    # the interval, at the plan's level, and its kind
    level = f"{100 * (1 - a.alpha):g}%"
    assert f" {level} " in text, (level, text)
    if a.sides == 1:
        m = re.search(rf"one-sided {re.escape(level)} (?:interval|confidence sequence).*?"
                      rf"starts at ({NUM})", text)
        assert m and math.isinf(hi), text
        assert_shown(m.group(1), lo * f, "interval lower end")
    else:
        m = re.search(rf"runs from ({NUM})%? to ({NUM})", text)
        assert m, text
        assert_shown(m.group(1), lo * f, "interval lower end")
        assert_shown(m.group(2), hi * f, "interval upper end")
    assert ("includes no difference" in text) == (lo <= 0 <= hi)
    if a.plan_kind == "mixture":
        assert "confidence sequence, valid however often you look" in text
    elif a.decision == "continue":
        assert "repeated" in text and "valid at every look" in text
    else:
        assert "adjusted" in text and "accounts for the looks taken" in text
    # the p-value: adjusted (stage-wise) or always-valid
    if a.decision != "continue" or a.plan_kind == "mixture":
        word = "always-valid p" if a.plan_kind == "mixture" else "adjusted p"
        m = re.search(rf"{word}(?:-value is| =) ({NUM})", text) or re.search(
            rf"{word} < (0\.0001)", text)
        assert m, text
        if "<" in m.group(0):
            assert p < 1e-4
        elif m.group(1) == "1":
            assert p >= 0.995
        else:
            assert_shown(m.group(1), p, "p-value")


@pytest.mark.parametrize("name", list(CASES))
def test_the_headline_says_the_decision(analyses, name):
    a = analyses[name]
    s = summarize(a)
    look = a.stopped_at or a.looks[-1].look
    assert f"look {look}" in s.headline
    if a.decision == "continue":
        assert s.headline.startswith("Continue")
        if a.plan_kind == "mixture":
            m = re.search(rf"always-valid p-value is ({NUM})", s.headline)
            assert m and (m.group(1) == "1" or abs(value(m.group(1))
                                                   - a.looks[-1].always_valid_p) < 0.01)
    elif a.decision == "stop_efficacy":
        better = ("the treatment is better" if a.direction == "treatment_better"
                  else "control is better")
        assert better in s.headline and s.headline.startswith("Stop")
        assert a.direction == ("treatment_better" if a.final.naive_estimate > 0
                               else "control_better")
    elif a.decision == "stop_futility":
        assert "futility" in s.headline
        if a.binding:
            assert "binding" in s.headline and "non-binding" not in s.headline
            assert s.headline.startswith("Stop at look")
        else:
            assert "non-binding" in s.headline and "advised" in s.headline
    else:
        assert "not significant" in s.headline and s.headline.startswith("Complete")


@pytest.mark.parametrize("name", ["continue", "relative_one_sided_continue"])
def test_a_continuing_plan_gives_conditional_power_and_the_next_look(analyses, name):
    a = analyses[name]
    s = summarize(a)
    proj = a.projection
    m = re.search(r"by the end is (over 99%|under 1%|(\d+)%) \((over 99%|under 1%|(\d+)%) "
                  r"if it is the current estimate\)", s.outlook)
    assert m, s.outlook
    for text, digits, cp in ((m.group(1), m.group(2), proj.conditional_power_planned),
                             (m.group(3), m.group(4), proj.conditional_power_current)):
        if text == "over 99%":
            assert cp > 0.99
        elif text == "under 1%":
            assert cp < 0.01
        else:
            assert_shown(digits, 100 * cp, "conditional power")
    m = re.search(rf"after about ({NUM}) more users \(about ({NUM}) days?\), the end after "
                  rf"about ({NUM}) \(about ({NUM}) days?\)", s.outlook)
    assert m, s.outlook
    assert value(m.group(1)) == math.ceil(proj.more_units_to_next_look - 1e-9)
    assert_shown(m.group(2), proj.days_to_next_look, "days to the next look")
    assert value(m.group(3)) == math.ceil(proj.more_units_to_end - 1e-9)
    assert_shown(m.group(4), proj.days_to_end, "days to the end")


def test_when_only_the_last_look_is_left_the_sentence_says_so(analyses):
    # the first look is past the last interim fraction: the next look is the end
    a = analyses["rate_past_the_last_interim"]
    proj = a.projection
    assert a.looks[0].information_fraction > CASES["rate_past_the_last_interim"].plan \
        .info_fractions[-2]
    assert proj.more_units_to_next_look == pytest.approx(proj.more_units_to_end)
    s = summarize(a)
    m = re.search(rf"The last planned look comes after about ({NUM}) more units of "
                  rf"exposure \(about ({NUM}) days?\)\.", s.outlook)
    assert m, s.outlook
    assert value(m.group(1)) == math.ceil(proj.more_units_to_end - 1e-9)
    assert "the end after" not in s.outlook


def test_a_look_without_variation_is_still_summarised_and_drawn():
    from seqtest.plotting import plot_analysis
    from seqtest.reporting import effect_svg, report_html, z_path_svg
    plan = seqtest.design(looks=5)
    a = seqtest.analyze(plan, [{"control": {"n": 500, "mean": 1.0, "sd": 0.0},
                                "treatment": {"n": 500, "mean": 1.0, "sd": 0.0}}],
                        metric="continuous", max_n=10_000)
    s = summarize(a)
    assert "about the same in both arms" in s.text and "cannot be computed" in s.text
    assert any("variance estimate is zero" in w for w in s.notes)
    for svg in (z_path_svg(a, plan), effect_svg(a)):
        assert svg.startswith("<svg")
    assert "<table" in report_html(a, plan) and plot_analysis(a, plan) is not None


def test_a_sample_ratio_mismatch_comes_before_the_decision(analyses):
    a = analyses["sample_ratio_mismatch"]
    # Source: scipy.stats.chisquare (Pearson's test) of 1000 vs 1200 against an even
    # split: far below the 0.001 threshold, so the look must be flagged
    assert stats.chisquare([1000, 1200]).pvalue < a.srm_threshold
    assert a.sample_ratio_mismatch == [1]
    s = summarize(a)
    assert s.text.startswith("Sample-ratio mismatch at look 1 (p < 0.0001)")
    assert s.text.index("Sample-ratio") < s.text.index("Continue")
    assert s.alerts and all("Sample ratio mismatch" in w for w in s.alerts)
    assert not any("Sample ratio mismatch" in w for w in s.notes)
    assert exit_status(a) == ExitStatus.SAMPLE_RATIO_MISMATCH
    assert a.to_dict()["sample_ratio_mismatch"] == [1]
    # no mismatch elsewhere
    for name, other in analyses.items():
        if name != "sample_ratio_mismatch":
            assert other.sample_ratio_mismatch == [] and summarize(other).alert is None


def test_small_samples_and_plan_notes_are_carried(analyses):
    a = analyses["small_sample"]
    assert a.looks[0].small_sample
    s = summarize(a)
    assert s.caveat and "look 1" in s.caveat and s.caveat in s.text
    assert any("normal approximation" in w for w in s.notes)
    # a plan note (e.g. a document of an earlier release) reaches the summary's notes
    case = CASES["continue"]
    noted = dataclasses.replace(case.plan, notes=("an invented note about this plan",))
    b = seqtest.analyze(noted, case.looks, **case.options)
    sb = summarize(b)
    assert "an invented note about this plan" in sb.notes
    assert "warning: an invented note about this plan" in sb.full_text()


@pytest.mark.parametrize("name", list(CASES))
def test_the_caution_is_always_there(analyses, name):
    s = summarize(analyses[name])
    assert s.caution == seqtest.CAUTION
    assert s.full_text().endswith(f"Note: {seqtest.CAUTION}")
    assert analyses[name].summary().endswith(seqtest.CAUTION)


@pytest.mark.parametrize("name", list(CASES))
def test_one_source_object_json_and_summary_agree(analyses, name):
    a = analyses[name]
    d = a.to_dict()
    assert d["summary"] == summarize(a).text
    back = json.loads(json.dumps(d, allow_nan=False))
    assert summarize(back).to_dict() == summarize(a).to_dict()
    assert exit_status(back) == exit_status(a)


def test_a_stored_analysis_of_the_first_release_still_reads(analyses):
    # a JSON analysis without sides, alpha, binding and srm_threshold (as the service
    # stored them before this release): the sentence drops the level, the mismatch is
    # read from the warnings
    for name in ("sample_ratio_mismatch", "stop_efficacy_treatment", "mixture_stop"):
        d = analyses[name].to_dict()
        for key in ("sides", "alpha", "binding", "srm_threshold", "summary",
                    "sample_ratio_mismatch"):
            d.pop(key)
        s = summarize(d)
        assert "95%" not in s.text and s.headline == summarize(analyses[name]).headline
        assert (s.alert is not None) == (name == "sample_ratio_mismatch")


def test_a_metric_can_be_named():
    a = CASES["binary_difference_stop"].analyze()
    s = summarize(a, noun="the conversion rate")
    assert "The conversion rate rose by about" in s.text
    assert "The conversion rate rose" in a.summary(noun="the conversion rate")


@pytest.mark.parametrize("name, status", [
    ("continue", ExitStatus.CONTINUE), ("stop_efficacy_treatment", ExitStatus.STOP),
    ("stop_futility_binding", ExitStatus.STOP), ("stop_futility_non_binding", ExitStatus.STOP),
    ("complete_not_significant", ExitStatus.COMPLETE), ("mixture_stop", ExitStatus.STOP),
    ("sample_ratio_mismatch", ExitStatus.SAMPLE_RATIO_MISMATCH)])
def test_exit_status_of_each_decision(analyses, name, status):
    assert exit_status(analyses[name]) == status
    assert len({int(s) for s in ExitStatus}) == len(ExitStatus)  # one meaning per code


def test_plan_summaries():
    plan = seqtest.design(looks=5, futility="obrien-fleming-type",
                          metric={"kind": "binary", "baseline": 0.08, "mde": 0.012})
    text = plan.summary()
    ss = plan.sample_size()
    assert "5 look(s), two-sided alpha 0.05" in text and "non-binding" in text
    assert f"control {ss.n_control:,}, treatment {ss.n_treatment:,}" in text
    mix = seqtest.mixture_plan(mde=0.1, max_n_per_arm=5000)
    assert "mixture" in mix.summary() and "5,000 per arm" in mix.summary()


# -- numbers for people ------------------------------------------------------------

def test_decimals_follow_significant_digits():
    # two significant digits of the largest value, the integer part never rounded
    assert num.decimals_for([2.415, 0.57, 1.4977], 2) == 1
    assert num.decimals_for([0.0123], 2) == 3
    assert num.decimals_for([123.4], 2) == 0
    assert num.decimals_for([0.0], 2) == 1
    assert num.decimals_for([None, float("nan")], 2) == 1
    assert num.decimals_for([1e-12], 2) == num.MAX_DECIMALS


def test_signs_percent_and_p_values():
    assert num.signed(1.5, 1) == "+1.5" and num.signed(-0.3, 1) == "-0.3"
    assert num.signed(-0.04, 1) == "0.0"  # rounds to zero: no sign
    assert num.percent(0.0814, 1) == "8.1%" and num.percent(0.184, 0, sign=True) == "+18%"
    assert num.p_value(0.0017159) == "0.0017" and num.p_value(3e-7) == "< 0.0001"
    assert num.p_value(3e-7, exact=True) == "3.0e-07"
    assert num.probability(0.995) == "over 99%" and num.probability(0.004) == "under 1%"
    assert num.probability(0.85) == "85%"
    assert num.count(4830.999999999999) == "4,831" and num.count(5079.0) == "5,079"
    assert num.days(2.99) == "3.0 days" and num.days(11.9) == "12 days"
    assert num.level_text(0.05) == "95%" and num.level_text(0.025) == "97.5%"
    assert num.fixed(None, 2) == "-" and num.fixed(float("inf"), 2) == "inf"


# a ratio, an adjusted mean and a count per user are named as such in the sentences,
# not as "the metric" (the totals: 1,000 users an arm, the treatment higher)
_KIND_LOOKS = {
    "ratio": ({"n": 1000, "numerator": 5000.0, "denominator": 2000.0,
               "numerator_sq": 40000.0, "denominator_sq": 5000.0, "cross": 12000.0},
              {"n": 1000, "numerator": 5600.0, "denominator": 2000.0,
               "numerator_sq": 48000.0, "denominator_sq": 5000.0, "cross": 13500.0}),
    "adjusted": ({"n": 1000, "sum": 10000.0, "sum_sq": 104000.0, "covariate": 9000.0,
                  "covariate_sq": 85000.0, "cross": 92000.0},
                 {"n": 1000, "sum": 10400.0, "sum_sq": 112000.0, "covariate": 9000.0,
                  "covariate_sq": 85000.0, "cross": 95600.0}),
    "count": ({"n": 1000, "events": 2000.0, "events_sq": 9000.0},
              {"n": 1000, "events": 2300.0, "events_sq": 10500.0}),
}


@pytest.mark.parametrize("kind, noun", [("ratio", "the ratio"),
                                        ("adjusted", "the covariate-adjusted mean"),
                                        ("count", "the count per user")])
def test_new_metric_kinds_are_named_in_the_summary(kind, noun):
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=3)
    control, treatment = _KIND_LOOKS[kind]
    a = seqtest.analyze(plan, [{"control": control, "treatment": treatment}],
                        metric=kind, max_n=6000)
    text = summarize(a).text
    assert noun in text.lower(), text
    assert "the metric" not in text.lower()


@pytest.mark.parametrize("decision, mismatch, status", [
    ("continue", False, ExitStatus.CONTINUE), ("stop_efficacy", False, ExitStatus.STOP),
    ("stop_harm", False, ExitStatus.STOP), ("stop_futility", False, ExitStatus.STOP),
    ("complete_not_significant", False, ExitStatus.COMPLETE),
    ("stop_harm", True, ExitStatus.SAMPLE_RATIO_MISMATCH)])
def test_exit_status_of_an_experiment_follows_the_same_table(decision, mismatch, status):
    # an experiment's record (ExperimentAnalysis.to_dict()): its sample-ratio check is
    # one chi-square per look over all arms, under "srm"
    record = {"kind": "experiment", "decision": decision, "looks": 2,
              "srm": [{"look": 1, "mismatch": False}, {"look": 2, "mismatch": mismatch}]}
    assert exit_status(record) == status


def test_every_decision_has_its_words():
    # a page or a table shows a decision in words, never as its code (stop_harm was
    # shown raw on the experiment page before it had words)
    from seqtest.reporting.style import DECISION_WORDS, decision_words
    assert set(DECISION_WORDS) == {d.value for d in seqtest.Decision}
    assert decision_words("stop_harm") == "stop for harm"
