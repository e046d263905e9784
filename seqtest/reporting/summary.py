"""The plain-language summary of an analysis, and of a plan.

:func:`summarize` writes the decision in plain sentences, with the effect in the
metric's units (and in percent where relative), the interval that holds despite the
looks and what it means, what lies ahead while the experiment continues, the
sample-ratio alert before everything else, the other warnings and the caution. It
returns the sentences together with the numbers they show (:class:`Summary`), so the
command line, the JSON of an analysis (``Analysis.to_dict()["summary"]``), the
notebook display, the report and the service's pages all show the same words and the
same numbers.

It reads an analysis either as the :class:`~seqtest.monitoring.analysis.Analysis`
object or as its plain JSON (``Analysis.to_dict()``, e.g. as stored by the service),
by field names only: this package imports nothing above :mod:`seqtest.core`.

Which numbers are shown
    At a stop or at the end of a group-sequential plan: the median-unbiased estimate,
    the stage-wise adjusted interval (level ``1 - alpha``; one-sided plans: its lower
    end) and the adjusted p-value (Jennison and Turnbull 2000, chapter 8). While the
    experiment continues: the look's own estimate and the repeated confidence interval
    (valid at every look, chapter 9), with conditional power and the users to the next
    look. For a mixture plan: the observed estimate, the confidence sequence and the
    always-valid p-value (Johari et al. 2022). Differences of rates are in percentage
    points, relative effects in percent; a difference is also given in percent of the
    control arm's value at that look.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from dataclasses import dataclass, field, fields, is_dataclass
from typing import Any

from seqtest.core import jsonable
from seqtest.core.vocabulary import CAUTION
from seqtest.reporting import numbers as num

__all__ = [
    "EffectUnits",
    "Summary",
    "analysis_record",
    "effect_units",
    "plan_summary",
    "sample_ratio_looks",
    "summarize",
]

_SRM_WARNING = re.compile(r"^look (\d+): Sample ratio mismatch")
_NOUNS = {"binary": "the success rate", "continuous": "the mean", "rate": "the event rate",
          "ratio": "the ratio", "adjusted": "the covariate-adjusted mean",
          "count": "the count per user"}


def analysis_record(analysis: Any) -> dict:
    """An analysis as plain JSON types: the object's fields, or the mapping as given.

    Reads the fields directly (not through ``to_dict``, which itself calls
    :func:`summarize`)."""
    if isinstance(analysis, Mapping):
        return dict(analysis)
    if is_dataclass(analysis) and not isinstance(analysis, type):
        return {f.name: jsonable.plain(getattr(analysis, f.name)) for f in fields(analysis)}
    raise TypeError(f"analysis: got {type(analysis).__name__}; allowed is an Analysis or "
                    "its to_dict()")


# -- units ----------------------------------------------------------------------------

@dataclass(frozen=True)
class EffectUnits:
    """How an effect and the arms' values are shown.

    Attributes
    ----------
    scale, kind : str
        The effect's scale (``difference`` or ``relative``) and the metric kind.
    factor : float
        Multiplier from the effect's own scale to the shown number (100 for percent
        and percentage points).
    unit : str
        The shown unit: ``" points"`` (percentage points), ``"%"`` or ``""``.
    value_factor, value_unit : float, str
        The same for the arms' own values (rates of a binary metric in percent).
    noun : str
        What the metric is called in a sentence.
    axis : str
        Label of an effect axis.
    people : str
        What the sample counts: ``users`` or ``units of exposure``.
    """

    scale: str
    kind: str
    factor: float
    unit: str
    value_factor: float
    value_unit: str
    noun: str
    axis: str
    people: str

    @property
    def column(self) -> str:
        """Unit for a table header: ``points``, ``%`` or empty."""
        return self.unit.strip()

    def effect(self, x: Any, decimals: int, *, sign: bool = True) -> str:
        """An effect on its own scale, shown with its unit (``+1.5 points``, ``+18%``)."""
        if not num.is_number(x):
            return num.fixed(x, decimals)
        v = float(x) * self.factor
        return (num.signed(v, decimals) if sign else num.fixed(abs(v), decimals)) + self.unit

    def span(self, lo: Any, hi: Any, decimals: int) -> str:
        """An interval ``from lo to hi`` with the unit once at the end (``from +0.6 to
        +2.4 points``), or on both ends for percent (``from +7% to +30%``)."""
        a = num.signed(float(lo) * self.factor, decimals) if num.is_number(lo) else "-"
        b = num.signed(float(hi) * self.factor, decimals) if num.is_number(hi) else "-"
        if self.unit == "%":
            return f"from {a}% to {b}%"
        return f"from {a} to {b}{self.unit}"

    def value(self, x: Any, decimals: int) -> str:
        """An arm's own value (``8.1%`` for a rate of a binary metric)."""
        if not num.is_number(x):
            return num.fixed(x, decimals)
        return num.fixed(float(x) * self.value_factor, decimals) + self.value_unit


