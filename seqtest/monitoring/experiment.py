"""Monitoring an experiment with many arms and several metrics.

:func:`analyze_experiment` (also reached through :func:`seqtest.analyze` with an
:class:`~seqtest.planning.experiment.ExperimentPlan`) takes the looks' cumulative
totals per metric and arm and gives an :class:`ExperimentAnalysis`: per comparison
(treatment against control on one metric) an :class:`ComparisonResult` with the
looks, the boundaries in force and, at its arm's stop, adjusted inference; per arm
its decision and reason; the experiment's decision and reason; a sample-ratio check
across all arms.

Every comparison's statistics come from :func:`seqtest.monitoring.metrics.effect`
(the null is the metric's margin), every boundary from the rules of the two-arm plans
(:class:`~seqtest.monitoring.rules.GroupSequentialRule` on the observed fractions,
each comparison's own: ``(n_control + n_arm) / (max_control + max_arm)``) or the joint
Dunnett-type boundaries (:func:`seqtest.core.multiarm.dunnett_bounds` on the
control's fractions), and every crossing from :meth:`seqtest.core.region.Region.classify`.
The decisions are made by :func:`decide`, vectorised over replicates, which the
simulator calls as well: the rule is written once.

At each look, for each arm still running
    1. guardrails: a crossing of any guardrail's harm boundary stops the arm for harm
       (``stop_harm``), whatever the primaries say, and its hypotheses pass nothing on;
    2. primaries: each live hypothesis is tested at its current level. Graphical
       method: after a rejection its level is passed along the graph (Bretz et al.
       2009, algorithm 1), the others' boundaries are recomputed at the same looks
       with their larger levels (Maurer and Bretz 2013) and they are tested again at
       this look, until no more is rejected (the order of rejections does not change
       the result). Dunnett-type: each comparison against the common boundary. An arm
       with a rejected hypothesis stops for efficacy (``stop_efficacy``; it *wins*
       when the effect is in the metric's better direction);
    3. futility: an arm all of whose hypotheses are below their futility boundaries
       stops for futility (``stop_futility``): advice, since the efficacy boundaries
       ignore it (non-binding), and the arm is not analysed afterwards;
    4. an arm at its final look completes (``complete_not_significant``).

The experiment continues while any arm does.

Error control when arms stop. A stopped arm's hypotheses are never rejected later and
pass nothing on (only a rejection passes alpha), so the others' levels are those of
the graph with fewer rejections: no larger than Bonferroni's argument allows, and the
family-wise error holds (the same holds when an arm is dropped by the user). With
Dunnett-type boundaries the stopped arms stay in the boundary computation with their
planned allocations: the family's crossing probability of the remaining arms is at
most that of all arms, so the error holds, conservatively. Futility is non-binding:
the efficacy boundaries ignore it, so obeying it or not keeps the error.

Adjusted inference per comparison at its arm's stop
    Graphical: the stage-wise p-value and interval (Tsiatis, Rosner and Mehta 1984) on
    the boundaries of the level in force at the stop, the interval at that level
    (``1 - level``, the Bonferroni-type interval of the hypothesis), and the
    multiplicity-adjusted p-value ``min(1, p * alpha / level)``, which is at most
    ``alpha`` exactly when the hypothesis was rejected. Dunnett-type: the stage-wise
    p-value of the comparison and the adjusted p-value
    ``P(some comparison has an outcome at least as extreme)`` under the global null
    (:func:`seqtest.core.multiarm.multiarm_crossing` with the stopping look's boundary
    at the observed z), and the stage-wise interval at the comparisons' marginal level
    at the common boundaries (as Dunnett's simultaneous intervals at one look).
    Guardrails: the harm test's own stage-wise p-value and one-sided interval at its
    alpha (no adjustment across guardrails: each has its own budget).
    Repeated intervals per comparison use the boundaries of its *initial* level
    without futility (graphical: Bonferroni over the hypotheses, so all intervals at
    all looks hold together with probability ``1 - alpha``; Dunnett-type: the common
    boundaries, jointly exact), one-sided in the test's direction for one-sided tests.

References
----------
.. [1] Bretz, F., Maurer, W., Brannath, W. and Posch, M. (2009). Statistics in
       Medicine 28, 586-604.
.. [2] Maurer, W. and Bretz, F. (2013). Statistics in Biopharmaceutical Research 5,
       311-320.
.. [3] Tsiatis, A. A., Rosner, G. L. and Mehta, C. R. (1984). Biometrics 40, 797-803.
.. [4] Jennison, C. and Turnbull, B. W. (2000). Group Sequential Methods with
       Applications to Clinical Trials, chapters 8, 9 and 16.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np
from scipy import special

from seqtest.core import checks, jsonable
from seqtest.core.boundaries import futility_bounds
from seqtest.core.errors import LookDataError
from seqtest.core.region import Region
from seqtest.core.scales import from_test_scale, null_on_test_scale
from seqtest.core.vocabulary import CAUTION, Decision, decision_from_code
from seqtest.monitoring import inference, metrics
from seqtest.monitoring.records import LookResult
from seqtest.monitoring.rules import FinalInference, GroupSequentialRule
from seqtest.planning.experiment import (
    Comparison,
    ExperimentPlan,
    _key,
    graph_update_many,
)

__all__ = [
    "ArmResult",
    "Boundaries",
    "ComparisonResult",
    "ExperimentAnalysis",
    "Frames",
    "Outcome",
    "SampleRatio",
    "analyze_experiment",
    "decide",
    "srm_test",
]

_CONTINUE = Decision.CONTINUE.code
_EFFICACY = Decision.STOP_EFFICACY.code
_FUTILITY = Decision.STOP_FUTILITY.code
_COMPLETE = Decision.COMPLETE.code
_HARM = Decision.STOP_HARM.code
_Z_INFERENCE_MAX = 30.0
_CACHE_MAX = 4096


# ---------------------------------------------------------------------------------
# Boundaries on observed fractions (cached per process)
# ---------------------------------------------------------------------------------

_GS_CACHE: dict[tuple, tuple[np.ndarray, np.ndarray | None]] = {}
_DUNNETT_CACHE: dict[tuple, np.ndarray] = {}


def _put(cache: dict, key: tuple, value: Any) -> None:
    if len(cache) >= _CACHE_MAX:
        cache.clear()
    cache[key] = value


def _rule_key(c: Comparison) -> str:
    p = c.plan
    return json.dumps([p.sides, p.efficacy.to_dict(),
                       None if p.futility is None else p.futility.to_dict(), p.binding,
                       p.power, p.drift, p.r, p.alpha], sort_keys=True)


def _gs_bounds(c: Comparison, key: str, t: np.ndarray, level: float, final: bool
               ) -> tuple[np.ndarray, np.ndarray | None]:
    """Efficacy (at ``level``) and futility (at the comparison's own level) boundaries
    of a comparison on fractions ``t`` (the last final when ``final``), by
    :meth:`GroupSequentialRule.boundaries`."""
    if level <= 0:
        _, fut = _gs_bounds(c, key, t, c.plan.alpha, final)
        return np.full(t.size, np.inf), fut
    ck = (key, t.tobytes(), round(level, 15), final)
    hit = _GS_CACHE.get(ck)
    if hit is None:
        plan = c.plan if level == c.plan.alpha else replace(c.plan, alpha=level)
        eff, fut = GroupSequentialRule(plan).boundaries(t, final=final)
        if fut is not None and level != c.plan.alpha and not plan.binding:
            # futility stays that of the comparison's own level
            fut = _gs_bounds(c, key, t, c.plan.alpha, final)[1]
        hit = (eff, fut)
        _put(_GS_CACHE, ck, hit)
    return hit


def _dunnett_z(plan: ExperimentPlan, t: np.ndarray, final: bool) -> np.ndarray:
    """Dunnett-type boundaries on the control's observed fractions ``t``.

    Looks taken at the plan's own users (the planned fractions up to the rounding of
    the sizes to whole users: 1.5 users of the control's maximum) use the plan's
    boundaries, as long as the last of them is final exactly when the plan's is
    (moving a fraction by 1 / n changes a boundary by about that much, below the
    boundaries' own quasi-Monte Carlo error); other looks are solved with the looks
    before as ``previous`` (:func:`seqtest.core.multiarm.dunnett_bounds`) and cached in
    the process."""
    assert plan.dunnett is not None
    spend = plan.efficacy
    tail = plan.alpha / plan.sides
    is_final = bool(final or t[-1] >= 1.0)
    k = t.size
    planned = plan.info_fractions
    metric = plan.primaries[0].metric
    tol = 1.5 / plan.max_n(metric, plan.control)
    if (k <= planned.size and np.all(np.abs(t - planned[:k]) <= tol)
            and is_final == (k == planned.size)):
        return np.asarray(plan.dunnett.z[:k], float)
    cum = np.asarray(spend(np.minimum(t, 1.0), tail), float)
    if is_final:
        cum[-1] = tail
    key = (t.tobytes(), cum.tobytes(), plan.allocations, plan.sides)
    hit = _DUNNETT_CACHE.get(key)
    if hit is None:
        from seqtest.core import multiarm
        prev = _dunnett_z(plan, t[:-1], False) if k > 1 else None
        hit = multiarm.dunnett_bounds(t, cum, list(plan.allocations), sides=plan.sides,
                                      previous=prev).z
        _put(_DUNNETT_CACHE, key, hit)
    return hit


@dataclass(frozen=True)
class Frames:
    """The looks each comparison is analysed at, common to the replicates of a call.

    Attributes
    ----------
    primary, guard : list of ndarray
        Per primary hypothesis (per guardrail comparison): its information fractions
        at the looks it can be analysed at (looks ``0 .. len - 1``).
    primary_final, guard_final : list of bool
        Whether the last of those looks is a final one (fraction 1 reached, or the
        last look declared final).
    control : ndarray or None
        Dunnett-type: the control's fractions (the common boundaries' looks).
    control_final : bool
    looks : int
        Looks in the data.
    """

    primary: list[np.ndarray]
    primary_final: list[bool]
    guard: list[np.ndarray]
    guard_final: list[bool]
    control: np.ndarray | None
    control_final: bool
    looks: int


class Boundaries:
    """Boundaries of each comparison on the frames' fractions (see the module
    docstring), computed once per comparison and level."""

    def __init__(self, plan: ExperimentPlan, frames: Frames) -> None:
        self.plan = plan
        self.frames = frames
        self.prim = plan.primaries
        self.guard = plan.guardrails
        self._keys = {id(c): _rule_key(c) for c in plan.comparisons}
        self._local: dict[tuple, Any] = {}

    def _dunnett(self) -> np.ndarray:
        key = ("dunnett",)
        if key not in self._local:
            t = self.frames.control
            assert t is not None
            self._local[key] = _dunnett_z(self.plan, t, self.frames.control_final)
        return self._local[key]

    def efficacy(self, p: int, level: float) -> np.ndarray:
        """Hypothesis ``p``'s efficacy boundary per analysable look at ``level``."""
        key = ("eff", p, round(level, 15))
        if key not in self._local:
            c = self.prim[p]
            t = self.frames.primary[p]
            if self.plan.dunnett is not None:
                z = self._dunnett()[: t.size]
            else:
                z = _gs_bounds(c, self._keys[id(c)], t, level,
                               self.frames.primary_final[p])[0]
            self._local[key] = z
        return self._local[key]

    def futility(self, p: int) -> np.ndarray | None:
        """Hypothesis ``p``'s futility boundary (at its own level), or None."""
        key = ("fut", p)
        if key not in self._local:
            c = self.prim[p]
            t = self.frames.primary[p]
            if c.plan.futility is None or t.size == 0:
                fut = None
            elif self.plan.dunnett is not None:
                full = self.frames.control
                assert full is not None
                eff = self._dunnett()
                fut = futility_bounds(full[: eff.size], c.plan.drift, eff, c.plan.sides,
                                      1.0 - c.plan.power, c.plan.futility, c.plan.r,
                                      final=self.frames.control_final)[: t.size]
            else:
                fut = _gs_bounds(c, self._keys[id(c)], t, c.plan.alpha,
                                 self.frames.primary_final[p])[1]
            self._local[key] = fut
        return self._local[key]

    def interval(self, p: int) -> np.ndarray:
        """Boundaries of hypothesis ``p``'s repeated intervals (its initial level, no
        futility)."""
        c = self.prim[p]
        t = self.frames.primary[p]
        eff = self.efficacy(p, c.level if c.level > 0 else 0.0)
        if self.plan.dunnett is None and c.plan.binding and t.size:
            return GroupSequentialRule(c.plan).interval_boundaries(
                t, eff, final=self.frames.primary_final[p])
        return eff

    def guardrail(self, g: int) -> np.ndarray:
        key = ("guard", g)
        if key not in self._local:
            c = self.guard[g]
            t = self.frames.guard[g]
            self._local[key] = (np.empty(0) if t.size == 0 else
                                _gs_bounds(c, self._keys[id(c)], t, c.level,
                                           self.frames.guard_final[g])[0])
        return self._local[key]


