"""The stopping rule of each kind of plan, applied to the looks observed so far.

A rule turns the per-look statistics of :class:`~seqtest.monitoring.metrics.Effect`
(on the test scale, see :mod:`seqtest.core.scales`) into the per-look boundaries,
intervals and decisions (:class:`LookTable`), and at a stop into adjusted inference.
:func:`rule_for` picks the rule of a plan; :func:`seqtest.monitoring.analysis.analyze`
and the simulator call the same rules, so the rules are written once.

Group-sequential plans (:class:`GroupSequentialRule`)
    Boundaries are recomputed at every look by error spending on the information
    fractions actually observed (Lan and DeMets 1983), so unplanned, skipped or moved
    looks keep the type I error: the spending function's cumulative alpha at
    ``min(t_k, 1)``; the look that reaches the maximum (``t_k >= 1``) or is declared
    final spends all that is left; correlations use the uncapped fractions, so
    over-running information is handled. A classical plan (Pocock, O'Brien-Fleming,
    ...) is monitored through the cumulative alpha of its design, interpolated
    monotonely (PCHIP). Futility: beta spending under the design alternative on the
    same fractions; a non-binding plan computes efficacy ignoring it. Repeated
    confidence intervals use the efficacy boundaries of the same spending without any
    futility boundary, so they hold their level whatever the stopping rule (Jennison
    and Turnbull 2000, chapter 9), also for binding plans.

Mixture plans (:class:`MixtureRule`)
    The always-valid p-value and confidence sequence of the normal-mixture test
    (:mod:`seqtest.core.normal_mixture`); a look stops for efficacy once the p-value
    reaches alpha, and completes at the plan's cap.

Margins and the better direction
    A plan whose metric has a margin tests the null ``effect = margin`` (the effect's
    z is computed at it: :func:`seqtest.monitoring.metrics.effect` with
    ``null=margin``), and a metric where lower is better is decided on ``-z``, so
    that a one-sided plan rejects for an effect on the better side of the margin and
    a two-sided plan's upper boundary is the better side (:func:`orientation`).
    Repeated intervals, the stage-wise p-value (at the margin), the adjusted interval
    and the median-unbiased estimate follow; intervals are about the effect itself
    and do not move with the margin.

References
----------
.. [1] Lan, K. K. G. and DeMets, D. L. (1983). Biometrika 70, 659-663.
.. [2] Jennison, C. and Turnbull, B. W. (2000). Group Sequential Methods with
       Applications to Clinical Trials, chapters 7-10.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
from scipy import special

from seqtest.core import spending
from seqtest.core.boundaries import binding_bounds, futility_bounds, spending_bounds
from seqtest.core.errors import LookDataError
from seqtest.core.normal_mixture import always_valid
from seqtest.core.region import Region
from seqtest.core.scales import from_test_scale, null_on_test_scale
from seqtest.core.spending import SpendingFunction
from seqtest.core.vocabulary import Decision, decision_from_code
from seqtest.monitoring import inference
from seqtest.monitoring.metrics import Effect
from seqtest.planning.design import Plan
from seqtest.planning.mixture import MixturePlan
from seqtest.planning.sizing import null_and_sign

__all__ = [
    "FinalInference",
    "always_valid_effect",
    "GroupSequentialRule",
    "orientation",
    "LookTable",
    "MixtureRule",
    "Projection",
    "rule_for",
]

FRACTION_BASES = ("sample", "information")
# |z| beyond which stage-wise inference is not attempted (the grid reaches |z| = 40)
_Z_INFERENCE_MAX = 30.0
# Grid of the projection: the planned looks still ahead (their efficacy boundaries)
# and the conditional power are carried on r = 12, not the plan's grid: conditional
# power within 1e-6 of the fine grid's (checked against r = 48 in the tests; 1e-7 seen),
# which a projection shown in percent does not need finer; decisions never use it.
R_AHEAD = 12
_CONTINUE = Decision.CONTINUE.code
_EFFICACY = Decision.STOP_EFFICACY.code
_FUTILITY = Decision.STOP_FUTILITY.code
_COMPLETE = Decision.COMPLETE.code


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
    conditional_power_planned : float
        Chance of reaching significance at a later planned look if the true effect is
        the planned one, in the direction the data point to (a two-sided plan: the
        sign of the current estimate; a one-sided plan: the planned, positive
        direction).
    conditional_power_current : float
        The same if the true effect is the current estimate.
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
class LookTable:
    """A rule applied to the looks: per-look arrays over the looks analysed.

    Attributes
    ----------
    analysed : int
        Looks analysed (later ones came after the maximum or a stop).
    fraction : ndarray
        Information fraction of each look (of the maximum sample, or of the cap).
    efficacy_z, futility_z : ndarray, ndarray or None
        Boundaries on the z scale of the test.
    p_threshold : ndarray
        The p-value each look had to reach to stop for efficacy.
    interval_lower, interval_upper : ndarray
        Per-look interval valid at every look (repeated confidence interval, or the
        confidence sequence), on the effect's reported scale.
    codes : ndarray of int8
        Each look's own decision code (:class:`~seqtest.core.vocabulary.Decision`).
    always_valid_p : ndarray or None
    stop : int or None
        0-based look at which the experiment stopped (or was advised to).
    decision : Decision
    last_final : bool
        The last analysed look was the final one.
    future_fractions, future_efficacy : ndarray
        The planned looks still ahead and their boundaries (for the projection).
    test_scale, test_estimate, se, z : optional
        When the rule tests on other statistics than the effect's own (the mixture test
        on the log ratio, without the score's skewness correction): what it used, so
        that a look shows the numbers its decision was made on.
    sign : float
        -1 when lower is better (decisions were taken on ``-z`` against the boundaries
        shown), else 1 (:func:`orientation`).
    """

    analysed: int
    fraction: np.ndarray
    efficacy_z: np.ndarray
    futility_z: np.ndarray | None
    p_threshold: np.ndarray
    interval_lower: np.ndarray
    interval_upper: np.ndarray
    codes: np.ndarray
    always_valid_p: np.ndarray | None
    stop: int | None
    decision: Decision
    last_final: bool
    future_fractions: np.ndarray
    future_efficacy: np.ndarray
    test_scale: str | None = None
    test_estimate: np.ndarray | None = None
    se: np.ndarray | None = None
    z: np.ndarray | None = None
    sign: float = 1.0


def _arr(x: Any) -> np.ndarray:
    return np.atleast_1d(np.asarray(x, float))


def _unadjusted_p(z: np.ndarray, sides: int) -> np.ndarray:
    zz = np.asarray(z, float)
    return sides * special.ndtr(-np.abs(zz)) if sides == 2 else special.ndtr(-zz)


def orientation(plan: Any) -> tuple[float, float]:
    """``(null, sign)`` of a plan: the null value of the effect (the metric's margin, 0
    without one) and the sign that makes the better side positive (-1 when lower is
    better). Decisions are taken on ``sign * z``."""
    return null_and_sign(getattr(plan, "metric", None))


def _check_null(eff: Effect, plan: Any) -> None:
    """The effect must be computed at the plan's null (its margin)."""
    null = orientation(plan)[0]
    if not math.isclose(float(eff.null), null, rel_tol=1e-12, abs_tol=1e-15):
        raise ValueError(f"eff: computed at the null {eff.null!r} but the plan tests at "
                         f"its margin {null!r}; compute the effect with null={null!r}")