def effect_units(kind: str, scale: str, *, noun: str | None = None) -> EffectUnits:
    """The units of an effect of a metric kind on a scale (see :class:`EffectUnits`)."""
    people = "units of exposure" if kind == "rate" else "users"
    value_factor, value_unit = (100.0, "%") if kind == "binary" else (1.0, "")
    name = noun or _NOUNS.get(kind, "the metric")
    if scale == "relative":
        return EffectUnits(scale, kind, 100.0, "%", value_factor, value_unit, name,
                           "% change, treatment vs control", people)
    if kind == "binary":
        return EffectUnits(scale, kind, 100.0, " points", value_factor, value_unit, name,
                           "difference (percentage points)", people)
    return EffectUnits(scale, kind, 1.0, "", value_factor, value_unit, name,
                       "difference, treatment - control", people)


# -- the summary ----------------------------------------------------------------------

@dataclass(frozen=True)
class Summary:
    """The plain-language summary of an analysis (see :func:`summarize`).

    Attributes
    ----------
    decision : str
        The analysis' decision.
    alert : str or None
        A short sentence that must be read before the decision (a sample-ratio
        mismatch: the arms did not split as planned).
    headline : str
        The decision in one sentence (``"Stop at look 3: the treatment is better."``).
    effect : str
        The effect, the arms' values, the interval and what it means, the p-value.
    outlook : str or None
        While continuing: conditional power, users (and days) to the next look.
    caveat : str or None
        Small samples: the looks where the normal approximation is poor.
    alerts : list of str
        The full sample-ratio warnings.
    notes : list of str
        The other warnings (small samples, plan notes, looks after a stop, ...).
    caution : str
        :data:`seqtest.CAUTION`.
    figures : dict
        The numbers the sentences show, unrounded (see :func:`summarize`).
    """

    decision: str
    alert: str | None
    headline: str
    effect: str
    outlook: str | None
    caveat: str | None = None
    alerts: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    caution: str = CAUTION
    figures: dict = field(default_factory=dict)

    @property
    def sentences(self) -> list[str]:
        """The sentences of :attr:`text`, in order."""
        return [s for s in (self.alert, self.headline, self.effect, self.outlook,
                            self.caveat) if s]

    @property
    def text(self) -> str:
        """Alert, decision, effect and outlook in one paragraph (no warnings, no
        caution): what ``Analysis.to_dict()["summary"]`` holds."""
        return " ".join(self.sentences)

    def full_text(self) -> str:
        """:attr:`text`, then every warning (sample ratio first), then the caution."""
        lines = [self.text]
        extra = [*self.alerts, *self.notes]
        if extra:
            lines.append("")
            lines += [f"warning: {w}" for w in extra]
        lines += ["", f"Note: {self.caution}"]
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.full_text()

    def to_dict(self) -> dict:
        """Plain JSON types, with ``text`` added."""
        out = jsonable.plain({f.name: getattr(self, f.name) for f in fields(self)})
        out["text"] = self.text
        return out


def sample_ratio_looks(record: Mapping) -> list[int]:
    """Looks (1-based) whose arm sizes fail the sample-ratio check of the analysis.

    Uses each look's ``srm_p_value`` against the analysis' ``srm_threshold``; a record
    without a threshold (written by an earlier release) is read from its warnings."""
    threshold = _f(record.get("srm_threshold"))
    if threshold is not None:
        return [int(x["look"]) for x in record.get("looks", [])
                if num.is_number(x.get("srm_p_value"))
                and float(x["srm_p_value"]) < threshold]
    found = []
    for w in record.get("warnings", []):
        m = _SRM_WARNING.match(str(w))
        if m:
            found.append(int(m.group(1)))
    return found