# ---------------------------------------------------------------------------------
# The decision rule, vectorised over replicates
# ---------------------------------------------------------------------------------

@dataclass
class Outcome:
    """What :func:`decide` found for each replicate.

    Attributes
    ----------
    arm_stop : ndarray of int, shape (R, k)
        0-based look at which each treatment arm stopped, -1 while it runs.
    arm_code : ndarray of int8, shape (R, k)
        Its decision code (:class:`~seqtest.core.vocabulary.Decision`).
    rejected : ndarray of int, shape (R, P)
        Look at which each primary hypothesis was rejected, -1 if not.
    level : ndarray, shape (R, P, J)
        Level in force for each hypothesis after each look's tests (nan where not
        tested).
    harm : ndarray of int, shape (R, G)
        Look at which each guardrail comparison crossed its harm boundary, -1 if not.
    """

    arm_stop: np.ndarray
    arm_code: np.ndarray
    rejected: np.ndarray
    level: np.ndarray
    harm: np.ndarray


def _codes(sides: int, eff: np.ndarray, fut: np.ndarray | None, z: np.ndarray) -> np.ndarray:
    """Decision codes of z values against per-row boundaries (the stopping rule of
    :class:`~seqtest.core.region.Region`)."""
    return Region.of_plan(sides, eff[:, None], None if fut is None else fut[:, None]
                          ).classify(z[:, None])[:, 0]