def _interval(eff: Effect, critical: Any, sides: int, sign: float
              ) -> tuple[np.ndarray, np.ndarray]:
    """``eff.interval``; a one-sided plan where lower is better bounds the effect from
    above (its lower limit is the end of the range)."""
    if sides == 2 or sign > 0:
        return eff.interval(critical, sides)
    _, hi = eff.interval(critical, 2)
    end = -1.0 if (eff.kind == "binary" or eff.scale == "relative") else -np.inf
    return np.full(np.shape(hi), end), np.asarray(hi, float)


def _naive(eff: Effect, j: int, alpha: float, sides: int, sign: float = 1.0
           ) -> dict[str, float]:
    """The fixed-sample analysis of look ``j`` alone (it ignores the looks)."""
    lo, hi = _interval(eff, float(-special.ndtri(alpha / sides)), sides, sign)
    return {"naive_estimate": float(_arr(eff.estimate)[j]),
            "naive_ci_lower": float(np.atleast_1d(lo)[j]),
            "naive_ci_upper": float(np.atleast_1d(hi)[j]),
            "naive_p_value": float(_unadjusted_p(np.array(sign * _arr(eff.z)[j]), sides))}


def _looks_text(looks: list[int]) -> str:
    """Look numbers in words, runs shortened: ``look 3``, ``looks 3, 5 and 7..9``."""
    runs: list[str] = []
    start = prev = looks[0]
    for k in [*looks[1:], None]:
        if k is not None and k == prev + 1:
            prev = k
            continue
        runs.append(str(start) if start == prev else f"{start}..{prev}")
        if k is not None:
            start = prev = k
    if len(looks) == 1:
        return f"look {looks[0]}"
    text = runs[0] if len(runs) == 1 else ", ".join(runs[:-1]) + " and " + runs[-1]
    return f"looks {text}"


