"""Tables for people: the looks of an analysis, a plan's looks, the inference at a stop.

Each function returns ``(headers, rows)`` of strings, already formatted by
:mod:`seqtest.reporting.numbers`; the command line, the notebook display, the HTML and
Markdown reports lay them out. Units sit in the headers (``control (%)``, ``effect
(points)``), numbers in the cells; an effect and its interval share their decimals.
"""

from __future__ import annotations

from typing import Any

from seqtest.reporting import numbers as num
from seqtest.reporting.style import DECISION_WORDS
from seqtest.reporting.summary import analysis_record, effect_units

__all__ = ["final_rows", "look_rows", "plan_table_rows"]



def _unit(header: str, unit: str) -> str:
    return f"{header} ({unit})" if unit else header


def _size(v: Any) -> str:
    if not num.is_number(v):
        return "-"
    x = float(v)
    return f"{x:,.0f}" if x.is_integer() or abs(x) >= 100 else num.fixed(x, 2)


def look_rows(analysis: Any) -> tuple[list[str], list[list[str]]]:
    """The looks of an analysis: sizes, each arm's value, the effect with its interval
    valid at every look, z against the boundaries, the fraction and the decision.

    A relative effect is in percent, a difference of rates in percentage points, next to
    the arms' own values (rates of a binary metric in percent)."""
    r = analysis_record(analysis)
    looks = r.get("looks") or []
    units = effect_units(str(r.get("metric_kind") or ""), str(r.get("scale") or
                                                               "difference"))
    mixture = r.get("plan_kind") == "mixture"
    f, vf = units.factor, units.value_factor
    effect_values = [float(x[k]) * f for x in looks
                     for k in ("estimate", "interval_lower", "interval_upper")
                     if num.is_number(x.get(k))]
    d_eff = num.decimals_for(effect_values, 3)
    arm_values = [float(x[k]) * vf for x in looks for k in ("control_value", "treatment_value")
                  if num.is_number(x.get(k))]
    d_val = num.decimals_for(arm_values, 3)
    if units.scale == "difference" and units.factor == vf:
        d_val = max(d_val, d_eff)
    has_fut = any(num.is_number(x.get("futility_z")) for x in looks)
    value_unit = {"binary": "%", "continuous": "mean", "rate": "per unit"}.get(units.kind, "")
    size = "exposure" if units.kind == "rate" else "users"
    headers = ["look", f"{size}, control", f"{size}, treatment",
               _unit("control", value_unit), _unit("treatment", value_unit),
               _unit("effect", units.column),
               _unit("interval" if not mixture else "confidence sequence", units.column),
               "z", "efficacy z"]
    if has_fut:
        headers.append("futility z")
    headers += ["always-valid p" if mixture else "p to stop", "fraction", "decision"]
    rows = []
    for x in looks:
        lo, hi = x.get("interval_lower"), x.get("interval_upper")
        interval = (f"{num.signed(float(lo) * f, d_eff) if num.is_number(lo) else '-'} to "
                    f"{num.signed(float(hi) * f, d_eff) if num.is_number(hi) else 'open'}")
        row = [str(x["look"]), _size(x.get("n_control")), _size(x.get("n_treatment")),
               num.fixed(float(x["control_value"]) * vf, d_val)
               if num.is_number(x.get("control_value")) else "-",
               num.fixed(float(x["treatment_value"]) * vf, d_val)
               if num.is_number(x.get("treatment_value")) else "-",
               num.signed(float(x["estimate"]) * f, d_eff)
               if num.is_number(x.get("estimate")) else "-",
               interval, num.fixed(x.get("z"), 2),
               num.fixed(x.get("efficacy_z"), 2) if num.is_number(x.get("efficacy_z"))
               else "none"]
        if has_fut:
            row.append(num.fixed(x.get("futility_z"), 2))
        row.append(num.p_value(x.get("always_valid_p") if mixture else x.get("p_threshold"),
                               exact=not mixture))
        fr = x.get("information_fraction")
        row.append(num.percent(fr, 1) if num.is_number(fr) else "-")
        row.append(DECISION_WORDS.get(str(x.get("decision")), str(x.get("decision"))))
        rows.append(row)
    return headers, rows


def final_rows(analysis: Any) -> tuple[list[str], list[list[str]]] | None:
    """At a stop or at the end: the adjusted inference beside the unadjusted one (which
    ignores the looks); None while the experiment continues."""
    r = analysis_record(analysis)
    fin = r.get("final")
    if not fin:
        return None
    units = effect_units(str(r.get("metric_kind") or ""), str(r.get("scale") or
                                                               "difference"))
    mixture = r.get("plan_kind") == "mixture"
    f = units.factor
    vals = [float(fin[k]) * f for k in ("ci_lower", "ci_upper", "median_unbiased",
                                         "naive_estimate", "naive_ci_lower", "naive_ci_upper")
            if num.is_number(fin.get(k))]
    d = num.decimals_for(vals, 3)

    def eff(v: Any, open_end: str = "-") -> str:
        return num.signed(float(v) * f, d) if num.is_number(v) else open_end

    label = "always-valid" if mixture else "adjusted for the looks"
    headers = ["", label, "unadjusted (ignores the looks)"]
    rows = [["p-value", num.p_value(fin.get("p_value")), num.p_value(fin.get("naive_p_value"))],
            [_unit("estimate", units.column),
             eff(fin.get("median_unbiased")) + ("" if mixture else " (median-unbiased)")
             if num.is_number(fin.get("median_unbiased")) else "-",
             eff(fin.get("naive_estimate"))],
            [_unit("interval", units.column),
             f"{eff(fin.get('ci_lower'))} to {eff(fin.get('ci_upper'), 'open')}",
             f"{eff(fin.get('naive_ci_lower'))} to {eff(fin.get('naive_ci_upper'), 'open')}"]]
    return headers, rows


def plan_table_rows(plan: Any) -> tuple[list[str], list[list[str]]] | None:
    """A group-sequential plan's looks: fraction, users per arm (cumulative, when the plan
    has a metric), efficacy z, the p-value to stop, cumulative alpha, futility z. None for
    a mixture plan (it has no planned looks)."""
    if not hasattr(plan, "info_fractions"):
        return None
    ss = plan.sample_size() if plan.metric else None
    who = "exposure" if (plan.metric or {}).get("kind") == "rate" else "users"
    headers = ["look", "fraction"]
    if ss is not None:
        headers += [f"{who}, control", f"{who}, treatment"]
    headers += ["efficacy z", "p to stop", "cumulative alpha"]
    if plan.futility_z is not None:
        headers.append("futility z")
    rows = []
    for k in range(plan.looks):
        row = [str(k + 1), num.percent(plan.info_fractions[k], 1)]
        if ss is not None:
            row += [f"{int(ss.per_look_control[k]):,}", f"{int(ss.per_look_treatment[k]):,}"]
        a = float(plan.efficacy_z[k])
        row += [num.fixed(a, 3) if num.is_number(a) else "none",
                num.p_value(plan.p_threshold[k], exact=True),
                num.p_value(float(plan.cumulative_alpha[k]), exact=True)]
        if plan.futility_z is not None:
            row.append(num.fixed(float(plan.futility_z[k]), 3))
        rows.append(row)
    return headers, rows