def decide(plan: ExperimentPlan, frames: Frames, zp: np.ndarray, okp: np.ndarray,
           zg: np.ndarray, okg: np.ndarray, bounds: Boundaries | None = None, *,
           obey_futility: bool = True) -> Outcome:
    """Decide the arms of ``R`` replicates of an experiment (module docstring).

    Parameters
    ----------
    plan : ExperimentPlan
    frames : Frames
    zp : ndarray, shape (R, P, J)
        Each primary hypothesis' z statistic, oriented (larger is better).
    okp : ndarray of bool, shape (R, P, J)
        Where ``zp`` may stop for efficacy (a look with no variance estimate may not).
    zg, okg : ndarray, shape (R, G, J)
        The same for the guardrail comparisons (larger is more harm).
    bounds : Boundaries, optional
        Shared boundary computations (made from ``frames`` if not given).
    obey_futility : bool
        Stop arms at their futility boundaries (``False`` shows what happens when the
        advice is not followed: the simulator's ``futility = "ignore"``).
    """
    bounds = bounds or Boundaries(plan, frames)
    r_n, n_p, n_j = zp.shape
    n_g = zg.shape[1]
    treatments = plan.treatments
    k = len(treatments)
    prim, guard = plan.primaries, plan.guardrails
    arm_p = np.array([treatments.index(c.arm) for c in prim], dtype=np.intp)
    arm_g = np.array([treatments.index(c.arm) for c in guard], dtype=np.intp)
    len_p = np.array([t.size for t in frames.primary], dtype=np.intp)
    len_g = np.array([t.size for t in frames.guard], dtype=np.intp)
    # the look at which each arm's primaries are all at their final look
    arm_final = np.full(k, n_j + 1, dtype=np.intp)
    for a in range(k):
        ends = [len_p[p] - 1 if frames.primary_final[p] else n_j + 1
                for p in range(n_p) if arm_p[p] == a]
        arm_final[a] = max(ends) if ends else n_j + 1
    live = np.ones((r_n, k), bool)
    arm_stop = np.full((r_n, k), -1, dtype=np.intp)
    arm_code = np.full((r_n, k), _CONTINUE, dtype=np.int8)
    rejected = np.full((r_n, n_p), -1, dtype=np.intp)
    harm = np.full((r_n, n_g), -1, dtype=np.intp)
    level_out = np.full((r_n, n_p, n_j), np.nan)
    graphical = plan.method == "graphical" or plan.dunnett is None
    w = np.broadcast_to(plan.weights, (r_n, n_p)).copy()
    g = np.broadcast_to(plan.transitions, (r_n, n_p, n_p)).copy()
    alpha = plan.alpha
    rows_all = np.arange(r_n)
    for j in range(n_j):
        # 1. guardrails
        harm_now = np.zeros((r_n, k), bool)
        for gi in range(n_g):
            if j >= len_g[gi]:
                continue
            a = arm_g[gi]
            c = bounds.guardrail(gi)[j]
            cross = live[:, a] & okg[:, gi, j] & (
                _codes(1, np.full(r_n, c), None, zg[:, gi, j]) == _EFFICACY)
            harm[:, gi] = np.where(cross & (harm[:, gi] < 0), j, harm[:, gi])
            harm_now[:, a] |= cross
        stop = live & harm_now
        arm_stop[stop] = j
        arm_code[stop] = _HARM
        live &= ~stop
        # 2. primaries
        testable = live[:, arm_p] & (rejected < 0) & (j < len_p)[None, :]
        if graphical:
            while True:
                new = np.zeros((r_n, n_p), bool)
                for p in range(n_p):
                    rows = np.flatnonzero(testable[:, p] & okp[:, p, j])
                    if rows.size == 0:
                        continue
                    lv = alpha * w[rows, p]
                    key = np.round(lv, 15)
                    for u in np.unique(key):
                        sel = rows[key == u]
                        eff = bounds.efficacy(p, float(u))[j]
                        code = _codes(plan.sides, np.full(sel.size, eff), None,
                                      zp[sel, p, j])
                        new[sel, p] = code == _EFFICACY
                if not new.any():
                    break
                pick = np.where(new.any(axis=1), np.argmax(new, axis=1), -1)
                got = pick >= 0
                rejected[rows_all[got], pick[got]] = j
                level_out[rows_all[got], pick[got], j] = alpha * w[rows_all[got], pick[got]]
                testable[rows_all[got], pick[got]] = False
                w, g = graph_update_many(w, g, pick)
            cur = np.where(testable, alpha * w, np.nan)
            level_out[:, :, j] = np.where(np.isnan(level_out[:, :, j]), cur,
                                          level_out[:, :, j])
        else:
            for p in range(n_p):
                rows = np.flatnonzero(testable[:, p] & okp[:, p, j])
                if rows.size == 0:
                    continue
                eff = bounds.efficacy(p, alpha)[j]
                code = _codes(plan.sides, np.full(rows.size, eff), None, zp[rows, p, j])
                hit = rows[code == _EFFICACY]
                rejected[hit, p] = j
            level_out[:, :, j] = np.where(testable | (rejected == j), alpha, np.nan)
        won = np.zeros((r_n, k), bool)
        for p in range(n_p):
            won[:, arm_p[p]] |= rejected[:, p] == j
        stop = live & won
        arm_stop[stop] = j
        arm_code[stop] = _EFFICACY
        live &= ~stop
        # 3. futility (advice) and 4. the final look
        futile = live.copy()
        has = np.zeros((r_n, k), bool)
        for p in range(n_p):
            a = arm_p[p]
            fut_b = bounds.futility(p)
            if j >= len_p[p] or fut_b is None or j >= arm_final[a]:
                futile[:, a] = False
                continue
            active = testable[:, p]
            code = _codes(plan.sides, np.full(r_n, np.inf), np.full(r_n, fut_b[j]),
                          zp[:, p, j])
            futile[:, a] &= ~active | (code == _FUTILITY)
            has[:, a] |= active
        futile &= has & obey_futility
        arm_stop[futile] = j
        arm_code[futile] = _FUTILITY
        live &= ~futile
        done = live & (arm_final == j)[None, :]
        arm_stop[done] = j
        arm_code[done] = _COMPLETE
        live &= ~done
        if not live.any():
            break
    return Outcome(arm_stop, arm_code, rejected, level_out, harm)


# ---------------------------------------------------------------------------------
# Results
# ---------------------------------------------------------------------------------

@dataclass(frozen=True)
class SampleRatio:
    """The sample-ratio check at one look: Pearson's chi-square of the arms' units
    (the control and the arms still running) against the planned allocation.

    Attributes
    ----------
    look : int
    arms : list of str
    observed : list of float
    expected : list of float
    statistic, p_value : float
        Chi-square with ``len(arms) - 1`` degrees of freedom, upper tail.
    mismatch : bool
        ``p_value < threshold``.
    """

    look: int
    arms: list[str]
    observed: list[float]
    expected: list[float]
    statistic: float
    p_value: float
    mismatch: bool


def srm_test(counts: Sequence[float], allocation: Sequence[float]
             ) -> tuple[float, float, np.ndarray]:
    """Pearson's chi-square goodness of fit of arm counts to planned shares
    proportional to ``allocation`` (Pearson 1900; ``k - 1`` degrees of freedom);
    returns the statistic, its upper-tail p-value (``scipy.special.chdtrc``) and the
    expected counts."""
    n = np.asarray(counts, float)
    share = np.asarray(allocation, float)
    share = share / share.sum()
    expected = n.sum() * share
    stat = float(np.sum((n - expected) ** 2 / expected))
    return stat, float(special.chdtrc(n.size - 1, stat)), expected