# -- group-sequential plans -----------------------------------------------------------

class GroupSequentialRule:
    """The rule of a group-sequential :class:`~seqtest.planning.design.Plan`.

    Parameters
    ----------
    plan : Plan
    max_n : float or None
        Maximum total sample over both arms (exposure for rates), for fractions by
        sample size; ``None`` when the fractions are given directly.
    fraction_basis : {"sample", "information"}
        How information fractions are measured: ``n_k / max_n`` (the default; keeps
        the boundaries free of the noise in re-estimated variances, common practice)
        or ``I_k / I_max`` with ``I_k = 1 / se_k^2``.
    max_information : float or None
        ``I_max``, for ``fraction_basis="information"``.
    """

    kind = "group_sequential"

    def __init__(self, plan: Plan, *, max_n: float | None = None,
                 fraction_basis: str = "sample", max_information: float | None = None
                 ) -> None:
        self.plan = plan
        self.max_n = max_n
        self.fraction_basis = fraction_basis
        self.max_information = max_information
        self._spending = self._efficacy_spending()
        self.null, self.sign = orientation(plan)

    # -- boundaries on observed fractions ---------------------------------------------
    def _efficacy_spending(self) -> SpendingFunction:
        plan = self.plan
        if isinstance(plan.efficacy, SpendingFunction):
            return plan.efficacy
        # classical shape: spend what the design spends, interpolated (PCHIP)
        share = np.asarray(plan.cumulative_alpha, float) / plan.alpha
        share = np.clip(np.maximum.accumulate(share), 0.0, 1.0)
        share[-1] = 1.0
        return spending.from_table(plan.info_fractions, share)

    def cumulative_alpha(self, fractions: Any) -> np.ndarray:
        """Type I error per tail to have spent by each of the given fractions (any
        shape; fractions above 1 count as 1), by the plan's spending (a classical
        plan's: its design's cumulative alpha, interpolated). A final look spends all
        that is left instead: see :meth:`boundaries`."""
        t = np.asarray(fractions, float)
        a_tail = self.plan.alpha / self.plan.sides
        return np.asarray(self._spending(np.minimum(t, 1.0), a_tail), float).reshape(t.shape)

    def _cumulative_alpha(self, t: np.ndarray, final: bool) -> np.ndarray:
        cum = self.cumulative_alpha(t)
        if final or t[-1] >= 1.0:
            cum[-1] = self.plan.alpha / self.plan.sides
        return cum

    @staticmethod
    def _check_fractions(t: np.ndarray) -> None:
        if t.size == 0 or np.any(~np.isfinite(t)) or t[0] <= 0 or np.any(np.diff(t) <= 0):
            raise ValueError(f"fractions: got {t.tolist()}; allowed is strictly increasing "
                             "positive information fractions")
        if np.any(t[:-1] >= 1.0):
            k = int(np.argmax(t >= 1.0)) + 1
            raise ValueError(f"fractions: look {k} already reached the maximum information "
                             f"(fraction {t[k - 1]:.3f}), so it was the final look")

    def boundaries(self, fractions: Any, *, final: bool = False, reuse: bool = False,
                   ahead: int = 0) -> tuple[np.ndarray, np.ndarray | None]:
        """Efficacy and futility boundaries for looks at the given fractions.

        Parameters
        ----------
        fractions : array_like
            Observed information fractions of the looks so far, strictly increasing;
            values above 1 mean the information ran over the maximum.
        final : bool
            The last look is the final one: it spends all the alpha left. A look with
            fraction >= 1 is always final.
        reuse : bool
            Take looks already solved, by an earlier call on the same first fractions,
            from :data:`seqtest.core.boundaries.SOLVED` (the same numbers, computed
            once; monitoring, which asks again at every look, passes True).
        ahead : int
            The last ``ahead`` fractions are planned looks still to come, wanted for
            the projection only: their efficacy boundaries are carried on the grid
            :data:`R_AHEAD`, and, unless futility binds (it then shapes the efficacy
            boundaries), their futility boundaries are not computed (``nan``). The
            boundaries of the looks before them are the same numbers either way.

        Returns
        -------
        efficacy_z, futility_z : ndarray, ndarray or None
            Boundaries per look (futility ``None`` for plans without one). At the
            final look the futility boundary equals the efficacy boundary.
        """
        t = np.asarray(fractions, dtype=float).ravel()
        self._check_fractions(t)
        plan = self.plan
        is_final = bool(final or t[-1] >= 1.0)
        cum = self._cumulative_alpha(t, is_final)
        fut = plan.futility
        seen = t.size - max(0, min(int(ahead), t.size - 1))  # looks before those ahead
        coarse = None if seen == t.size else (seen - 1, R_AHEAD)
        if fut is None:
            return spending_bounds(t, cum, sides=plan.sides, r=plan.r, reuse=reuse,
                                   r_after=coarse), None
        beta = 1.0 - plan.power
        if plan.binding:
            return binding_bounds(t, plan.alpha, plan.sides, self._spending, fut, beta,
                                  plan.drift, plan.r, final=is_final, cumulative_alpha=cum)
        eff = spending_bounds(t, cum, sides=plan.sides, r=plan.r, reuse=reuse,
                              r_after=coarse)
        b = futility_bounds(t[:seen], plan.drift, eff[:seen], plan.sides, beta, fut, plan.r,
                            final=is_final and seen == t.size, reuse=reuse)
        return eff, np.concatenate([b, np.full(t.size - seen, np.nan)])

    def interval_boundaries(self, fractions: Any, efficacy_z: np.ndarray, *,
                            final: bool = False) -> np.ndarray:
        """Boundaries for repeated confidence intervals: the efficacy boundaries of the
        same spending with no futility boundary (for a binding plan they differ from
        the test's own, which rely on paths stopping at futility)."""
        if not self.plan.binding or self.plan.futility is None:
            return efficacy_z
        t = np.asarray(fractions, dtype=float).ravel()
        cum = self._cumulative_alpha(t, bool(final or t[-1] >= 1.0))
        return spending_bounds(t, cum, sides=self.plan.sides, r=self.plan.r, reuse=True)

    def region(self, efficacy_z: np.ndarray, futility_z: np.ndarray | None,
               *, binding_only: bool = False) -> Region:
        """The continuation region of these boundaries (``binding_only``: futility only
        when the plan's futility is binding, as the error computations see it)."""
        use_fut = futility_z is not None and (self.plan.binding or not binding_only)
        return Region.of_plan(self.plan.sides, efficacy_z, futility_z if use_fut else None)

    # -- the looks --------------------------------------------------------------------
    def fractions(self, eff: Effect) -> np.ndarray:
        """Information fraction of each look (see the class docstring)."""
        if self.fraction_basis == "sample":
            if self.max_n is None:
                raise ValueError("max_n: the plan has no metric, so give the maximum total "
                                 "sample over both arms")
            t = (_arr(eff.n_control) + _arr(eff.n_treatment)) / self.max_n
        else:
            info = _arr(eff.information)
            bad = np.flatnonzero(~(info > 0))
            if bad.size:
                raise LookDataError(
                    "the variance estimate is zero, so the look has no statistical "
                    "information; measure fractions by sample size "
                    "(fraction_basis='sample') or wait for variation in the data",
                    look=int(bad[0]) + 1)
            assert self.max_information is not None
            t = info / self.max_information
        for j in range(1, t.size):
            if t[j] <= t[j - 1]:
                raise LookDataError(
                    f"the information fraction did not grow ({t[j - 1]:.4f} at look {j}, "
                    f"{t[j]:.4f} now); a look needs new data", look=j + 1)
        return t

    def future_fractions(self, t_now: float) -> np.ndarray:
        """Planned looks still ahead; a planned look within 1% of the maximum
        information of the current one is taken to be the current one."""
        planned = self.plan.info_fractions
        future = planned[planned > t_now + 0.01]
        if future.size == 0 or future[-1] < 1.0:
            future = np.append(future, 1.0)
        return future

    def evaluate(self, eff: Effect, *, final: bool, warnings: list[str]) -> LookTable:
        """Boundaries, intervals and decisions of the looks (``eff`` computed at the
        plan's null: :func:`orientation`)."""
        plan = self.plan
        _check_null(eff, plan)
        t_all = self.fractions(eff)
        k = t_all.size
        reached = np.flatnonzero(t_all >= 1.0)
        last = k
        if reached.size and reached[0] < k - 1:
            last = int(reached[0]) + 1
            warnings.append(f"look {last} reached the maximum information and was the final "
                            f"look; looks {last + 1}..{k} are not analysed")
        t = t_all[:last]
        last_final = bool(final or t[-1] >= 1.0)
        # Boundaries of all looks in one pass: a look's boundary depends only on the
        # fractions up to it, so these are the boundaries known at each look. When the
        # last look is not final, the remaining planned looks are appended (for the
        # projection); that changes nothing before them.
        future = np.empty(0) if last_final else self.future_fractions(float(t[-1]))
        t_ext = np.concatenate([t, future])
        a_all, b_all = self.boundaries(t_ext, final=True, reuse=True, ahead=future.size)
        a, b = a_all[:last], None if b_all is None else b_all[:last]
        # (the looks so far only: those ahead change none of theirs)
        a_int = self.interval_boundaries(t, a, final=last_final)
        z = self.sign * _arr(eff.z)[:last]
        degenerate = np.atleast_1d(np.asarray(eff.degenerate, bool))[:last]
        codes = self.region(a, b).classify(z, degenerate=degenerate)
        if last_final:
            codes[-1] = _EFFICACY if codes[-1] == _EFFICACY else _COMPLETE
        stop: int | None = None
        went_on: list[int] = []
        for j in range(last):
            c = int(codes[j])
            binding_stop = c == _FUTILITY and (plan.binding or j == last - 1)
            if c in (_EFFICACY, _COMPLETE) or binding_stop:
                stop = j
                break
            if c == _FUTILITY:
                went_on.append(j + 1)
        if went_on:
            warnings.append(f"{_looks_text(went_on)} crossed the non-binding futility "
                            "boundary and the experiment went on; that keeps the type I "
                            "error")
        decision = Decision.CONTINUE if stop is None else decision_from_code(codes[stop])
        if stop is not None and stop < last - 1:
            warnings.append(f"the experiment stopped at look {stop + 1} ({decision.value}); "
                            f"looks {stop + 2}..{t_all.size} came after the stop and are not "
                            "analysed")
            last = stop + 1
            t, a, codes = t[:last], a[:last], codes[:last]
            b = None if b is None else b[:last]
            a_int = a_int[:last]
        k_all = np.atleast_1d(np.asarray(eff.z)).size
        crit = np.concatenate([a_int, np.full(k_all - last, np.inf)])
        lo, hi = _interval(eff, crit, plan.sides, self.sign)
        return LookTable(
            analysed=last, fraction=t, efficacy_z=a, futility_z=b,
            p_threshold=plan.sides * special.ndtr(-a),
            interval_lower=np.atleast_1d(lo)[:last], interval_upper=np.atleast_1d(hi)[:last],
            codes=codes, always_valid_p=None, stop=stop, decision=decision,
            last_final=last_final, future_fractions=future,
            future_efficacy=a_all[last:], sign=self.sign)

    # -- at the stop ------------------------------------------------------------------
    def final_inference(self, eff: Effect, table: LookTable, warnings: list[str]
                        ) -> FinalInference | None:
        """Stage-wise p-value, interval and median-unbiased estimate at the stop."""
        if table.stop is None:
            return None
        j = table.stop
        sign = self.sign
        z = sign * _arr(eff.z)[: j + 1]
        if np.atleast_1d(np.asarray(eff.degenerate, bool))[j]:
            warnings.append(f"look {j + 1}: no variation in either arm, so no adjusted "
                            "p-value or interval can be computed")
            return None
        if abs(z[j]) > _Z_INFERENCE_MAX:
            warnings.append(f"look {j + 1}: |z| = {abs(z[j]):.1f} is beyond "
                            f"{_Z_INFERENCE_MAX:g}, where the unadjusted p-value is below "
                            "1e-190 and the numerical integration for the adjusted interval "
                            "does not reach; check the totals, and use the unadjusted "
                            "figures with care")
            return None
        plan = self.plan
        # Information for inference: proportional to the fractions used for the
        # boundaries, anchored at the stopping look's observed information, so the
        # correlation structure matches the one the boundaries were computed on.
        t = table.fraction[: j + 1]
        info = t * (float(_arr(eff.information)[j]) / t[-1])
        b = None if table.futility_z is None else table.futility_z[: j + 1]
        # a binding futility boundary is part of the sample space: paths that stop
        # for futility never reach later looks (a non-binding one is ignored, which
        # keeps the p-value valid whether or not it was obeyed)
        region = self.region(table.efficacy_z[: j + 1], b, binding_only=True)
        sw = inference.stagewise(z, info, region, alpha=plan.alpha, sides=plan.sides,
                                 r=plan.r)
        # theta is the distance from the null on the test scale towards the better side,
        # in the units of test_estimate (z is centred at the null); its information at
        # the stop is 1 / test_se^2 (for a score statistic that is the restricted one)
        th_scale = 1.0 / float(_arr(eff.test_se)[j]) ** 2 / info[-1]
        ts = eff.test_scale
        t_null = null_on_test_scale(eff.null, ts)

        def back(theta: float) -> float:
            return float(from_test_scale(t_null + sign * theta / math.sqrt(th_scale), ts))

        lo, hi = back(sw.ci_lower), back(sw.ci_upper)
        if sign < 0:
            lo, hi = hi, lo
        return FinalInference(
            p_value=sw.p_value, ci_lower=lo, ci_upper=hi,
            median_unbiased=back(sw.median_unbiased),
            **_naive(eff, j, plan.alpha, plan.sides, sign))

    def projection(self, eff: Effect, table: LookTable, daily_traffic: float | None
                   ) -> Projection | None:
        """Conditional power and the users (and days) to the next look and to the end."""
        if table.decision != Decision.CONTINUE or table.last_final:
            return None
        plan = self.plan
        j = table.analysed - 1
        z_now, t_now = self.sign * float(_arr(eff.z)[j]), float(table.fraction[j])
        future, fa = table.future_fractions, table.future_efficacy
        # the planned effect in the direction the data point to (two-sided plans);
        # one-sided plans test the positive direction only
        sign = -1.0 if (plan.sides == 2 and z_now < 0) else 1.0
        cp_plan = inference.conditional_power(z_now, t_now, future, fa, sign * plan.drift,
                                              sides=plan.sides, r=R_AHEAD)
        cp_now = inference.conditional_power(z_now, t_now, future, fa,
                                             z_now / math.sqrt(t_now), sides=plan.sides,
                                             r=R_AHEAD)
        nxt = float(future[0])
        more_next = more_end = d_next = d_end = None
        if self.max_n is not None:
            more_next = (nxt - t_now) * self.max_n
            more_end = max(0.0, (1.0 - t_now) * self.max_n)
            if daily_traffic is not None:
                d_next, d_end = more_next / daily_traffic, more_end / daily_traffic
        return Projection(cp_plan, cp_now, nxt, more_next, more_end, d_next, d_end)


