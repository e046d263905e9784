"""Monitoring under a mixture-SPRT plan: the looks so far to a decision.

The same metrics layer as the group-sequential monitor gives the estimate and its
standard error at each look; :func:`seqtest.mixture.always_valid_effect` gives the
always-valid p-value, the confidence sequence and the decision. The result is the
same :class:`seqtest.monitor.Analysis` as for a group-sequential plan, so the CLI
and the service treat both kinds alike. Per look, ``efficacy_z`` is the ``|z|``
that would reject at that look (the half-width of the confidence sequence over the
standard error) and ``rci_lower``/``rci_upper`` are the confidence sequence.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

import numpy as np
from scipy import special

from seqtest import metrics
from seqtest.inference import naive_ci
from seqtest.mixture import MixturePlan, always_valid_effect, half_width
from seqtest.monitor import Analysis, FinalInference, LookResult, plan_metric, srm_at_look

__all__ = ["analyze_mixture"]


def analyze_mixture(plan: MixturePlan, looks: Sequence[Mapping], *, metric: str | None,
                    allocation: float | None, final: bool = False,
                    srm_threshold: float = 0.001) -> Analysis:
    """Analyse looks under a :class:`~seqtest.mixture.MixturePlan` (see
    :func:`seqtest.monitor.analyze` for the arguments)."""
    _pm, kind, alloc = plan_metric(plan, metric, allocation)
    if len(looks) == 0:
        raise ValueError("looks: no looks given; post at least one look of totals")
    arms = metrics.validate_looks(kind, list(looks))
    eff = metrics.effect(kind, arms["control"], arms["treatment"], scale=plan.scale)
    res = always_valid_effect(eff, plan)
    est = np.atleast_1d(np.asarray(eff.estimate, float))
    se = np.atleast_1d(np.asarray(eff.se, float))
    z = np.atleast_1d(np.asarray(eff.z, float))
    info = np.atleast_1d(np.asarray(eff.information, float))
    n_c = np.atleast_1d(np.asarray(eff.n_control, float))
    n_t = np.atleast_1d(np.asarray(eff.n_treatment, float))
    k = est.size
    codes = np.atleast_1d(res.decision_code)
    decisions = [("continue", "stop_efficacy", "complete_not_significant")[c] for c in codes]
    if final and decisions[-1] == "continue":
        decisions[-1] = "complete_not_significant"
    warnings: list[str] = []
    stop = next((j for j, d in enumerate(decisions) if d != "continue"), None)
    last = k if stop is None else stop + 1
    if stop is not None and stop < k - 1:
        warnings.append(f"the experiment stopped at look {stop + 1} ({decisions[stop]}); "
                        f"looks {stop + 2}..{k} came after the stop and are not analysed")
    ci_lo = np.atleast_1d(res.ci_lower)
    ci_hi = np.atleast_1d(res.ci_upper)
    pv = np.atleast_1d(res.p_value)
    with np.errstate(invalid="ignore"):
        hw = np.atleast_1d(np.asarray(half_width(se, plan.tau2, plan.alpha, plan.sides), float))
    records = []
    for j in range(last):
        srm_p = srm_at_look(kind, n_c[j], n_t[j], alloc, srm_threshold, j + 1, warnings)
        frac = (max(n_c[j], n_t[j]) / plan.max_n_per_arm) if plan.max_n_per_arm else math.nan
        bound = float(hw[j] / se[j]) if math.isfinite(se[j]) else math.inf
        unadj = (float(2 * special.ndtr(-abs(z[j]))) if plan.sides == 2
                 else float(special.ndtr(-z[j])))
        records.append(LookResult(
            look=j + 1, n_control=float(n_c[j]), n_treatment=float(n_t[j]),
            control_value=float(np.atleast_1d(eff.control_value)[j]),
            treatment_value=float(np.atleast_1d(eff.treatment_value)[j]),
            estimate=float(est[j]), se=float(se[j]), z=float(z[j]),
            information=float(info[j]), information_fraction=float(frac),
            efficacy_z=bound, futility_z=None, nominal_p=float(plan.alpha),
            unadjusted_p=unadj, rci_lower=float(ci_lo[j]), rci_upper=float(ci_hi[j]),
            decision=decisions[j], srm_p_value=srm_p, always_valid_p=float(pv[j]),
        ))
    decision = decisions[last - 1]
    direction = None
    if decision == "stop_efficacy":
        direction = "treatment_better" if est[last - 1] > 0 else "control_better"
    fin = None
    if decision != "continue":
        j = last - 1
        n_lo, n_hi = naive_ci(float(est[j]), float(se[j]), plan.alpha, plan.sides)
        naive_p = records[j].unadjusted_p
        fin = FinalInference(p_value=float(pv[j]), ci_lower=float(ci_lo[j]),
                             ci_upper=float(ci_hi[j]), median_unbiased=None,
                             naive_estimate=float(est[j]), naive_ci_lower=n_lo,
                             naive_ci_upper=n_hi, naive_p_value=naive_p)
    return Analysis(decision=decision, direction=direction,
                    stopped_at=None if decision == "continue" else last, looks=records,
                    final=fin, projection=None, warnings=warnings, metric=kind,
                    scale=plan.scale, plan_kind="mixture")