@dataclass(frozen=True)
class ComparisonResult:
    """One comparison's analysis (a treatment against the control on one metric).

    Attributes
    ----------
    arm, metric, role : str
        ``role``: ``primary`` or ``guardrail``.
    metric_kind, scale, test_scale : str
    orientation : float
        +1 or -1: the test rejects when ``orientation * z >= efficacy_z`` (one-sided),
        ``|z| >= efficacy_z`` (two-sided); ``z`` is the effect's own statistic
        (treatment minus control, against the null ``margin``), so a primary where
        lower is better, or a guardrail where higher is better (harm is a decrease),
        has orientation -1.
    margin : float
        The null value of the effect on the metric's scale (signed, as the metric's).
    decision : Decision
        The comparison's own: ``stop_efficacy`` (a primary rejected), ``stop_harm``
        (a guardrail crossed), ``stop_futility``, ``complete_not_significant``, or
        ``continue`` (also for a comparison whose arm stopped for another reason: see
        :attr:`arm_decision`).
    arm_decision : Decision
        The arm's decision.
    direction : str or None
        At a rejection: ``treatment_better``, ``treatment_non_inferior`` (a
        non-inferiority primary) or ``control_better`` in the metric's own sense
        (which way is good is its ``better``); for a guardrail crossing ``harm``.
    stopped_at : int or None
        1-based look of the arm's stop.
    level : float
        Local alpha in force at the last analysed look (graphical: after the
        alpha passed on; Dunnett: the family's; guardrails: their own).
    looks : list of LookResult
        The comparison's looks, up to its arm's stop; ``efficacy_z`` at the level in
        force at each look, ``interval_*`` the repeated interval.
    final : FinalInference or None
        Adjusted inference at the arm's stop (see the module docstring).
    adjusted_p : float or None
        Multiplicity-adjusted p-value at the stop (primaries).
    inference_level : float or None
        The level of :attr:`final`'s interval.
    """

    arm: str
    metric: str
    role: str
    metric_kind: str
    scale: str
    test_scale: str
    orientation: float
    margin: float
    decision: Decision
    arm_decision: Decision
    direction: str | None
    stopped_at: int | None
    level: float
    looks: list[LookResult]
    final: FinalInference | None
    adjusted_p: float | None
    inference_level: float | None


@dataclass(frozen=True)
class ArmResult:
    """One treatment arm's decision.

    Attributes
    ----------
    arm : str
    decision : Decision
    stopped_at : int or None
        1-based look.
    winner : bool
        Stopped for efficacy with every rejected primary in its better direction and
        no guardrail crossed.
    rejected : list of str
        Primary metrics rejected for this arm.
    harmed : list of str
        Guardrails crossed.
    reason : str
    """

    arm: str
    decision: Decision
    stopped_at: int | None
    winner: bool
    rejected: list[str]
    harmed: list[str]
    reason: str


@dataclass(frozen=True)
class ExperimentAnalysis:
    """The analysis of an experiment's looks (see :func:`analyze_experiment`).

    ``to_dict()`` is the stable JSON form (for the service and files): ``kind``
    (``"experiment"``), ``decision``, ``reason`` (``winners``, ``worse``,
    ``stop_harm``, ``stop_futility``, ``complete_not_significant``, ``continue``: arm
    names), ``reason_text``, ``arms`` (per arm: ``arm``, ``decision``, ``stopped_at``,
    ``winner``, ``rejected``, ``harmed``, ``reason``), ``comparisons`` (per comparison
    the fields of :class:`ComparisonResult`, its looks as the two-arm analysis writes
    them), ``srm`` (per look), ``sample_ratio_mismatch`` (looks), ``warnings``,
    ``method``, ``alpha``, ``sides``, ``looks`` (count), ``caution``.

    Attributes
    ----------
    decision : Decision
        ``continue`` while any arm runs; else ``stop_efficacy`` when an arm won,
        ``stop_harm`` when none won and one stopped for harm, ``complete_not_significant``
        when an arm reached the end, ``stop_futility`` when all were dropped, and
        ``stop_efficacy`` when arms were found worse than the control and no other
        reason applies.
    reason : dict
        Arm names by outcome.
    reason_text : str
    arms : list of ArmResult
    comparisons : list of ComparisonResult
    srm : list of SampleRatio
    warnings : list of str
    method : str
    alpha : float
    sides : int
    looks : int
    """

    decision: Decision
    reason: dict[str, list[str]]
    reason_text: str
    arms: list[ArmResult]
    comparisons: list[ComparisonResult]
    srm: list[SampleRatio]
    warnings: list[str]
    method: str
    alpha: float
    sides: int
    looks: int
    srm_threshold: float = 0.001
    caution: str = CAUTION
    kind: str = "experiment"

    @property
    def sample_ratio_mismatch(self) -> list[int]:
        return [s.look for s in self.srm if s.mismatch]

    def arm(self, name: str) -> ArmResult:
        for a in self.arms:
            if a.arm == name:
                return a
        raise checks.fail("arm", name, "one of " + ", ".join(a.arm for a in self.arms))

    def comparison(self, arm: str, metric: str) -> ComparisonResult:
        for c in self.comparisons:
            if c.arm == arm and c.metric == metric:
                return c
        raise checks.fail("comparison", f"{arm}/{metric}", "an arm/metric of the plan")

    def to_dict(self) -> dict:
        """Plain JSON types (see the class docstring for the keys)."""
        out = jsonable.plain(self)
        out["sample_ratio_mismatch"] = self.sample_ratio_mismatch
        return out


# ---------------------------------------------------------------------------------
# Reading the looks
# ---------------------------------------------------------------------------------

def _arm_name(plan: ExperimentPlan, name: Any, look: int) -> str:
    if isinstance(name, str):
        if name in plan.arms:
            return name
        for a in plan.arms:
            if _key(a) == _key(name):
                return a
    raise LookDataError(f"unknown arm {name!r}; the plan's arms are "
                        f"{', '.join(plan.arms)}", look=look, arm=str(name))


def _metric_name(plan: ExperimentPlan, name: Any, look: int) -> str:
    names = [m.name for m in plan.metrics]
    if isinstance(name, str):
        if name in names:
            return name
        for m in names:
            if _key(m) == _key(name):
                return m
    raise LookDataError(f"unknown metric {name!r}; the plan's metrics are "
                        f"{', '.join(names)}", look=look, field="metric",
                        metric=str(name))


