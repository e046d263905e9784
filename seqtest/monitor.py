"""Monitoring: from the looks observed so far to a decision with adjusted inference.

At every look the boundaries are recomputed by error spending on the information
fractions actually observed (Lan and DeMets 1983), so unplanned, skipped or moved
looks keep the type I error:

- information fraction of look ``k``: ``t_k = n_k / n_max`` by default, where
  ``n_k`` is the total sample (exposure, for rates) over both arms and ``n_max``
  the plan's maximum; or ``t_k = I_k / I_max`` with the statistical information
  ``I_k = 1 / se_k^2`` (``fraction="information"``). Counting users is the usual
  choice when the variance is re-estimated at every look, because the fraction then
  does not move with noise in the variance estimate (common practice);
- efficacy boundary: the spending function's cumulative alpha at ``min(t_k, 1)``;
  the look that reaches the maximum (``t_k >= 1``) or is declared final spends all
  that is left; correlations use the uncapped fractions, so over-running
  information is handled; a classical (Pocock, O'Brien-Fleming, ...) plan is
  monitored through the cumulative alpha of its design, interpolated monotonely;
- futility boundary: beta spending under the design alternative on the same
  fractions; non-binding plans compute efficacy ignoring it;
- the z statistic, estimate and standard error come from :mod:`seqtest.metrics`
  (unpooled variances); on the relative scale the test runs on the log ratio
  ``log(1 + r)`` with standard error ``se / (1 + r)`` and intervals are mapped back
  with ``exp(.) - 1``.

Decisions: ``continue``, ``stop_efficacy`` (with the direction), ``stop_futility``,
or ``complete_not_significant`` at the final look.

References
----------
.. [1] Lan, K. K. G. and DeMets, D. L. (1983). Biometrika 70, 659-663.
.. [2] Jennison, C. and Turnbull, B. W. (2000). Group Sequential Methods with
       Applications to Clinical Trials, chapters 7-10.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import asdict, dataclass, field, fields, is_dataclass, replace
from typing import Any

import numpy as np
from scipy import special

from seqtest import inference, metrics, spending
from seqtest.boundaries import spending_bounds
from seqtest.design import Plan, _binding_bounds, _futility_bounds
from seqtest.spending import SpendingFunction

__all__ = [
    "Analysis",
    "LookResult",
    "analyze",
    "bounds_at",
    "decide",
    "DECISIONS",
    "CAUTION",
]

DECISIONS = ("continue", "stop_efficacy", "stop_futility", "complete_not_significant")
CAUTION = ("seqtest supports, and does not replace, a qualified statistician and the "
           "rules that govern the study (for a medical trial: its protocol and its data "
           "monitoring committee).")
_TERMINAL = ("stop_efficacy", "complete_not_significant")
# |z| beyond which stage-wise inference is not attempted (the grid reaches |z| = 40)
_Z_INFERENCE_MAX = 30.0


# -- boundaries on observed fractions ------------------------------------------------

def _efficacy_spending(plan: Plan) -> SpendingFunction:
    """The spending function that monitoring uses for the plan's efficacy boundary."""
    if isinstance(plan.efficacy, SpendingFunction):
        return plan.efficacy
    # classical shape: spend what the design spends, interpolated (PCHIP) between looks
    share = np.asarray(plan.cumulative_alpha, float) / plan.alpha
    share = np.clip(np.maximum.accumulate(share), 0.0, 1.0)
    share[-1] = 1.0
    return spending.from_table(plan.info_fractions, share)