# -- mixture plans ----------------------------------------------------------------------

class MixtureRule:
    """The rule of a :class:`~seqtest.planning.mixture.MixturePlan`."""

    kind = "mixture"

    def __init__(self, plan: MixturePlan) -> None:
        self.plan = plan
        self._result: Any = None

    def evaluate(self, eff: Effect, *, final: bool, warnings: list[str]) -> LookTable:
        plan = self.plan
        _check_null(eff, plan)
        size = np.maximum(_arr(eff.n_control), _arr(eff.n_treatment))
        res = always_valid_effect(eff, plan)
        self._result = res
        test_scale = "log_ratio" if plan.scale == "relative" else "difference"
        if plan.scale == "relative":
            t_est = np.asarray(eff.log_ratio_estimate, float)
            t_se = np.asarray(eff.log_ratio_se, float)
        else:
            t_est, t_se = np.asarray(eff.estimate, float), np.asarray(eff.se, float)
        with np.errstate(divide="ignore", invalid="ignore"):
            t_z = np.where(np.isfinite(t_se), (t_est - null_on_test_scale(eff.null,
                                                                           test_scale))
                           / t_se, 0.0)
        codes = np.atleast_1d(res.decision_code).astype(np.int8).copy()
        k = codes.size
        sign = orientation(plan)[1]
        if final and codes[-1] == _CONTINUE:
            codes[-1] = _COMPLETE
        stop_at = np.flatnonzero(codes != _CONTINUE)
        stop = int(stop_at[0]) if stop_at.size else None
        last = k if stop is None else stop + 1
        if stop is not None and stop < k - 1:
            warnings.append(f"the experiment stopped at look {stop + 1} "
                            f"({decision_from_code(codes[stop]).value}); looks "
                            f"{stop + 2}..{k} came after the stop and are not analysed")
        frac = (size / plan.max_n_per_arm) if plan.max_n_per_arm else np.full(k, np.nan)
        decision = decision_from_code(codes[last - 1])
        return LookTable(
            analysed=last, fraction=frac[:last],
            efficacy_z=np.atleast_1d(res.boundary_z)[:last].astype(float), futility_z=None,
            p_threshold=np.full(last, plan.alpha),
            interval_lower=np.atleast_1d(res.ci_lower)[:last],
            interval_upper=np.atleast_1d(res.ci_upper)[:last],
            codes=codes[:last], always_valid_p=np.atleast_1d(res.p_value)[:last],
            stop=None if decision == Decision.CONTINUE else last - 1, decision=decision,
            last_final=decision != Decision.CONTINUE, future_fractions=np.empty(0),
            future_efficacy=np.empty(0), test_scale=test_scale,
            test_estimate=np.atleast_1d(t_est)[:last], se=np.atleast_1d(t_se)[:last],
            z=np.atleast_1d(t_z)[:last], sign=sign)

    def final_inference(self, eff: Effect, table: LookTable, warnings: list[str]
                        ) -> FinalInference | None:
        if table.stop is None:
            return None
        j = table.stop
        assert table.always_valid_p is not None
        return FinalInference(
            p_value=float(table.always_valid_p[j]), ci_lower=float(table.interval_lower[j]),
            ci_upper=float(table.interval_upper[j]), median_unbiased=None,
            **_naive(eff, j, self.plan.alpha, self.plan.sides, orientation(self.plan)[1]))

    def projection(self, eff: Effect, table: LookTable, daily_traffic: float | None
                   ) -> Projection | None:
        return None