def _normalise(plan: ExperimentPlan, looks: Any) -> list[dict[str, dict[str, Mapping]]]:
    """Per look ``{metric: {arm: totals}}`` from any accepted form (see
    :func:`analyze_experiment`)."""
    from seqtest.monitoring.lookfile import ArmLooks, read_arm_looks
    names = [m.name for m in plan.metrics]
    if not isinstance(looks, (list, tuple, ArmLooks)) and hasattr(looks, "columns"):
        if len(names) != 1:
            raise LookDataError("a table of looks holds one metric; an experiment with "
                                f"several metrics ({', '.join(names)}) takes a list of "
                                "looks {metric: {arm: totals}}")
        looks = read_arm_looks(looks, plan.metrics[0].kind, control=plan.control)
    if isinstance(looks, ArmLooks):
        if len(names) != 1:
            raise LookDataError("a table of looks holds one metric; an experiment with "
                                f"several metrics ({', '.join(names)}) takes a list of "
                                "looks {metric: {arm: totals}}")
        if _key(looks.control) != _key(plan.control):
            raise LookDataError(f"the table's control is {looks.control!r} but the plan's is "
                                f"{plan.control!r}; name it with control=",
                                arm=looks.control)
        looks = looks.looks
    if isinstance(looks, (Mapping, str, bytes)) or not isinstance(looks, Sequence):
        raise LookDataError("looks must be a list of looks, one per look in order")
    if not looks:
        raise LookDataError("looks is empty; give at least one look")
    out: list[dict[str, dict[str, Mapping]]] = []
    for j, look in enumerate(looks, start=1):
        per: dict[str, dict[str, Mapping]] = {}
        if isinstance(look, Mapping):
            keys = list(look)
            arm_keys = all(_is_arm(plan, x) for x in keys)
            if arm_keys and len(names) == 1:
                per[names[0]] = _arms_of(plan, look, j, names[0])
            else:
                for x in keys:
                    if _is_arm(plan, x) and len(names) > 1:
                        raise LookDataError(
                            f"arm {x!r} at the top of the look; an experiment with several "
                            f"metrics takes each look as {{metric: {{arm: totals}}}} "
                            f"(metrics {', '.join(names)})", look=j, arm=str(x))
                    m = _metric_name(plan, x, j)
                    if m in per:
                        raise LookDataError(f"metric {m!r} posted twice", look=j,
                                            field="metric", metric=m)
                    val = look[x]
                    if not isinstance(val, Mapping):
                        raise LookDataError(f"metric {m!r}: expected a mapping {{arm: "
                                            f"totals}}, got {type(val).__name__}", look=j,
                                            metric=m)
                    per[m] = _arms_of(plan, val, j, m)
        elif isinstance(look, Sequence) and not isinstance(look, (str, bytes)):
            for row in look:
                if not isinstance(row, Mapping) or "arm" not in row:
                    raise LookDataError("each row of a look names its arm ('arm') and, "
                                        "with several metrics, its metric ('metric')",
                                        look=j)
                mm = (_metric_name(plan, row["metric"], j) if "metric" in row
                      else names[0] if len(names) == 1 else None)
                if mm is None:
                    raise LookDataError(f"row of arm {row['arm']!r} names no metric; the "
                                        f"metrics are {', '.join(names)}", look=j,
                                        arm=str(row["arm"]), field="metric")
                arm = _arm_name(plan, row["arm"], j)
                per.setdefault(mm, {})
                if arm in per[mm]:
                    raise LookDataError(f"metric {mm!r}: the arm is posted twice at this "
                                        "look; allowed is one row per arm and metric",
                                        look=j, arm=arm, metric=mm)
                per[mm][arm] = {kk: v for kk, v in row.items() if kk not in ("arm", "metric")}
        else:
            raise LookDataError(f"expected a mapping of arms (or metrics) or a list of rows, "
                                f"got {type(look).__name__}", look=j)
        out.append(per)
    return out


def _is_arm(plan: ExperimentPlan, name: Any) -> bool:
    return isinstance(name, str) and any(_key(a) == _key(name) for a in plan.arms)


def _arms_of(plan: ExperimentPlan, look: Mapping, j: int, metric: str) -> dict[str, Mapping]:
    out: dict[str, Mapping] = {}
    for x, totals in look.items():
        arm = _arm_name(plan, x, j)
        if arm in out:
            raise LookDataError(f"metric {metric!r}: the arm is posted twice (names that "
                                "differ only in letter case or separators)", look=j, arm=arm,
                                metric=metric)
        if not isinstance(totals, Mapping):
            raise LookDataError(f"metric {metric!r}: expected a mapping of totals, got "
                                f"{type(totals).__name__}", look=j, arm=arm, metric=metric)
        out[arm] = totals
    return out


@dataclass
class _Series:
    """One comparison's data over the looks its arm was posted at."""

    idx: np.ndarray                  # 0-based looks with the arm posted
    eff: metrics.Effect
    totals: dict[str, dict[str, np.ndarray]]   # "control", "treatment" -> arrays


def _validate(plan: ExperimentPlan, data: list[dict[str, dict[str, Mapping]]]
              ) -> tuple[dict[tuple[str, str], _Series], dict[str, dict[str, np.ndarray]]]:
    """Check every metric's totals (cumulative per arm over the looks it was posted,
    dropped arms included) and compute each comparison's effect; also the control's
    canonical totals per metric."""
    n_j = len(data)
    out: dict[tuple[str, str], _Series] = {}
    controls: dict[str, dict[str, np.ndarray]] = {}
    for m in plan.metrics:
        ctrl = []
        for j in range(n_j):
            got = data[j].get(m.name)
            if got is None:
                raise LookDataError(f"metric {m.name!r} is missing; every look needs the "
                                    "totals of every metric", look=j + 1, field="metric",
                                    metric=m.name)
            if plan.control not in got:
                raise LookDataError(f"metric {m.name!r}: the control's totals are missing; "
                                    "every look needs them", look=j + 1, arm=plan.control,
                                    metric=m.name)
            ctrl.append(got[plan.control])
        controls[m.name] = _checked(m.kind, [{"control": c, "treatment": c} for c in ctrl],
                                    list(range(n_j)), plan.control, plan.control,
                                    m.name)["control"]
        for arm in plan.treatments:
            idx = [j for j in range(n_j) if arm in data[j][m.name]]
            if not idx:
                continue
            pairs = [{"control": ctrl[j], "treatment": data[j][m.name][arm]} for j in idx]
            arrays = _checked(m.kind, pairs, idx, plan.control, arm, m.name)
            eff = metrics.effect(m.kind, arrays["control"], arrays["treatment"],
                                 scale=m.scale, null=m.null)
            out[(arm, m.name)] = _Series(np.asarray(idx), eff, arrays)
    return out, controls


def _checked(kind: str, pairs: list[dict], idx: list[int], control: str, arm: str,
             metric: str) -> dict[str, dict[str, np.ndarray]]:
    try:
        return metrics.validate_looks(kind, pairs)
    except LookDataError as exc:
        look = None if exc.look is None else idx[exc.look - 1] + 1
        who = {"control": control, "treatment": arm}.get(exc.arm or "", exc.arm)
        prev = ""
        if "at look" in exc.detail and exc.look is not None and exc.look > 1:
            prev = f" (the arm's previous posted look was {idx[exc.look - 2] + 1})"
        raise LookDataError(f"metric {metric!r}: {exc.detail}{prev}", look=look, arm=who,
                            field=exc.field, metric=metric) from None


# ---------------------------------------------------------------------------------
# The analysis
# ---------------------------------------------------------------------------------