def bounds_at(plan: Plan, fractions: Sequence[float], *, final: bool = False
              ) -> tuple[np.ndarray, np.ndarray | None]:
    """Efficacy and futility boundaries for looks at the given information fractions.

    Parameters
    ----------
    plan : Plan
        The design.
    fractions : array_like
        Observed information fractions of the looks so far, strictly increasing;
        values above 1 mean the information ran over the maximum.
    final : bool
        The last look is the final one: it spends all the alpha left. A look with
        fraction >= 1 is always final.

    Returns
    -------
    efficacy_z, futility_z : ndarray, ndarray or None
        Boundaries per look (futility ``None`` for plans without one). At the final
        look the futility boundary equals the efficacy boundary.
    """
    t = np.asarray(fractions, dtype=float).ravel()
    if t.size == 0 or np.any(~np.isfinite(t)) or t[0] <= 0 or np.any(np.diff(t) <= 0):
        raise ValueError(f"fractions: got {t.tolist()}; allowed is strictly increasing "
                         "positive information fractions")
    if np.any(t[:-1] >= 1.0):
        k = int(np.argmax(t >= 1.0)) + 1
        raise ValueError(f"fractions: look {k} already reached the maximum information "
                         f"(fraction {t[k - 1]:.3f}), so it was the final look")
    is_final = bool(final or t[-1] >= 1.0)
    f = _efficacy_spending(plan)
    a_tail = plan.alpha / plan.sides
    cum = np.asarray(f(np.minimum(t, 1.0), a_tail), float).reshape(t.shape)
    if is_final:
        cum[-1] = a_tail
    fut = plan.futility
    if fut is None:
        return spending_bounds(t, cum, sides=plan.sides, r=plan.r), None
    beta = 1.0 - plan.power
    if plan.binding:
        return _binding_bounds(t, plan.alpha, plan.sides, f, fut, beta, plan.drift, plan.r,
                               final=is_final, cum_alpha=cum)
    eff = spending_bounds(t, cum, sides=plan.sides, r=plan.r)
    futz = _futility_bounds(t, plan.drift, eff, plan.sides, beta, fut, plan.r, final=is_final)
    return eff, futz


def interval_bounds(plan: Plan, fractions: Sequence[float], *, final: bool = False
                    ) -> np.ndarray:
    """Boundaries of the repeated confidence intervals at looks with these fractions.

    A repeated confidence interval ``estimate_k +- c_k se_k`` covers the effect at
    every look at once with probability ``1 - alpha``, whatever the stopping rule,
    only when ``c_k`` are the boundaries of a test that does not rely on that rule
    (Jennison and Turnbull 1989; 2000, chapter 9). The binding efficacy boundaries
    of a plan with binding futility rely on paths stopping at the futility
    boundary, which an interval centred on an arbitrary effect cannot assume; so
    the intervals use the efficacy boundaries of the same spending without
    futility, on the same observed fractions (error spending as in
    :func:`bounds_at`). For other plans they are the efficacy boundaries.
    """
    if plan.binding and plan.futility is not None:
        plan = replace(plan, futility=None, binding=False)
    return bounds_at(plan, fractions, final=final)[0]


def decide(z: np.ndarray, efficacy_z: np.ndarray, futility_z: np.ndarray | None,
           sides: int, *, final_last: bool = True, obey_futility: bool = True
           ) -> tuple[np.ndarray, np.ndarray]:
    """Vectorised stopping rule over many paths of z statistics.

    Parameters
    ----------
    z : ndarray, shape (..., K)
        z statistic of each path at each look.
    efficacy_z, futility_z : ndarray, shape (K,) or (..., K)
        Boundaries per look (broadcast against ``z``).
    sides : {1, 2}
    final_last : bool
        The last look is final: a path that reaches it stops there.
    obey_futility : bool
        Stop paths that cross the futility boundary (``False`` shows what happens
        when a non-binding futility boundary is ignored).

    Returns
    -------
    stop_look : ndarray of int
        0-based look at which each path stops (``K - 1`` for those that reach the
        end; ``-1`` for paths still running when ``final_last`` is false).
    outcome : ndarray of int8
        Index into :data:`DECISIONS` (0 continue, 1 efficacy, 2 futility,
        3 complete without significance). The sign of ``z`` at ``stop_look`` gives
        the direction of an efficacy stop.
    """
    z = np.asarray(z, float)
    a = np.broadcast_to(np.asarray(efficacy_z, float), z.shape)
    eff = np.abs(z) >= a if sides == 2 else z >= a
    if futility_z is not None and obey_futility:
        b = np.broadcast_to(np.asarray(futility_z, float), z.shape)
        fut = (np.abs(z) < b) if sides == 2 else (z < b)
        fut &= ~eff
    else:
        fut = np.zeros(z.shape, bool)
    if final_last:
        # at the final look the boundaries meet: not crossing efficacy there is
        # completion without significance, as in analyze()
        fut[..., -1] = False
    stop = eff | fut
    if final_last:
        stop[..., -1] = True
    any_stop = stop.any(axis=-1)
    first = np.where(any_stop, np.argmax(stop, axis=-1), -1)
    idx = np.maximum(first, 0)[..., None]
    e_at = np.take_along_axis(eff, idx, axis=-1)[..., 0]
    f_at = np.take_along_axis(fut, idx, axis=-1)[..., 0]
    out = np.where(~any_stop, 0, np.where(e_at, 1, np.where(f_at, 2, 3))).astype(np.int8)
    return first, out