def _f(x: Any) -> float | None:
    return float(x) if num.is_number(x) else None


def summarize(analysis: Any, *, noun: str | None = None) -> Summary:
    """The plain-language summary of an analysis.

    Parameters
    ----------
    analysis : Analysis or dict
        The analysis, or its ``to_dict()`` (e.g. as the service stores it).
    noun : str, optional
        What to call the metric in the sentence (``"the conversion rate"``); default
        by kind: ``the success rate`` (binary), ``the mean`` (continuous), ``the event
        rate`` (rate). ``Analysis.to_dict()`` uses the default.

    Returns
    -------
    Summary
        Its ``figures`` hold the numbers shown: ``look`` (of the estimate), ``estimate``
        and ``estimate_kind`` (``median_unbiased`` or ``observed``), ``relative`` (a
        difference over the control value), ``interval_lower``, ``interval_upper``
        (``None`` when one-sided), ``interval_kind`` (``adjusted``, ``repeated`` or
        ``confidence_sequence``), ``level``, ``p_value`` and ``p_kind``
        (``adjusted``, ``always_valid`` or ``None``), ``control_value``,
        ``treatment_value``, ``factor`` and ``unit`` of the shown effect, the
        projection's numbers, ``sample_ratio_mismatch`` and ``small_sample`` (looks).
    """
    r = analysis_record(analysis)
    looks = list(r.get("looks") or [])
    if not looks:
        raise ValueError("analysis: got an analysis without looks; allowed is the result "
                         "of seqtest.analyze")
    decision = str(r.get("decision"))
    kind = str(r.get("metric_kind") or r.get("metric") or "")
    units = effect_units(kind, str(r.get("scale") or "difference"), noun=noun)
    mixture = r.get("plan_kind") == "mixture"
    alpha = _f(r.get("alpha"))
    sides = r.get("sides")
    last = looks[-1]
    k = int(last["look"])
    fin = r.get("final") or None
    proj = r.get("projection") or None

    # the sample-ratio alert comes first
    srm = sample_ratio_looks(r)
    warnings = [str(w) for w in r.get("warnings") or []]
    alerts = [w for w in warnings if _SRM_WARNING.match(w)]
    notes = [w for w in warnings if not _SRM_WARNING.match(w)]
    alert = None
    if srm:
        where = "look" + ("s " if len(srm) > 1 else " ") + ", ".join(map(str, srm))
        ps = [x.get("srm_p_value") for x in looks if int(x["look"]) in srm]
        p_text = f" ({_p_equals(min(p for p in ps if num.is_number(p)))})" if any(
            num.is_number(p) for p in ps) else ""
        alert = (f"Sample-ratio mismatch at {where}{p_text}: the arms did not split as "
                 "planned, so do not act on the decision below until the cause is found.")

    # the estimate and the interval to show
    p_kind: str | None
    stop_look = int(r.get("stopped_at") or k)
    at = next((x for x in looks if int(x["look"]) == stop_look), last)
    if decision != "continue" and fin:
        if mixture:
            est, est_kind = _f(fin.get("naive_estimate")), "observed"
            interval_kind, p_kind = "confidence_sequence", "always_valid"
        else:
            est = _f(fin.get("median_unbiased"))
            est_kind = "median_unbiased"
            if est is None:
                est, est_kind = _f(fin.get("naive_estimate")), "observed"
            interval_kind, p_kind = "adjusted", "adjusted"
        lo, hi = _f(fin.get("ci_lower")), _f(fin.get("ci_upper"))
        p = _f(fin.get("p_value"))
    else:
        est, est_kind = _f(at.get("estimate")), "observed"
        lo, hi = _f(at.get("interval_lower")), _f(at.get("interval_upper"))
        interval_kind = "confidence_sequence" if mixture else "repeated"
        p_kind = "always_valid" if mixture else None
        p = _f(at.get("always_valid_p")) if mixture else None
    # one-sided intervals have no upper end (inf, written as None in JSON); where lower
    # is better, no lower end
    upper_only = sides == 1 and r.get("better") == "lower"
    if upper_only:
        lo = None
    elif sides == 1 or (sides is None and hi is None):
        hi = None
    margin = _f(r.get("margin")) or 0.0
    c_val, t_val = _f(at.get("control_value")), _f(at.get("treatment_value"))
    relative = None
    if units.scale == "difference" and est is not None and c_val:
        relative = est / c_val

    headline = _headline(decision, r, k, mixture, alpha, p)
    if decision == "stop_efficacy" and margin:
        headline = _margin_headline(r, k, units, margin)
    # a continuing mixture plan gives its p-value in the headline already
    shown_p = None if (mixture and decision == "continue") else p
    effect = _effect_sentence(decision, units, est, relative, c_val, t_val, stop_look, lo,
                              hi, interval_kind, num.level_text(alpha), shown_p, p_kind,
                              upper_only=upper_only, margin=margin)
    outlook = _outlook(decision, units, proj, mixture, last)
    small = [int(x["look"]) for x in looks if x.get("small_sample")]
    caveat = None
    if small:
        caveat = (f"The arms are small at look{'s' if len(small) > 1 else ''} "
                  f"{', '.join(map(str, small))}, so the numbers there are approximate.")
    figures = {
        "look": stop_look, "estimate": est, "estimate_kind": est_kind, "relative": relative,
        "interval_lower": lo, "interval_upper": hi, "interval_kind": interval_kind,
        "level": None if alpha is None else 1.0 - alpha, "p_value": p, "p_kind": p_kind,
        "control_value": c_val, "treatment_value": t_val, "factor": units.factor,
        "unit": units.column, "direction": r.get("direction"),
        "sample_ratio_mismatch": srm, "small_sample": small,
    }
    for key in ("conditional_power_planned", "conditional_power_current",
                "more_units_to_next_look", "days_to_next_look", "more_units_to_end",
                "days_to_end"):
        figures[key] = _f((proj or {}).get(key))
    return Summary(decision=decision, alert=alert, headline=headline, effect=effect,
                   outlook=outlook, caveat=caveat, alerts=alerts, notes=notes,
                   caution=str(r.get("caution") or CAUTION), figures=figures)