def _frames(plan: ExperimentPlan, series: dict[tuple[str, str], _Series], n_j: int,
            final: bool, controls: dict[str, dict[str, np.ndarray]]
            ) -> tuple[Frames, dict[str, tuple[int, str]]]:
    """Each comparison's fractions up to the first look it cannot be analysed at, and
    why it stops there (for the check that its arm had stopped by then)."""
    stops: dict[str, tuple[int, str]] = {}

    def cut(full: np.ndarray) -> tuple[int, str]:
        for j in range(n_j):
            if np.isnan(full[j]):
                return j, "missing"
            if j and full[j] <= full[j - 1]:
                return j, "not growing"
            if full[j] >= 1.0:
                return j + 1, ""
        return n_j, ""

    def frame(c: Comparison) -> tuple[np.ndarray, bool]:
        s = series.get((c.arm, c.metric))
        max_n = plan.max_n(c.metric, plan.control) + plan.max_n(c.metric, c.arm)
        full = np.full(n_j, np.nan)
        if s is not None:
            full[s.idx] = (np.asarray(s.eff.n_control, float)
                           + np.asarray(s.eff.n_treatment, float)) / max_n
        end, why = cut(full)
        t = full[:end]
        if why:
            stops[f"{c.role}/{c.arm}/{c.metric}"] = (end, why)
        return t, bool(end > 0 and (t[-1] >= 1.0 or (end == n_j and final)))

    prim = [frame(c) for c in plan.primaries]
    guard = [frame(c) for c in plan.guardrails]
    control = None
    control_final = False
    if plan.dunnett is not None:
        m = plan.primaries[0].metric
        size = "exposure" if plan.metric_by_name(m).kind == "rate" else "n"
        full = np.asarray(controls[m][size], float) / plan.max_n(m, plan.control)
        end, why = cut(full)
        if why:
            stops["control"] = (end, why)
        control = full[:end]
        control_final = bool(end > 0 and (control[-1] >= 1.0 or (end == n_j and final)))
        prim = [(t[: min(t.size, end)], bool(control_final and t.size >= end))
                for t, _ in prim]
    return Frames([t for t, _ in prim], [f for _, f in prim], [t for t, _ in guard],
                  [f for _, f in guard], control, control_final, n_j), stops


def _oriented(plan: ExperimentPlan, series: dict[tuple[str, str], _Series], cs: tuple,
              n_j: int) -> tuple[np.ndarray, np.ndarray]:
    z = np.zeros((1, len(cs), n_j))
    ok = np.zeros((1, len(cs), n_j), bool)
    for i, c in enumerate(cs):
        s = series.get((c.arm, c.metric))
        if s is None:
            continue
        m = plan.metric_by_name(c.metric)
        z[0, i, s.idx] = m.orientation * np.atleast_1d(np.asarray(s.eff.z, float))
        ok[0, i, s.idx] = ~np.atleast_1d(np.asarray(s.eff.degenerate, bool))
    return z, ok


def analyze_experiment(plan: ExperimentPlan, looks: Any, *, final: bool = False,
                       srm_threshold: float = 0.001) -> ExperimentAnalysis:
    """Analyse an experiment's looks under its plan.

    Parameters
    ----------
    plan : ExperimentPlan
    looks : list, ArmLooks or DataFrame
        Cumulative totals per look, in order. A look is ``{arm: totals}`` (an
        experiment with one metric), ``{metric: {arm: totals}}``, or a list of rows
        ``{"arm": ..., "metric": ..., <totals>}``; totals per metric kind as in
        :mod:`seqtest.monitoring.metrics`. Every look has the control and every arm
        still running; an arm that stopped may still be posted (its totals are checked,
        cumulative, and not analysed). A table of looks (:func:`seqtest.read_arm_looks`,
        either layout) holds one metric.
    final : bool
        Declare the last look final: it spends all the alpha left.
    srm_threshold : float
        p-value below which the sample-ratio check reports a mismatch.

    Returns
    -------
    ExperimentAnalysis

    Raises
    ------
    seqtest.LookDataError
        Naming the look, arm, metric and field: an unknown arm or metric, an arm
        posted twice, the control missing, an arm still running missing, totals that
        go backwards (a dropped arm's too), invalid totals.
    """
    if not isinstance(plan, ExperimentPlan):
        raise checks.fail("plan", type(plan).__name__, "an ExperimentPlan")
    final = checks.boolean("final", final)
    srm_threshold = checks.probability("srm_threshold", srm_threshold)
    data = _normalise(plan, looks)
    n_j = len(data)
    series, controls = _validate(plan, data)
    frames, trunc = _frames(plan, series, n_j, final, controls)
    bounds = Boundaries(plan, frames)
    zp, okp = _oriented(plan, series, plan.primaries, n_j)
    zg, okg = _oriented(plan, series, plan.guardrails, n_j)
    out = decide(plan, frames, zp, okp, zg, okg, bounds)
    treatments = plan.treatments
    stop_of = {a: int(out.arm_stop[0, i]) for i, a in enumerate(treatments)}
    # an arm still running at a look it cannot be analysed at is bad data
    hit_c = trunc.get("control")
    if hit_c is not None:
        look, _ = hit_c
        if any(s == -1 or s >= look for s in stop_of.values()):
            raise LookDataError("the control's users did not grow; a look needs new data "
                                "while an arm is running", look=look + 1, arm=plan.control)
    for c in plan.comparisons:
        hit = trunc.get(f"{c.role}/{c.arm}/{c.metric}")
        if hit is None:
            continue
        look, why = hit
        s = stop_of[c.arm]
        if s == -1 or s >= look:
            if why == "missing":
                raise LookDataError(f"metric {c.metric!r}: the arm's totals are missing, and "
                                    "it was still running (every look needs the control and "
                                    "every arm that has not stopped)", look=look + 1, arm=c.arm,
                                    metric=c.metric)
            raise LookDataError(f"metric {c.metric!r}: the arm's information fraction did not "
                                "grow; a look needs new data for every arm still running",
                                look=look + 1, arm=c.arm, metric=c.metric)
    warnings: list[str] = list(plan.notes)
    comps = _comparison_results(plan, series, frames, bounds, out, warnings)
    arms = _arm_results(plan, out, comps)
    srm = _srm(plan, data, out, srm_threshold, warnings)
    decision, reason, text = _experiment_decision(plan, arms)
    return ExperimentAnalysis(decision, reason, text, arms, comps, srm, warnings,
                              plan.method, plan.alpha, plan.sides, n_j, srm_threshold)


def _comparison_results(plan: ExperimentPlan, series: dict[tuple[str, str], _Series],
                        frames: Frames, bounds: Boundaries, out: Outcome,
                        warnings: list[str]) -> list[ComparisonResult]:
    results = []
    treatments = plan.treatments
    for role, cs, ts in (("primary", plan.primaries, frames.primary),
                         ("guardrail", plan.guardrails, frames.guard)):
        for i, c in enumerate(cs):
            m = plan.metric_by_name(c.metric)
            a = treatments.index(c.arm)
            arm_stop = int(out.arm_stop[0, a])
            arm_code = decision_from_code(out.arm_code[0, a])
            t = ts[i]
            last = t.size if arm_stop < 0 else min(t.size, arm_stop + 1)
            s = series.get((c.arm, c.metric))
            # the fractions the boundaries are computed on
            t_b = (frames.control[:last] if role == "primary" and frames.control is not None
                   else t[:last])
            if role == "primary":
                rej = int(out.rejected[0, i])
                lv = out.level[0, i, :last].copy()
                for j in range(lv.size):   # the level in force where it was not tested
                    if not np.isfinite(lv[j]):
                        lv[j] = lv[j - 1] if j else c.level
                eff_z = np.array([bounds.efficacy(i, float(x))[j] for j, x in enumerate(lv)])
                fut = bounds.futility(i)
                fut_z = None if fut is None else fut[:last]
                crit = bounds.interval(i)
                sides = plan.sides
                if rej >= 0:
                    code = _EFFICACY
                elif arm_code in (Decision.STOP_FUTILITY, Decision.COMPLETE):
                    code = arm_code.code
                else:
                    code = _CONTINUE
                level_now = float(lv[-1]) if last else c.level
                stop_bounds = (bounds.efficacy(i, level_now)[:last] if last
                               else np.empty(0))
            else:
                hj = int(out.harm[0, i])
                eff_z = bounds.guardrail(i)[:last]
                fut_z = None
                crit = bounds.guardrail(i)
                sides = 1
                code = _HARM if hj >= 0 else (_COMPLETE if arm_code == Decision.COMPLETE
                                              else _CONTINUE)
                level_now = c.level
                stop_bounds = eff_z
            looks_ = [] if s is None else _look_results(plan, c, m, s, t_b, eff_z, fut_z,
                                                        crit, sides, out, i, role)
            direction = None
            if code == _EFFICACY and s is not None:
                zo = m.orientation * float(np.atleast_1d(s.eff.z)[_pos(s, rej)])
                direction = ("control_better" if zo <= 0 else "treatment_non_inferior"
                             if m.hypothesis == "non_inferiority" else "treatment_better")
            elif code == _HARM:
                direction = "harm"
            fin = adj = inf_level = None
            if arm_stop >= 0 and s is not None and last > 0:
                fin, adj, inf_level = _final(plan, c, m, s, t_b, stop_bounds, fut_z,
                                             last - 1, role, level_now, warnings)
            results.append(ComparisonResult(
                arm=c.arm, metric=c.metric, role=role, metric_kind=m.kind, scale=m.scale,
                test_scale=m.test_scale, orientation=m.orientation, margin=m.margin,
                decision=decision_from_code(code), arm_decision=arm_code,
                direction=direction, stopped_at=None if arm_stop < 0 else arm_stop + 1,
                level=level_now, looks=looks_, final=fin, adjusted_p=adj,
                inference_level=inf_level))
    return results