# -- results ---------------------------------------------------------------------------

@dataclass(frozen=True)
class LookResult:
    """Everything computed at one look (see :func:`analyze`)."""

    look: int
    n_control: float
    n_treatment: float
    control_value: float
    treatment_value: float
    estimate: float
    se: float
    z: float
    information: float
    information_fraction: float
    efficacy_z: float
    futility_z: float | None
    nominal_p: float
    unadjusted_p: float
    rci_lower: float
    rci_upper: float
    decision: str
    srm_p_value: float | None
    always_valid_p: float | None = None


@dataclass(frozen=True)
class FinalInference:
    """Inference at stopping, adjusted for the sequential design.

    Attributes
    ----------
    p_value, ci_lower, ci_upper, median_unbiased : float
        Stage-wise ordering p-value and interval, and the median-unbiased estimate
        (for a mixture plan: the always-valid p-value and confidence sequence; no
        median-unbiased estimate).
    naive_estimate, naive_ci_lower, naive_ci_upper, naive_p_value : float
        The same from a fixed-sample analysis of the last look, which ignores the
        looks (biased away from zero after an early stop).
    """

    p_value: float
    ci_lower: float
    ci_upper: float
    median_unbiased: float | None
    naive_estimate: float
    naive_ci_lower: float
    naive_ci_upper: float
    naive_p_value: float


@dataclass(frozen=True)
class Projection:
    """What lies ahead from the current look.

    Attributes
    ----------
    conditional_power_planned, conditional_power_current : float
        Chance of reaching significance at a later planned look if the true effect
        is the planned one, or the current estimate. The planned effect is taken in
        the direction the plan tests: for a one-sided plan the positive one; for a
        two-sided plan, which tests both, the direction of the current estimate
        (positive when the estimate is zero, where both give the same chance).
    next_look_fraction : float or None
        Information fraction of the next planned look.
    more_units_to_next_look, more_units_to_end : float or None
        Users (exposure, for rates) over both arms still needed.
    days_to_next_look, days_to_end : float or None
        The same in days, given the daily traffic.
    """

    conditional_power_planned: float
    conditional_power_current: float
    next_look_fraction: float | None
    more_units_to_next_look: float | None
    more_units_to_end: float | None
    days_to_next_look: float | None
    days_to_end: float | None


@dataclass(frozen=True)
class Analysis:
    """The analysis of an experiment's looks so far.

    Attributes
    ----------
    decision : str
        One of :data:`DECISIONS` (at the last analysed look).
    direction : str or None
        ``"treatment_better"`` or ``"control_better"`` for an efficacy stop (the sign
        of the effect: whether larger is better is the user's to say).
    stopped_at : int or None
        1-based look of a stop.
    looks : list of LookResult
    final : FinalInference or None
        Present once the experiment has stopped or completed.
    projection : Projection or None
        Present while the experiment continues.
    warnings : list of str
    """

    decision: str
    direction: str | None
    stopped_at: int | None
    looks: list[LookResult]
    final: FinalInference | None
    projection: Projection | None
    warnings: list[str] = field(default_factory=list)
    metric: str = ""
    scale: str = "difference"
    plan_kind: str = "group_sequential"
    caution: str = CAUTION

    def to_dict(self) -> dict:
        """Plain JSON types (``inf`` and ``nan`` become ``None``)."""
        return _clean(_shallow(self))

    def table(self) -> Any:
        """The look-by-look table as a pandas DataFrame."""
        import pandas as pd
        return pd.DataFrame([asdict(x) for x in self.looks]).set_index("look")