def _p_equals(p: Any, word: str = "") -> str:
    """``p = 0.0017`` or ``p < 0.0001`` (with a qualifier: ``adjusted p = ...``)."""
    text = num.p_value(p)
    lead = f"{word} p" if word else "p"
    return f"{lead} {text}" if text.startswith("<") else f"{lead} = {text}"


def _headline(decision: str, r: Mapping, k: int, mixture: bool, alpha: float | None,
              p: float | None) -> str:
    if decision == "continue":
        if mixture:
            bar = f"alpha {alpha:g}" if alpha is not None else "alpha"
            return (f"Continue: at look {k} the always-valid p-value is {num.p_value(p)}, "
                    f"not below {bar}.")
        return f"Continue: no boundary was crossed at look {k}."
    if decision == "stop_efficacy":
        better = ("control is better" if r.get("direction") == "control_better"
                  else "the treatment is better")
        return f"Stop at look {k}: {better}."
    if decision == "stop_futility":
        binding = r.get("binding")
        if binding is False:
            return (f"Stopping for futility is advised at look {k}: the planned effect has "
                    "become unlikely. The futility boundary is non-binding, so the error "
                    "rates hold whether the experiment stops or goes on.")
        if binding:
            return (f"Stop at look {k} for futility: the planned effect has become "
                    "unlikely, and the futility boundary is binding (the plan's error "
                    "rates assume the experiment stops here).")
        return f"Stop at look {k} for futility: the planned effect has become unlikely."
    if decision == "complete_not_significant":
        if mixture:
            return (f"Complete at look {k}, not significant: an arm reached the plan's cap "
                    "before the always-valid p-value reached alpha.")
        return (f"Complete at look {k}, not significant: the final look did not cross the "
                "efficacy boundary.")
    return f"Decision at look {k}: {decision}."


def _margin_headline(r: Mapping, k: int, units: EffectUnits, margin: float) -> str:
    """An efficacy stop of a test against a margin: non-inferior, or better by more
    than the margin (or, two-sided, worse by more than it)."""
    d = num.decimals_for([units.factor * margin], 2)
    size = units.effect(abs(margin), d, sign=False)
    direction = r.get("direction")
    if direction == "treatment_non_inferior":
        return (f"Stop at look {k}: the treatment is non-inferior, not worse than the "
                f"control by more than the margin of {size}.")
    if direction == "control_better":
        return (f"Stop at look {k}: the treatment is worse than the control by more than "
                f"the margin of {size}.")
    return (f"Stop at look {k}: the treatment is better than the control by more than "
            f"the margin of {size}.")


