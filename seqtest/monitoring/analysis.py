"""Monitoring: from the looks observed so far to a decision with adjusted inference.

:func:`analyze` is the one analysis path for every kind of plan: the per-arm totals of
each look go through :mod:`seqtest.monitoring.metrics` (validation, estimate, standard
error and z on the test scale), the plan's rule (:mod:`seqtest.monitoring.rules`) gives
the boundaries, intervals, decisions and, at a stop, adjusted inference, and the result
is an :class:`Analysis`.

Decisions (:class:`~seqtest.core.vocabulary.Decision`): ``continue``,
``stop_efficacy`` (with the direction), ``stop_futility``, or
``complete_not_significant`` at the final look. A plan whose metric has a margin tests
at it (the z, the unadjusted and the stage-wise p-values are at the margin), and one
where lower is better decides on ``-z`` (see :mod:`seqtest.monitoring.rules`).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, overload

import numpy as np
from scipy import special

from seqtest.core import checks, jsonable
from seqtest.core.scales import null_on_test_scale
from seqtest.core.vocabulary import CAUTION, METRIC_KINDS, Decision, decision_from_code
from seqtest.monitoring import metrics
from seqtest.monitoring.experiment import ExperimentAnalysis, analyze_experiment
from seqtest.monitoring.records import LookResult
from seqtest.monitoring.rules import (
    FRACTION_BASES,
    FinalInference,
    LookTable,
    Projection,
    orientation,
    rule_for,
)
from seqtest.planning.design import Plan
from seqtest.planning.experiment import ExperimentPlan
from seqtest.planning.mixture import MixturePlan

__all__ = ["Analysis", "FinalInference", "LookResult", "Projection", "analyze"]


@dataclass(frozen=True)
class Analysis:
    """The analysis of an experiment's looks so far.

    Attributes
    ----------
    decision : Decision
        At the last analysed look.
    direction : str or None
        For an efficacy stop: ``"treatment_better"`` (on the better side of the null:
        higher, or lower when the metric says lower is better; by more than the margin
        of a superiority test), ``"treatment_non_inferior"`` (a non-inferiority test:
        not worse than the control by more than the margin), or ``"control_better"``
        (the other side, two-sided plans).
    stopped_at : int or None
        1-based look of a stop.
    looks : list of LookResult
    final : FinalInference or None
        Present once the experiment has stopped or completed.
    projection : Projection or None
        Present while the experiment continues.
    warnings : list of str
    metric_kind, scale, test_scale, plan_kind : str
    sides : int
        The plan's sides (1 or 2).
    alpha : float or None
        The plan's type I error (the intervals have level ``1 - alpha``).
    binding : bool or None
        Whether the plan's futility boundary is binding (None: no futility boundary).
    srm_threshold : float
        p-value below which a look's sample-ratio check is a mismatch.
    margin : float
        The null value the looks were tested at (0 without a margin), on the effect's
        scale.
    hypothesis : str
        ``"superiority"`` or ``"non_inferiority"``.
    better : str
        ``"higher"`` or ``"lower"``: which way of the metric is good.
    """

    decision: Decision
    direction: str | None
    stopped_at: int | None
    looks: list[LookResult]
    final: FinalInference | None
    projection: Projection | None
    warnings: list[str] = field(default_factory=list)
    metric_kind: str = ""
    scale: str = "difference"
    test_scale: str = "difference"
    plan_kind: str = "group_sequential"
    caution: str = CAUTION
    sides: int = 2
    alpha: float | None = None
    binding: bool | None = None
    srm_threshold: float = 0.001
    margin: float = 0.0
    hypothesis: str = "superiority"
    better: str = "higher"

    @property
    def metric(self) -> str:
        """The metric kind (name of the first release)."""
        return self.metric_kind

    @property
    def sample_ratio_mismatch(self) -> list[int]:
        """Looks (1-based) whose arm sizes fail the sample-ratio check."""
        return [x.look for x in self.looks
                if x.srm_p_value is not None and x.srm_p_value < self.srm_threshold]

    def to_dict(self) -> dict:
        """Plain JSON types (``inf`` and ``nan`` become ``None``), with the looks that
        fail the sample-ratio check (``sample_ratio_mismatch``) and the plain-language
        summary (``summary``: the text of :func:`seqtest.reporting.summarize`)."""
        from seqtest.reporting.summary import summarize
        out = jsonable.plain(self)
        out["sample_ratio_mismatch"] = self.sample_ratio_mismatch
        out["summary"] = summarize(out).text
        return out

    def summary(self, *, noun: str | None = None) -> str:
        """The decision in plain language, with the warnings and the caution (see
        :func:`seqtest.reporting.summarize`; ``noun`` names the metric, e.g.
        ``"the conversion rate"``)."""
        from seqtest.reporting.summary import summarize
        return summarize(self, noun=noun).full_text()

    def _repr_html_(self) -> str:
        """The notebook display: the summary, the looks table and the caution."""
        from seqtest.reporting.html import analysis_html
        return analysis_html(self)

    def table(self) -> Any:
        """The look-by-look table as a pandas DataFrame."""
        import pandas as pd
        return pd.DataFrame([jsonable.plain(x) for x in self.looks]).set_index("look")


# -- the analysis ------------------------------------------------------------------------

@overload
def analyze(plan: ExperimentPlan, looks: Sequence[Mapping] | Any, *, metric: str | None = ...,
            allocation: float | None = ..., final: bool = ..., max_n: float | None = ...,
            fraction_basis: str = ..., daily_traffic: float | None = ...,
            srm_threshold: float = ..., fraction: str | None = ...) -> ExperimentAnalysis:
    ...


@overload
def analyze(plan: Plan | MixturePlan, looks: Sequence[Mapping] | Any, *,
            metric: str | None = ..., allocation: float | None = ..., final: bool = ...,
            max_n: float | None = ..., fraction_basis: str = ...,
            daily_traffic: float | None = ..., srm_threshold: float = ...,
            fraction: str | None = ...) -> Analysis:
    ...


@overload
def analyze(plan: Any, looks: Sequence[Mapping] | Any, *, metric: str | None = ...,
            allocation: float | None = ..., final: bool = ..., max_n: float | None = ...,
            fraction_basis: str = ..., daily_traffic: float | None = ...,
            srm_threshold: float = ..., fraction: str | None = ...
            ) -> Analysis | ExperimentAnalysis:
    ...


def analyze(
    plan: Any,
    looks: Sequence[Mapping] | Any,
    *,
    metric: str | None = None,
    allocation: float | None = None,
    final: bool = False,
    max_n: float | None = None,
    fraction_basis: str = "sample",
    daily_traffic: float | None = None,
    srm_threshold: float = 0.001,
    fraction: str | None = None,
) -> Analysis | ExperimentAnalysis:
    """Analyse the looks of an experiment under its plan.

    Parameters
    ----------
    plan : Plan, MixturePlan, ExperimentPlan or dict
        The plan (a plan document is read with :func:`seqtest.plan_from_dict`). An
        :class:`~seqtest.planning.experiment.ExperimentPlan` (many arms, several
        metrics) is analysed by
        :func:`seqtest.monitoring.experiment.analyze_experiment` and gives an
        :class:`~seqtest.monitoring.experiment.ExperimentAnalysis` (its looks are
        ``{arm: totals}`` or ``{metric: {arm: totals}}``; only ``final`` and
        ``srm_threshold`` apply).
    looks : list of dict or DataFrame
        Cumulative per-arm totals per look, in order:
        ``{"control": {"n": ..., "successes": ...}, "treatment": {...}}``
        (fields per metric kind in :mod:`seqtest.monitoring.metrics`), or a DataFrame
        in the CSV layout of :mod:`seqtest.monitoring.lookfile`.
    metric : {"binary", "continuous", "rate"}, optional
        The metric kind of the totals (default: the plan's).
    allocation : float, optional
        Planned treatment:control ratio for the sample-ratio check (default: the
        plan's, else 1).
    final : bool
        Declare the last look final: it spends all remaining alpha.
    max_n : float, optional
        Maximum total sample over both arms (exposure for rates). Defaults to the
        plan's sample size; required when the plan has no metric.
    fraction_basis : {"sample", "information"}
        How information fractions are measured (see
        :class:`~seqtest.monitoring.rules.GroupSequentialRule`).
    daily_traffic : float, optional
        Users (or exposure) per day over both arms, for the projection in days.
    srm_threshold : float
        p-value below which a sample-ratio mismatch is reported.
    fraction : str, optional
        The first release's name of ``fraction_basis``.

    Returns
    -------
    Analysis (ExperimentAnalysis for an experiment plan)

    Raises
    ------
    seqtest.LookDataError
        Totals that are invalid or go backwards (names the look, arm and field).
    ValueError
        Other bad arguments.
    """
    from seqtest.planning.documents import plan_from_dict
    if isinstance(plan, Mapping):
        plan = plan_from_dict(dict(plan))
    if isinstance(plan, ExperimentPlan):
        given = {"metric": metric, "allocation": allocation, "max_n": max_n,
                 "daily_traffic": daily_traffic, "fraction": fraction}
        extra = [k for k, v in given.items() if v is not None]
        if fraction_basis != "sample":
            extra.append("fraction_basis")
        if extra:
            raise checks.fail(extra[0], given.get(extra[0], fraction_basis),
                              "left out for an experiment plan (its metrics, allocations "
                              "and sizes are the plan's; fractions are by sample)")
        return analyze_experiment(plan, looks, final=final, srm_threshold=srm_threshold)
    if fraction is not None:
        fraction_basis = fraction
    checks.choice("fraction_basis", fraction_basis, FRACTION_BASES)
    srm_threshold = checks.probability("srm_threshold", srm_threshold)
    if daily_traffic is not None:
        daily_traffic = checks.number("daily_traffic", daily_traffic, lo=0.0, lo_open=True,
                                      allowed="a positive number of users per day")
    if not isinstance(looks, (list, tuple)):
        from seqtest.monitoring.lookfile import looks_from_frame
        kind_hint = metric or (getattr(plan, "metric", None) or {}).get("kind")
        looks = looks_from_frame(looks, kind_hint)
    pm, kind, alloc = plan_metric(plan, metric, allocation)
    scale = getattr(plan, "scale", None) or pm.get("scale", "difference")
    if len(looks) == 0:
        raise checks.fail("looks", [], "at least one look of totals")

    arms = metrics.validate_looks(kind, list(looks))
    null, _ = orientation(plan)
    eff = metrics.effect(kind, arms["control"], arms["treatment"], scale=scale, null=null)
    warnings: list[str] = list(getattr(plan, "notes", ()))
    degenerate = np.atleast_1d(np.asarray(eff.degenerate, bool))
    for j in np.flatnonzero(degenerate):
        warnings.append(f"look {j + 1}: the variance estimate is zero (no variation in "
                        "either arm yet), so z is set to 0 and this look cannot stop "
                        "for efficacy")
    rule = _rule(plan, pm, max_n, fraction_basis)
    table = rule.evaluate(eff, final=final, warnings=warnings)
    last = table.analysed
    small = metrics.small_sample(kind, arms)[:last]
    if small.any():
        warnings.append(metrics.small_sample_message(kind, [int(j) + 1
                                                            for j in np.flatnonzero(small)]))
    if kind == "rate":
        disp = metrics.dispersion_check(arms)
        if disp is not None and disp.flagged[:last].any():
            warnings.append(metrics.dispersion_message(
                disp, [int(j) + 1 for j in np.flatnonzero(disp.flagged[:last])]))
    records = _records(eff, table, kind, alloc, srm_threshold, small, plan.sides, warnings)
    fin = rule.final_inference(eff, table, warnings)
    proj = rule.projection(eff, table, daily_traffic)
    pm_hyp = pm.get("hypothesis", "superiority") if pm else "superiority"
    direction = None
    if table.decision == Decision.STOP_EFFICACY:
        assert table.stop is not None
        t_stop = float(np.atleast_1d(eff.test_estimate)[table.stop])
        better_side = table.sign * (t_stop - null_on_test_scale(null, eff.test_scale)) > 0
        if not better_side:
            direction = "control_better"
        elif pm_hyp == "non_inferiority":
            direction = "treatment_non_inferior"
        else:
            direction = "treatment_better"
    stopped = None if table.stop is None else table.stop + 1
    return Analysis(decision=table.decision, direction=direction, stopped_at=stopped,
                    looks=records, final=fin, projection=proj, warnings=warnings,
                    metric_kind=kind, scale=scale,
                    test_scale=table.test_scale or eff.test_scale,
                    plan_kind=rule.kind, sides=int(plan.sides), alpha=float(plan.alpha),
                    binding=_binding(plan), srm_threshold=srm_threshold, margin=null,
                    hypothesis=pm_hyp, better=(pm or {}).get("better", "higher"))


def _binding(plan: Any) -> bool | None:
    """Whether the plan's futility boundary binds (None: it has none)."""
    if getattr(plan, "futility", None) is None:
        return None
    return bool(plan.binding)


def _rule(plan: Any, pm: dict, max_n: float | None, fraction_basis: str) -> Any:
    if not isinstance(plan, Plan):
        return rule_for(plan)
    max_information = None
    if fraction_basis == "information":
        if not pm or "mde" not in pm:
            raise ValueError("fraction_basis: 'information' needs a plan with a metric (for "
                             "the maximum information)")
        from seqtest.planning.sizing import check_metric, max_control
        max_information = max_control(plan, check_metric(dict(pm)))[3]
    total = _max_total(plan, max_n) if (pm or max_n is not None) else None
    if fraction_basis == "sample" and total is None:
        total = _max_total(plan, max_n)
    return rule_for(plan, max_n=total, fraction_basis=fraction_basis,
                    max_information=max_information)


def _records(eff: metrics.Effect, table: LookTable, kind: str, alloc: float,
             srm_threshold: float, small: np.ndarray, sides: int, warnings: list[str]
             ) -> list[LookResult]:
    def col(x: Any) -> np.ndarray:
        return np.atleast_1d(np.asarray(x, float))

    n_c, n_t = col(eff.n_control), col(eff.n_treatment)
    z = col(eff.z) if table.z is None else table.z
    t_est = col(eff.test_estimate) if table.test_estimate is None else table.test_estimate
    t_se = col(eff.test_se) if table.se is None else table.se
    skew = np.broadcast_to(col(eff.skewness), col(eff.z).shape)
    sign = table.sign
    unadj = sides * special.ndtr(-np.abs(z)) if sides == 2 else special.ndtr(-sign * z)
    # one-sided where lower is better: the boundaries on the scale of the z shown
    shown = sign if sides == 1 else 1.0
    out = []
    for j in range(table.analysed):
        srm_p = srm_at_look(kind, n_c[j], n_t[j], alloc, srm_threshold, j + 1, warnings)
        out.append(LookResult(
            look=j + 1, n_control=float(n_c[j]), n_treatment=float(n_t[j]),
            control_value=float(col(eff.control_value)[j]),
            treatment_value=float(col(eff.treatment_value)[j]),
            estimate=float(col(eff.estimate)[j]),
            test_estimate=float(t_est[j]), se=float(t_se[j]),
            z=float(z[j]),
            skewness=0.0 if table.z is not None else float(skew[j]),
            information=float(col(eff.information)[j]),
            information_fraction=float(table.fraction[j]),
            efficacy_z=shown * float(table.efficacy_z[j]),
            futility_z=None if table.futility_z is None
            else shown * float(table.futility_z[j]),
            p_threshold=float(table.p_threshold[j]), unadjusted_p=float(unadj[j]),
            interval_lower=float(table.interval_lower[j]),
            interval_upper=float(table.interval_upper[j]),
            decision=decision_from_code(table.codes[j]),
            srm_p_value=srm_p,
            always_valid_p=None if table.always_valid_p is None
            else float(table.always_valid_p[j]),
            small_sample=bool(small[j]),
        ))
    return out


def plan_metric(plan: Any, metric: str | None, allocation: float | None
                ) -> tuple[dict, str, float]:
    """The plan's metric description, the metric kind to analyse and the allocation,
    reconciling the arguments with the plan."""
    pm = getattr(plan, "metric", None) or {}
    kind = metric or pm.get("kind")
    if kind is None:
        raise ValueError("metric: the plan has no metric; give metric= one of "
                         f"{', '.join(METRIC_KINDS)}")
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


def _max_total(plan: Plan, max_n: float | None) -> float:
    if max_n is not None:
        v = float(max_n)
        if not math.isfinite(v) or v <= 0:
            raise ValueError(f"max_n: got {max_n!r}; allowed is a positive total sample")
        return v
    if plan.metric is None:
        raise ValueError("max_n: the plan has no metric, so give the maximum total sample "
                         "over both arms")
    from seqtest.planning.sizing import max_sizes
    n_c, n_t = max_sizes(plan, **plan.metric)
    return float(n_c + n_t)