def rule_for(plan: Any, **options: Any) -> GroupSequentialRule | MixtureRule:
    """The rule of a plan (options as :class:`GroupSequentialRule` takes them)."""
    if isinstance(plan, MixturePlan):
        return MixtureRule(plan)
    if isinstance(plan, Plan):
        return GroupSequentialRule(plan, **options)
    raise ValueError(f"plan: got {type(plan).__name__}; allowed is a Plan, a MixturePlan or "
                     "a plan document")


def flip(value: Any, scale: str) -> Any:
    """An effect seen from the other arm's side: ``-d`` on the difference scale,
    ``1 / (1 + r) - 1`` on the relative one (both decreasing involutions, so interval
    ends swap)."""
    v = np.asarray(value, float)
    if scale == "relative":
        with np.errstate(divide="ignore", invalid="ignore"):
            out = np.expm1(-np.log1p(v))
    else:
        out = -v
    return float(out) if out.ndim == 0 else out


def always_valid_effect(eff: Effect, plan: MixturePlan, *, null: float | None = None) -> Any:
    """:func:`~seqtest.core.normal_mixture.always_valid` on an
    :class:`~seqtest.monitoring.metrics.Effect` (looks on the last axis): the effect's
    scale must be the plan's; the null defaults to the one the effect was computed with;
    the size of the larger arm is passed as ``n`` for the plan's cap. A plan where lower
    is better is tested on the effect seen from the control's side (:func:`flip`), so
    that a one-sided plan rejects for a lower treatment value; the interval and the
    direction are mapped back."""
    if not isinstance(plan, MixturePlan):
        raise ValueError(f"plan: got {type(plan).__name__}; allowed is a MixturePlan")
    if eff.scale != plan.scale:
        raise ValueError(f"eff: the effect is on the {eff.scale} scale but the plan on the "
                         f"{plan.scale} scale; compute the effect with scale={plan.scale!r}")
    n = np.maximum(np.asarray(eff.n_control, float), np.asarray(eff.n_treatment, float))
    theta0 = eff.null if null is None else null
    sign = orientation(plan)[1]
    if sign < 0:
        theta0 = flip(theta0, eff.scale)
    if eff.scale == "relative":
        log_est = np.asarray(eff.log_ratio_estimate, float)
        res = always_valid(sign * log_est, eff.log_ratio_se, plan, null=theta0, n=n,
                           scale=eff.scale, on_log_ratio=True)
    else:
        res = always_valid(sign * np.asarray(eff.estimate, float), eff.se, plan,
                           null=theta0, n=n, scale=eff.scale)
    if sign > 0:
        return res
    return replace(res, ci_lower=flip(res.ci_upper, eff.scale),
                   ci_upper=flip(res.ci_lower, eff.scale),
                   direction_sign=-np.asarray(res.direction_sign))