def _pos(s: _Series, look: int) -> int:
    """Position in the series of a 0-based look."""
    return int(np.flatnonzero(s.idx == look)[0])


def _look_results(plan: ExperimentPlan, c: Comparison, m: Any, s: _Series, t: np.ndarray,
                  eff_z: np.ndarray, fut_z: np.ndarray | None, crit: np.ndarray,
                  sides: int, out: Outcome, i: int, role: str) -> list[LookResult]:
    eff = s.eff

    def col(x: Any) -> np.ndarray:
        return np.atleast_1d(np.asarray(x, float))

    n = t.size
    z = col(eff.z)[:n]
    zo = m.orientation * z
    # repeated intervals at the initial level: two-sided, or one-sided in the test's
    # direction (the far end open)
    c_int = np.concatenate([crit[:n], np.full(col(eff.z).size - n, np.inf)])
    # one-sided upward: the lower limit alone (half the work for score statistics)
    lo, hi = eff.interval(c_int, 1 if sides == 1 and m.orientation > 0 else 2)
    lo, hi = col(lo)[:n], col(hi)[:n]
    if sides == 1:
        if m.orientation > 0:
            hi = np.full(n, np.inf)
        else:
            lo = np.full(n, -np.inf)
    kind = m.kind
    small = metrics.small_sample(kind, {"control": {f: v[:n] for f, v in
                                                    s.totals["control"].items()},
                                        "treatment": {f: v[:n] for f, v in
                                                      s.totals["treatment"].items()}})
    unadj = sides * special.ndtr(-np.abs(zo)) if sides == 2 else special.ndtr(-zo)
    rows = []
    arm_stop = int(out.arm_stop[0, plan.treatments.index(c.arm)])
    for j in range(n):
        if role == "primary":
            rej = int(out.rejected[0, i])
            code = _EFFICACY if rej == j else (
                decision_from_code(out.arm_code[0, plan.treatments.index(c.arm)]).code
                if j == arm_stop and out.arm_code[0, plan.treatments.index(c.arm)]
                in (_FUTILITY, _COMPLETE) else _CONTINUE)
        else:
            code = _HARM if int(out.harm[0, i]) == j else (
                _COMPLETE if j == arm_stop and out.arm_code[0, plan.treatments.index(c.arm)]
                == _COMPLETE else _CONTINUE)
        e = float(eff_z[j])
        rows.append(LookResult(
            look=int(s.idx[j]) + 1, n_control=float(col(eff.n_control)[j]),
            n_treatment=float(col(eff.n_treatment)[j]),
            control_value=float(col(eff.control_value)[j]),
            treatment_value=float(col(eff.treatment_value)[j]),
            estimate=float(col(eff.estimate)[j]), test_estimate=float(col(eff.test_estimate)[j]),
            se=float(col(eff.test_se)[j]), z=float(z[j]),
            skewness=float(np.broadcast_to(col(eff.skewness), col(eff.z).shape)[j]),
            information=float(col(eff.information)[j]), information_fraction=float(t[j]),
            efficacy_z=e, futility_z=None if fut_z is None else float(fut_z[j]),
            p_threshold=float(sides * special.ndtr(-e)) if math.isfinite(e) else 0.0,
            unadjusted_p=float(unadj[j]), interval_lower=float(lo[j]),
            interval_upper=float(hi[j]), decision=decision_from_code(code),
            srm_p_value=None, small_sample=bool(small[j])))
    return rows


def _final(plan: ExperimentPlan, c: Comparison, m: Any, s: _Series, t: np.ndarray,
           eff_z: np.ndarray, fut_z: np.ndarray | None, j: int, role: str, level: float,
           warnings: list[str]
           ) -> tuple[FinalInference | None, float | None, float | None]:
    """Adjusted inference at the stopping look ``j`` (see the module docstring):
    ``eff_z`` are the boundaries of the level in force at the stop, on the fractions
    ``t`` they were computed on."""
    eff = s.eff

    def col(x: Any) -> np.ndarray:
        return np.atleast_1d(np.asarray(x, float))

    if bool(np.atleast_1d(np.asarray(eff.degenerate, bool))[j]):
        warnings.append(f"{c.arm}/{c.metric}, look {int(s.idx[j]) + 1}: no variation in "
                        "either arm, so no adjusted p-value or interval")
        return None, None, None
    o = m.orientation
    z = o * col(eff.z)[: j + 1]
    if abs(z[j]) > _Z_INFERENCE_MAX:
        warnings.append(f"{c.arm}/{c.metric}, look {int(s.idx[j]) + 1}: |z| = "
                        f"{abs(z[j]):.1f} is beyond {_Z_INFERENCE_MAX:g}; no adjusted "
                        "inference (check the totals)")
        return None, None, None
    sides = plan.sides if role == "primary" else 1
    if role == "primary" and plan.dunnett is None and level <= 0:
        return None, 1.0, 0.0   # a hypothesis that never received any alpha
    a = eff_z[: j + 1].copy()
    if np.any(~np.isfinite(a)):
        a = np.where(np.isfinite(a), a, np.inf)
    binding = role == "primary" and plan.binding and fut_z is not None
    region = Region.of_plan(sides, a, fut_z[: j + 1] if binding and fut_z is not None
                            else None)
    adj = None
    if role == "primary" and plan.dunnett is not None:
        # the comparisons' marginal level at the common boundaries, and the family's
        cr = region.crossing(t[: j + 1], 0.0, plan.r)
        inf_level = float(sides * cr.upper.sum())
        bounds_fw = a.copy()
        bounds_fw[j] = abs(z[j]) if sides == 2 else z[j]
        from seqtest.core import multiarm
        fam = multiarm.multiarm_crossing(bounds_fw, t[: j + 1], list(plan.allocations),
                                         sides=sides)
        adj = float(min(1.0, fam.cumulative[-1]))
    elif role == "primary":
        inf_level = level
    else:
        inf_level = c.level
    info = t[: j + 1] * (float(col(eff.information)[j]) / t[j])
    sw = inference.stagewise(z, info, region, alpha=inf_level, sides=sides, r=plan.r)
    if role == "primary" and plan.dunnett is None:
        adj = float(min(1.0, sw.p_value * plan.alpha / level)) if level > 0 else 1.0
    th_scale = 1.0 / float(col(eff.test_se)[j]) ** 2 / info[-1]
    ts = eff.test_scale
    null_t = null_on_test_scale(eff.null, ts)

    def back(theta: float) -> float:
        return float(from_test_scale(null_t + o * theta / math.sqrt(th_scale), ts))

    lo, hi = back(sw.ci_lower), back(sw.ci_upper)
    if o < 0:
        lo, hi = hi, lo
    crit = float(-special.ndtri(inf_level / sides))
    nlo, nhi = eff.interval(crit, 2)
    n_lo, n_hi = float(col(nlo)[j]), float(col(nhi)[j])
    if sides == 1:
        n_lo, n_hi = (n_lo, math.inf) if o > 0 else (-math.inf, n_hi)
    zo = z[j]
    naive_p = float(sides * special.ndtr(-abs(zo)) if sides == 2 else special.ndtr(-zo))
    fin = FinalInference(p_value=float(sw.p_value), ci_lower=lo, ci_upper=hi,
                         median_unbiased=back(sw.median_unbiased),
                         naive_estimate=float(col(eff.estimate)[j]), naive_ci_lower=n_lo,
                         naive_ci_upper=n_hi, naive_p_value=naive_p)
    return fin, adj, inf_level