def _interval_name(kind: str, level: str | None, one_sided: bool) -> str:
    lv = ("one-sided " if one_sided else "") + (f"{level} " if level else "")
    if kind == "adjusted":
        return f"the adjusted {lv}interval, which accounts for the looks taken,"
    if kind == "confidence_sequence":
        return f"the {lv}confidence sequence, valid however often you look,"
    return f"the repeated {lv}interval, valid at every look,"


def _effect_sentence(decision: str, units: EffectUnits, est: float | None,
                     relative: float | None, c_val: float | None, t_val: float | None,
                     look: int, lo: float | None, hi: float | None, interval_kind: str,
                     level: str | None, p: float | None, p_kind: str | None, *,
                     upper_only: bool = False, margin: float = 0.0) -> str:
    noun = units.noun
    if est is None:
        return (f"The effect cannot be estimated at look {look} (no variation in the "
                "data yet).")
    d = num.decimals_for([units.factor * x for x in (est, lo, hi) if x is not None], 2)
    mag = units.effect(est, d, sign=False)
    shown_zero = float(num.fixed(abs(est) * units.factor, d)) == 0.0
    rel = ""
    if relative is not None and units.scale == "difference":
        rel = num.percent(relative, min(1, num.decimals_for([100 * relative], 2)), sign=True)
    # the arms' own values: enough decimals to show the difference between them, but
    # no more than the effect itself shows (same units on the difference scale)
    vals = [x for x in (c_val, t_val) if x is not None]
    arms = ""
    if len(vals) == 2:
        assert c_val is not None and t_val is not None
        own = num.decimals_for([units.value_factor * v for v in vals], 2)
        if units.scale == "difference":
            vd = max(own, d)
        else:
            diff = num.decimals_for([units.value_factor * (t_val - c_val)], 2)
            vd = max(own, min(diff, own + 2))
        arms = (f"{units.value(c_val, vd)} with control, {units.value(t_val, vd)} with the "
                f"treatment at look {look}")
    inside = "; ".join(x for x in (rel, arms) if x)
    paren = f" ({inside})" if inside else ""
    if shown_zero:
        first = f"{noun[0].upper()}{noun[1:]} is about the same in both arms{paren}"
    elif decision == "continue":
        way = "up" if est > 0 else "down"
        first = f"So far {noun} is {way} by {mag}{paren}"
    else:
        way = "rose" if est > 0 else "fell"
        first = f"{noun[0].upper()}{noun[1:]} {way} by about {mag}{paren}"
    name = _interval_name(interval_kind, level,
                          (lo is not None and hi is None) or upper_only)
    # what the interval is compared with: no difference, or the margin
    null_text = "no difference" if not margin else \
        f"the margin {units.effect(margin, num.decimals_for([units.factor * margin], 2))}"
    if upper_only and hi is not None:
        second = f"{name} ends at {units.effect(hi, d)}"
        if hi >= margin:
            second += f"; it includes {null_text}"
    elif lo is None:
        second = f"{name} cannot be computed"
    elif hi is None:
        second = f"{name} starts at {units.effect(lo, d)}"
        if lo <= margin:
            second += f"; it includes {null_text}"
    elif lo > hi:
        second = (f"{name} is empty ({units.effect(lo, d)} above {units.effect(hi, d)}): the "
                  "looks do not agree with one constant effect")
    else:
        second = f"{name} runs {units.span(lo, hi, d)}"
        if lo <= margin <= hi:
            second += f"; it includes {null_text}"
    if p is not None and p_kind:
        second += f" ({_p_equals(p, 'adjusted' if p_kind == 'adjusted' else 'always-valid')})"
    return f"{first}; {second}."