def _shallow(x: Any) -> Any:
    """``dataclasses.asdict`` without its deep copies (the values here are plain)."""
    if is_dataclass(x) and not isinstance(x, type):
        return {f.name: _shallow(getattr(x, f.name)) for f in fields(x)}
    if isinstance(x, list):
        return [_shallow(v) for v in x]
    return x


def _clean(x: Any) -> Any:
    if isinstance(x, dict):
        return {k: _clean(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [_clean(v) for v in x]
    if isinstance(x, (np.floating, float)):
        v = float(x)
        return v if math.isfinite(v) else None
    if isinstance(x, np.integer):
        return int(x)
    if isinstance(x, np.bool_):
        return bool(x)
    return x


# -- the analysis ------------------------------------------------------------------------

def _looks_from_frame(frame: Any, kind: str | None) -> list[dict]:
    from seqtest.lookfile import looks_from_frame
    return looks_from_frame(frame, kind)


def analyze(
    plan: Any,
    looks: Sequence[Mapping] | Any,
    *,
    metric: str | None = None,
    allocation: float | None = None,
    final: bool = False,
    max_n: float | None = None,
    fraction: str = "sample",
    daily_traffic: float | None = None,
    srm_threshold: float = 0.001,
) -> Analysis:
    """Analyse the looks of an experiment under its plan.

    Parameters
    ----------
    plan : Plan, MixturePlan or dict
        The plan (a plan document is read with :func:`seqtest.plan_from_dict`).
    looks : list of dict or DataFrame
        Cumulative per-arm totals per look, in order:
        ``{"control": {"n": ..., "successes": ...}, "treatment": {...}}``
        (fields per metric kind: see :data:`seqtest.metrics.METRIC_FIELDS`), or a
        DataFrame in the CSV layout of :mod:`seqtest.lookfile`.
    metric : {"binary", "continuous", "rate"}, optional
        Defaults to the plan's metric kind.
    allocation : float, optional
        Planned treatment:control ratio, for the sample-ratio check (default: the
        plan's, else 1).
    final : bool
        Declare the last look final: it spends all remaining alpha.
    max_n : float, optional
        Maximum total sample over both arms (exposure for rates). Defaults to the
        plan's sample size; required when the plan has no metric.
    fraction : {"sample", "information"}
        How information fractions are measured (see the module docstring).
    daily_traffic : float, optional
        Users (or exposure) per day over both arms, for the projection in days.
    srm_threshold : float
        p-value below which a sample-ratio mismatch is reported.

    Returns
    -------
    Analysis

    Raises
    ------
    seqtest.metrics.LookDataError
        Totals that are invalid or go backwards (names the look, arm and field).
    ValueError
        Other bad arguments.
    """
    from seqtest.plans import plan_from_dict
    if isinstance(plan, Mapping):
        plan = plan_from_dict(dict(plan))
    if not isinstance(looks, (list, tuple)):
        kind_hint = metric or (getattr(plan, "metric", None) or {}).get("kind")
        looks = _looks_from_frame(looks, kind_hint)
    from seqtest.mixture import MixturePlan
    if isinstance(plan, MixturePlan):
        from seqtest.mixture_monitor import analyze_mixture
        return analyze_mixture(plan, list(looks), metric=metric, allocation=allocation,
                               final=final, srm_threshold=srm_threshold)
    if not isinstance(plan, Plan):
        raise ValueError(f"plan: got {type(plan).__name__}; allowed is a Plan, a "
                         "MixturePlan or a plan document")
    pm, kind, alloc = plan_metric(plan, metric, allocation)
    scale = pm.get("scale", "difference")
    if fraction not in ("sample", "information"):
        raise ValueError(f"fraction: got {fraction!r}; allowed are 'sample' and "
                         "'information'")
    if len(looks) == 0:
        raise ValueError("looks: no looks given; post at least one look of totals")

    arms = metrics.validate_looks(kind, list(looks))
    eff = metrics.effect(kind, arms["control"], arms["treatment"], scale=scale)
    est = np.atleast_1d(np.asarray(eff.estimate, float))
    se = np.atleast_1d(np.asarray(eff.se, float))
    z = np.atleast_1d(np.asarray(eff.z, float))
    info = np.atleast_1d(np.asarray(eff.information, float))
    n_c = np.atleast_1d(np.asarray(eff.n_control, float))
    n_t = np.atleast_1d(np.asarray(eff.n_treatment, float))
    # On the relative scale the test runs on the log ratio log(1 + r), whose
    # delta-method standard error se / (1 + r) does not shrink with the estimate
    # as the ratio's does (which makes z on the ratio itself lopsided at small
    # counts); estimates and intervals are reported back on the relative scale.
    relative = scale == "relative"
    if relative:
        with np.errstate(divide="ignore", invalid="ignore"):
            w_est = np.log1p(est)
            w_se = se / (1.0 + est)
            ok = np.isfinite(w_se) & (w_se > 0)
            w_z = np.where(ok, w_est / w_se, 0.0)
            info = np.where(ok, 1.0 / np.square(np.where(ok, w_se, 1.0)), 0.0)
    else:
        w_est, w_se, w_z = est, se, z
    k = est.size
    warnings: list[str] = []
    degenerate = np.atleast_1d(np.asarray(eff.degenerate, bool))
    for j in np.flatnonzero(degenerate):
        warnings.append(f"look {j + 1}: the variance estimate is zero (no variation in "
                        "either arm yet), so z is set to 0 and this look cannot stop "
                        "for efficacy")

    # information fractions
    if fraction == "sample":
        total_max = _max_total(plan, max_n)
        t = (n_c + n_t) / total_max
    else:
        if not pm or "mde" not in pm:
            raise ValueError("fraction: 'information' needs a plan with a metric (for the "
                             "maximum information)")
        from seqtest.sizing import delta_and_unit
        bad = np.flatnonzero(~(info > 0))
        if bad.size:
            raise metrics.LookDataError(
                "the variance estimate is zero, so the look has no statistical "
                "information; measure fractions by sample size (fraction='sample') or "
                "wait for variation in the data", look=int(bad[0]) + 1)
        i_max = plan.max_information(delta_and_unit(pm)[0])
        t = info / i_max
        total_max = _max_total(plan, max_n) if (pm or max_n) else None
    for j in range(1, k):
        if t[j] <= t[j - 1]:
            raise metrics.LookDataError(
                f"the information fraction did not grow ({t[j - 1]:.4f} at look {j}, "
                f"{t[j]:.4f} now); a look needs new data", look=j + 1)
    reached = np.flatnonzero(t >= 1.0)
    last = k
    if reached.size and reached[0] < k - 1:
        last = int(reached[0]) + 1
        warnings.append(f"look {last} reached the maximum information and was the final "
                        f"look; looks {last + 1}..{k} are not analysed")

    # Boundaries of all looks in one pass: a look's boundary depends only on the
    # fractions up to it, so these are the boundaries known at each look. When the
    # last look is not final, the remaining planned looks are appended (for the
    # projection); that changes nothing before them.
    last_final = bool(final or t[last - 1] >= 1.0)
    future = np.empty(0) if last_final else _future_fractions(plan, float(t[last - 1]))
    a_all, b_all = bounds_at(plan, np.concatenate([t[:last], future]), final=True)
    # repeated confidence intervals: boundaries that do not assume futility stops
    c_all = a_all if not plan.binding else interval_bounds(
        plan, np.concatenate([t[:last], future]).tolist(), final=True)

    # decide look by look
    records: list[LookResult] = []
    decision, direction, stopped = "continue", None, None
    for j in range(last):
        is_final = (j == last - 1) and last_final
        a_j = float(a_all[j])
        b_j = None if b_all is None else float(b_all[j])
        dec = _decide_one(float(w_z[j]), a_j, b_j, plan.sides, is_final, degenerate[j])
        srm_p = srm_at_look(kind, n_c[j], n_t[j], alloc, srm_threshold, j + 1, warnings)
        rci_lo, rci_hi = inference.repeated_ci(w_est[j], w_se[j], float(c_all[j]),
                                               plan.sides)
        if relative:
            rci_lo, rci_hi = np.expm1(rci_lo), np.expm1(rci_hi)
        records.append(LookResult(
            look=j + 1, n_control=float(n_c[j]), n_treatment=float(n_t[j]),
            control_value=float(np.atleast_1d(eff.control_value)[j]),
            treatment_value=float(np.atleast_1d(eff.treatment_value)[j]),
            estimate=float(est[j]), se=float(se[j]), z=float(w_z[j]),
            information=float(info[j]), information_fraction=float(t[j]),
            efficacy_z=a_j, futility_z=b_j,
            nominal_p=float(plan.sides * special.ndtr(-a_j)),
            unadjusted_p=float(plan.sides * special.ndtr(-abs(w_z[j]))) if plan.sides == 2
            else float(special.ndtr(-w_z[j])),
            rci_lower=float(rci_lo), rci_upper=float(rci_hi), decision=dec,
            srm_p_value=srm_p,
        ))
        if dec == "stop_futility" and not plan.binding and j < last - 1:
            warnings.append(f"look {j + 1} crossed the non-binding futility boundary and "
                            "the experiment went on; that keeps the type I error")
        if dec in _TERMINAL or (dec == "stop_futility" and (plan.binding or j == last - 1)):
            decision, stopped = dec, j + 1
            if dec == "stop_efficacy":
                direction = "treatment_better" if w_z[j] > 0 else "control_better"
            if j < last - 1:
                warnings.append(f"the experiment stopped at look {j + 1} ({dec}); looks "
                                f"{j + 2}..{k} came after the stop and are not analysed")
            break
    else:
        decision = records[-1].decision

    fin = proj = None
    if stopped is not None and degenerate[stopped - 1]:
        warnings.append(f"look {stopped}: no variation in either arm, so no adjusted "
                        "p-value or interval can be computed")
    elif stopped is not None and abs(w_z[stopped - 1]) > _Z_INFERENCE_MAX:
        warnings.append(f"look {stopped}: |z| = {abs(w_z[stopped - 1]):.1f} is beyond "
                        f"{_Z_INFERENCE_MAX:g}, where the unadjusted p-value is below 1e-190 "
                        "and the numerical integration for the adjusted interval does not "
                        "reach; check the totals, and use the unadjusted figures with care")
    elif stopped is not None:
        w_info = 1.0 / np.square(w_se[:stopped])
        fin = _final_inference(plan, w_z[:stopped], w_info, t[:stopped],
                               a_all[:stopped], w_est[stopped - 1], w_se[stopped - 1],
                               None if b_all is None else b_all[:stopped])
        if relative:
            fin = FinalInference(
                p_value=fin.p_value, ci_lower=float(np.expm1(fin.ci_lower)),
                ci_upper=float(np.expm1(fin.ci_upper)),
                median_unbiased=float(np.expm1(fin.median_unbiased)),
                naive_estimate=float(est[stopped - 1]),
                naive_ci_lower=float(np.expm1(fin.naive_ci_lower)),
                naive_ci_upper=float(np.expm1(fin.naive_ci_upper)),
                naive_p_value=fin.naive_p_value)
    if decision == "continue":
        proj = _projection(plan, float(w_z[last - 1]), float(t[last - 1]), future,
                           a_all[last:], total_max, daily_traffic)
    return Analysis(decision=decision, direction=direction, stopped_at=stopped,
                    looks=records, final=fin, projection=proj, warnings=warnings,
                    metric=kind, scale=scale)


def plan_metric(plan: Any, metric: str | None, allocation: float | None
                ) -> tuple[dict, str, float]:
    """The plan's metric description, the metric kind to analyse and the allocation,
    reconciling the arguments with the plan."""
    pm = getattr(plan, "metric", None) or {}
    kind = metric or pm.get("kind")
    if kind is None:
        raise ValueError("metric: the plan has no metric; give metric='binary', "
                         "'continuous' or 'rate'")
    if pm and metric and metric != pm.get("kind"):
        raise ValueError(f"metric: got {metric!r} but the plan is for {pm.get('kind')!r}")
    alloc = float(allocation if allocation is not None else pm.get("allocation", 1.0))
    return pm, kind, alloc


def srm_at_look(kind: str, n_c: float, n_t: float, allocation: float, threshold: float,
                look: int, warnings: list[str]) -> float | None:
    """Sample-ratio check of one look's arm sizes; a mismatch adds a warning.

    Rate metrics are skipped: exposure is not a count of units."""
    if kind == "rate":
        return None
    try:
        srm = metrics.srm_check(int(round(n_c)), int(round(n_t)), allocation, threshold)
    except (ValueError, ArithmeticError):
        return None
    if srm.mismatch:
        warnings.append(f"look {look}: {srm.message}")
    return srm.p_value


def _decide_one(z: float, a: float, b: float | None, sides: int, is_final: bool,
                degenerate: bool) -> str:
    crossed = (abs(z) >= a) if sides == 2 else (z >= a)
    if crossed and not degenerate:
        return "stop_efficacy"
    if is_final:
        return "complete_not_significant"
    if b is not None:
        if (abs(z) < b) if sides == 2 else (z < b):
            return "stop_futility"
    return "continue"


def _max_total(plan: Plan, max_n: float | None) -> float:
    if max_n is not None:
        v = float(max_n)
        if not math.isfinite(v) or v <= 0:
            raise ValueError(f"max_n: got {max_n!r}; allowed is a positive total sample")
        return v
    if plan.metric is None:
        raise ValueError("max_n: the plan has no metric, so give the maximum total sample "
                         "over both arms")
    from seqtest.sizing import max_sizes
    n_c, n_t = max_sizes(plan, **plan.metric)
    return float(n_c + n_t)


def _final_inference(plan: Plan, z: np.ndarray, info: np.ndarray, t: np.ndarray,
                     a: np.ndarray, est: float, se: float,
                     b: np.ndarray | None = None) -> FinalInference:
    # Information for inference: proportional to the fractions used for the
    # boundaries, anchored at the last look's observed information, so the
    # correlation structure matches the one the boundaries were computed on.
    ii = t * (info[-1] / t[-1])
    lo = -a if plan.sides == 2 else np.full(a.size, -np.inf)
    inner = None
    if plan.binding and b is not None:
        # a binding futility boundary is part of the sample space: paths that stop
        # for futility never reach later looks (non-binding boundaries are ignored,
        # which keeps the p-value valid whether or not they were obeyed)
        if plan.sides == 1:
            lo = np.minimum(b, a)
        else:
            inner = np.clip(b, 0.0, a)
    sw = inference.stagewise(z, ii, a, lo, alpha=plan.alpha, sides=plan.sides, r=plan.r,
                             inner=inner)
    n_lo, n_hi = inference.naive_ci(est, se, plan.alpha, plan.sides)
    zt = float(z[-1])
    naive_p = float(2 * special.ndtr(-abs(zt))) if plan.sides == 2 else float(special.ndtr(-zt))
    return FinalInference(p_value=sw.p_value, ci_lower=sw.ci_lower, ci_upper=sw.ci_upper,
                          median_unbiased=sw.median_unbiased, naive_estimate=float(est),
                          naive_ci_lower=n_lo, naive_ci_upper=n_hi, naive_p_value=naive_p)


def _future_fractions(plan: Plan, t_now: float) -> np.ndarray:
    """Planned looks still ahead; a planned look within 1% of the maximum information
    of the current one is taken to be the current one."""
    planned = plan.info_fractions
    future = planned[planned > t_now + 0.01]
    if future.size == 0 or future[-1] < 1.0:
        future = np.append(future, 1.0)
    return future


def _projection(plan: Plan, z_now: float, t_now: float, future: np.ndarray,
                fa: np.ndarray, total_max: float | None, daily: float | None) -> Projection:
    # the planned effect in the direction the plan tests (see Projection)
    planned = -plan.drift if (plan.sides == 2 and z_now < 0) else plan.drift
    cp_plan = inference.conditional_power(z_now, t_now, future, fa, planned,
                                          sides=plan.sides, r=plan.r)
    drift_now = z_now / math.sqrt(t_now)
    cp_now = inference.conditional_power(z_now, t_now, future, fa, drift_now,
                                         sides=plan.sides, r=plan.r)
    nxt = float(future[0])
    more_next = more_end = d_next = d_end = None
    if total_max is not None:
        more_next = (nxt - t_now) * total_max
        more_end = max(0.0, (1.0 - t_now) * total_max)
        if daily is not None:
            if not (math.isfinite(float(daily)) and float(daily) > 0):
                raise ValueError(f"daily_traffic: got {daily!r}; allowed is a positive "
                                 "number of users per day")
            d_next, d_end = more_next / float(daily), more_end / float(daily)
    return Projection(cp_plan, cp_now, nxt, more_next, more_end, d_next, d_end)