def _arm_results(plan: ExperimentPlan, out: Outcome, comps: list[ComparisonResult]
                 ) -> list[ArmResult]:
    res = []
    for i, arm in enumerate(plan.treatments):
        code = decision_from_code(out.arm_code[0, i])
        stop = int(out.arm_stop[0, i])
        mine = [c for c in comps if c.arm == arm]
        rejected = [c.metric for c in mine if c.role == "primary"
                    and c.decision == Decision.STOP_EFFICACY]
        harmed = [c.metric for c in mine if c.role == "guardrail"
                  and c.decision == Decision.STOP_HARM]
        worse = [c.metric for c in mine if c.role == "primary"
                 and c.direction == "control_better"]
        winner = code == Decision.STOP_EFFICACY and not worse
        look = f"look {stop + 1}"
        if code == Decision.STOP_HARM:
            reason = (f"{arm} crossed the harm boundary of {', '.join(harmed)} at {look}: "
                      "stop it, whatever the primaries say")
        elif code == Decision.STOP_EFFICACY and winner:
            ni = [c.metric for c in mine if c.role == "primary"
                  and c.direction == "treatment_non_inferior"]
            sup = [x for x in rejected if x not in ni]
            shown = [f"better than {plan.control} on {', '.join(sup)}"] if sup else []
            if ni:
                shown.append(f"not worse than {plan.control} by more than the margin on "
                             f"{', '.join(ni)}")
            reason = f"{arm} is {' and '.join(shown)} at {look}, with no guardrail crossed"
        elif code == Decision.STOP_EFFICACY:
            reason = (f"{arm} is worse than {plan.control} on {', '.join(worse)} at {look}")
        elif code == Decision.STOP_FUTILITY:
            reason = (f"{arm} crossed the futility boundary at {look}: dropping it is "
                      "advised (non-binding: the other arms' error holds either way); it "
                      "is not analysed further")
        elif code == Decision.COMPLETE:
            reason = f"{arm} reached its final look ({look}) without significance"
        else:
            reason = f"{arm} continues"
        res.append(ArmResult(arm, code, None if stop < 0 else stop + 1, bool(winner),
                             rejected, harmed, reason))
    return res


def _experiment_decision(plan: ExperimentPlan, arms: list[ArmResult]
                         ) -> tuple[Decision, dict[str, list[str]], str]:
    reason: dict[str, list[str]] = {
        "winners": [a.arm for a in arms if a.winner],
        "worse": [a.arm for a in arms if a.decision == Decision.STOP_EFFICACY
                  and not a.winner],
        "stop_harm": [a.arm for a in arms if a.decision == Decision.STOP_HARM],
        "stop_futility": [a.arm for a in arms if a.decision == Decision.STOP_FUTILITY],
        "complete_not_significant": [a.arm for a in arms if a.decision == Decision.COMPLETE],
        "continue": [a.arm for a in arms if a.decision == Decision.CONTINUE],
    }
    parts = []
    for key, text in (("winners", "better than the control"), ("worse", "worse than the "
                      "control"), ("stop_harm", "stopped for harm"),
                      ("stop_futility", "dropped for futility"),
                      ("complete_not_significant", "completed without significance"),
                      ("continue", "still running")):
        if reason[key]:
            parts.append(f"{', '.join(reason[key])}: {text}")
    if reason["continue"]:
        decision = Decision.CONTINUE
        head = "The experiment continues"
    elif reason["winners"]:
        decision = Decision.STOP_EFFICACY
        head = "The experiment is over: an arm won"
    elif reason["stop_harm"]:
        decision = Decision.STOP_HARM
        head = "The experiment is over: no arm won, and harm was found"
    elif reason["complete_not_significant"]:
        decision = Decision.COMPLETE
        head = "The experiment is over without a winner"
    elif reason["stop_futility"] and not reason["worse"]:
        decision = Decision.STOP_FUTILITY
        head = "The experiment is over: every arm was dropped for futility"
    else:
        decision = Decision.STOP_EFFICACY
        head = "The experiment is over: no arm is better than the control"
    return decision, reason, f"{head} ({'; '.join(parts)})."


def _srm(plan: ExperimentPlan, data: list[dict[str, dict[str, Mapping]]], out: Outcome,
         threshold: float, warnings: list[str]) -> list[SampleRatio]:
    """Pearson's chi-square per look on the control and the arms still running at it
    (units of the first metric counted in users)."""
    m = next((x for x in plan.metrics if x.kind != "rate"), None)
    if m is None:
        return []
    res = []
    for j, look in enumerate(data):
        got = look[m.name]
        arms = [plan.control] + [a for i, a in enumerate(plan.treatments)
                                 if (out.arm_stop[0, i] < 0 or out.arm_stop[0, i] >= j)
                                 and a in got]
        if len(arms) < 2:
            continue
        try:
            counts = [float(got[a]["n"]) for a in arms]
        except (KeyError, TypeError, ValueError):
            continue
        if sum(counts) <= 0:
            continue
        stat, p, exp = srm_test(counts, [plan.allocation(a) for a in arms])
        mismatch = p < threshold
        if mismatch:
            share = ", ".join(f"{a} {n / sum(counts):.2%} (planned {e / sum(counts):.2%})"
                              for a, n, e in zip(arms, counts, exp, strict=True))
            warnings.append(f"look {j + 1}: sample ratio mismatch across the arms ({share}; "
                            f"chi-square {stat:.3g} with {len(arms) - 1} df, p = {p:.3g}, "
                            f"below {threshold:g}): the units did not split as planned; "
                            "find the cause before trusting any decision")
        res.append(SampleRatio(j + 1, arms, counts, [float(x) for x in exp], stat, p,
                               bool(mismatch)))
    return res