def _outlook(decision: str, units: EffectUnits, proj: Mapping | None, mixture: bool,
             last: Mapping) -> str | None:
    if decision != "continue":
        return None
    if mixture:
        frac = _f(last.get("information_fraction"))
        text = "You may look again at any time"
        if frac is not None:
            text += (f"; the larger arm has reached {num.percent(frac, 0)} of the plan's "
                     "cap")
        return text + "."
    if not proj:
        return None
    parts = []
    cp_plan = _f(proj.get("conditional_power_planned"))
    cp_now = _f(proj.get("conditional_power_current"))
    if cp_plan is not None:
        s = (f"If the true effect is the planned one, the chance of a significant result "
             f"by the end is {num.probability(cp_plan)}")
        if cp_now is not None:
            s += f" ({num.probability(cp_now)} if it is the current estimate)"
        parts.append(s + ".")
    more = _f(proj.get("more_units_to_next_look"))
    if more is not None:
        end = _f(proj.get("more_units_to_end"))
        only_end = end is not None and num.count(end) == num.count(more)
        s = (f"The {'last' if only_end else 'next'} planned look comes after about "
             f"{num.count(more)} more {units.people}")
        dn = _f(proj.get("days_to_next_look"))
        if dn is not None:
            s += f" (about {num.days(dn)})"
        if end is not None and not only_end:
            s += f", the end after about {num.count(end)}"
            de = _f(proj.get("days_to_end"))
            if de is not None:
                s += f" (about {num.days(de)})"
        parts.append(s + ".")
    return " ".join(parts) or None


# -- plans --------------------------------------------------------------------------

def _hypothesis_line(metric: Mapping | None) -> str | None:
    """The test against a margin, in one line (None without margin or direction)."""
    if not metric or not any(k in metric for k in ("margin", "better", "hypothesis")):
        return None
    margin = float(metric.get("margin", 0.0))
    better = metric.get("better", "higher")
    scale = metric.get("scale", "difference")
    size = f"{margin:+.4g}" + (" (relative)" if scale == "relative" else "")
    if metric.get("hypothesis") == "non_inferiority":
        what = f"non-inferiority: the treatment is not worse by more than the margin {size}"
    elif margin:
        what = f"superiority by a margin: the treatment is better by more than {size}"
    else:
        what = "superiority"
    return f"  test: {what}; {better} is better"


def plan_summary(plan: Any) -> str:
    """A plan in a few plain lines: kind, sides, alpha, power, boundaries, sizes.

    Reads a :class:`~seqtest.planning.design.Plan` or a
    :class:`~seqtest.planning.mixture.MixturePlan` by its attributes."""
    side = "two-sided" if plan.sides == 2 else "one-sided"
    hyp = _hypothesis_line(getattr(plan, "metric", None))
    if hasattr(plan, "tau2"):
        lines = [f"Plan: mixture SPRT (look at any time), {side} alpha {plan.alpha:g}",
                 f"  mixing variance tau^2 = {plan.tau2:.6g} (chosen by rule: "
                 f"{plan.tau2_rule})"]
        if plan.mde is not None and hyp:
            lines.append(f"  tuned to the effect powered for, {plan.mde:g} from the null "
                         f"towards the better side ({plan.scale} scale)")
        elif plan.mde is not None:
            lines.append(f"  tuned to the minimum detectable effect {plan.mde:g} "
                         f"({plan.scale} scale)")
        if plan.max_n_per_arm:
            lines.append(f"  complete at {plan.max_n_per_arm:,} per arm without a rejection")
        if hyp:
            lines.append(hyp)
        return "\n".join(lines)
    lines = [f"Plan: {plan.looks} look(s), {side} alpha {plan.alpha:g}, power {plan.power:g}",
             f"  efficacy: {plan.efficacy.label}",
             (f"  futility: {plan.futility.label} "
              f"({'binding' if plan.binding else 'non-binding'})")
             if plan.futility is not None else "  futility: none",
             f"  inflation over the fixed design: {plan.inflation:.4f}"]
    if hyp:
        lines.append(hyp)
    if plan.metric:
        ss = plan.sample_size()
        e0 = ss.expected_null / ss.total
        e1 = ss.expected_alternative / ss.total
        who = "units of exposure" if plan.metric.get("kind") == "rate" else "users"
        lines.append(f"  maximum {who} per arm: control {ss.n_control:,}, treatment "
                     f"{ss.n_treatment:,} (fixed design: {ss.fixed_control:,}, "
                     f"{ss.fixed_treatment:,})")
        lines.append(f"  expected total: {ss.expected_null:,.0f} if no effect "
                     f"({e0:.0%} of max), {ss.expected_alternative:,.0f} at the design "
                     f"effect ({e1:.0%} of max)")
    for note in getattr(plan, "notes", ()):
        lines.append(f"  note: {note}")
    return "\n".join(lines)
