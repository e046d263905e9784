"""Adjusted inference for a group-sequential test.

Everything here is on the canonical scale of :mod:`seqtest.core.recursion`: at look
``k`` the statistic is ``Z_k`` with mean ``theta * sqrt(I_k)``, where ``theta`` is
the effect in the units of the estimate and ``I_k = 1 / se_k^2`` its information.

- Repeated confidence intervals (Jennison and Turnbull 1989): at look ``k``,
  ``estimate_k +- c_k se_k`` with ``c_k`` the boundaries of a test that does not
  rely on the stopping rule: the efficacy boundaries, or for a plan with binding
  futility those of the same spending without futility (the binding ones assume
  that paths stop at the futility boundary, which an interval centred on an
  arbitrary effect cannot; Jennison and Turnbull 2000, chapter 9). They then hold
  their level simultaneously over all looks, whatever the stopping rule.
- Stage-wise ordering (Tsiatis, Rosner and Mehta 1984; Jennison and Turnbull
  2000, section 8.4): outcomes are ordered first by the look at which the upper
  (lower) boundary was crossed, earlier being more extreme, then by ``Z`` at that
  look. The one-sided p-value at ``theta`` is the probability of an outcome at
  least as extreme as the one observed; it depends only on the boundaries of the
  looks up to the stopping look, so it stays valid under error spending.
  The confidence interval inverts it; the median-unbiased estimate is the
  ``theta`` at which it equals 1/2.
- Conditional power: the probability, from the current ``Z_k``, of crossing an
  efficacy boundary at a later look, by the same recursion started from a point
  mass, under an assumed effect whose sign is its direction (the planned effect
  of a two-sided plan is taken in the direction of the current estimate).

Roots are found by :func:`seqtest.core.roots.solve` on the probit of the probability
(nearly linear in ``theta``), to 1e-10 on the probit scale (about 1e-10 standard
errors), so the accuracy is that of the integration (about 1e-7 on probabilities).

References
----------
.. [1] Tsiatis, A. A., Rosner, G. L. and Mehta, C. R. (1984). Exact confidence
       intervals following a group sequential test. Biometrics 40, 797-803.
.. [2] Jennison, C. and Turnbull, B. W. (1989). Interim analyses: the repeated
       confidence interval approach. JRSS B 51, 305-361.
.. [3] Jennison, C. and Turnbull, B. W. (2000). Group Sequential Methods with
       Applications to Clinical Trials, chapters 8 and 9.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike
from scipy import special

from seqtest.core.recursion import DEFAULT_R, _State
from seqtest.core.region import Region
from seqtest.core.roots import solve

__all__ = ["StagewiseResult", "stagewise", "repeated_ci", "conditional_power"]


def _upper_p(theta: float, region: Region, info: np.ndarray, z_stop: float, r: int) -> float:
    """P_theta(outcome at least as extreme upward as (T, z_stop))."""
    last = region.with_last(upper=z_stop, lower=-np.inf, inner=0.0)
    return float(last.crossing(info, theta, r).upper.sum())


def _lower_p(theta: float, region: Region, info: np.ndarray, z_stop: float, r: int) -> float:
    """P_theta(outcome at least as extreme downward as (T, z_stop))."""
    last = region.with_last(upper=np.inf, lower=z_stop, inner=0.0)
    return float(last.crossing(info, theta, r).lower.sum())


def _both_p(theta: float, region: Region, info: np.ndarray, z_stop: float, r: int
            ) -> tuple[float, float]:
    """:func:`_upper_p` and :func:`_lower_p` from one recursion: the looks before ``T``
    are shared, and at ``T`` the paths above ``z_stop`` and those below it are the
    two outcomes."""
    cr = region.with_last(upper=z_stop, lower=z_stop, inner=0.0).crossing(info, theta, r)
    return float(cr.upper.sum()), float(cr.lower.sum())


@dataclass(frozen=True)
class StagewiseResult:
    """Inference at stopping under the stage-wise ordering.

    Attributes
    ----------
    p_value : float
        Two-sided (``sides=2``) or one-sided upper p-value for the null ``0``.
    ci_lower, ci_upper : float
        Confidence interval for the effect at level ``1 - alpha``.
    median_unbiased : float
        Median-unbiased estimate of the effect.
    """

    p_value: float
    ci_lower: float
    ci_upper: float
    median_unbiased: float


def stagewise(
    z: ArrayLike,
    info: ArrayLike,
    region: Region,
    *,
    alpha: float = 0.05,
    sides: int = 2,
    r: int = DEFAULT_R,
) -> StagewiseResult:
    """Stage-wise ordering p-value, confidence interval and median-unbiased estimate.

    Parameters
    ----------
    z : array_like
        z statistics of the looks up to and including the stopping look ``T``.
    info : array_like
        Information (``1 / se^2``) at those looks, strictly increasing.
    region : Region
        The continuation region of looks ``1..T`` (:class:`seqtest.core.region.Region`):
        the efficacy boundaries used, and a binding futility boundary when there is
        one (paths that stopped for futility are part of the sample space). Its exits
        at look ``T`` are not used: the test stopped there.
    alpha : float
        The interval has level ``1 - alpha`` (two-sided; for ``sides=1`` it is the
        one-sided lower limit at ``1 - alpha`` and the upper limit is ``inf``).
    sides : {1, 2}
        Two-sided p-value ``2 min(p_up, p_down)`` or one-sided upper.

    Returns
    -------
    StagewiseResult
        ``theta`` is in the units of the estimate.

    Notes
    -----
    See the module docstring (Tsiatis, Rosner and Mehta 1984). With a single look
    this is the fixed-sample z test and interval. Each limit is the root of the
    probit of a crossing probability, nearly linear in ``theta`` (slope ``1 / se_T``,
    exactly so with one look), found by :func:`seqtest.core.roots.solve` to 1e-10 on
    the probit scale.
    """
    zz = np.asarray(z, float).ravel()
    ii = np.asarray(info, float).ravel()
    t = zz.size
    if ii.size != t or region.looks < t:
        raise ValueError("z, info, region: need one value per look up to the stop")
    reg = region.head(t)
    z_t = float(zz[-1])
    se_t = 1.0 / math.sqrt(ii[-1])
    est = z_t * se_t

    p_up0, p_lo0 = _both_p(0.0, reg, ii, z_t, r)
    p = min(1.0, 2.0 * min(p_up0, p_lo0)) if sides == 2 else p_up0

    def root(fun: Any, target: float, increasing: bool = True) -> float:
        goal = float(special.ndtri(target))

        def g(th: float) -> float:
            q = min(max(fun(th), 1e-300), 1.0 - 1e-16)
            return float(special.ndtri(q)) - goal

        return solve(g, est, step=se_t, increasing=increasing, gtol=1e-10,
                     xtol=1e-12 * se_t, lo=est - 400 * se_t, hi=est + 400 * se_t)

    a_tail = alpha / 2 if sides == 2 else alpha

    def up_fun(th: float) -> float:
        return _upper_p(th, reg, ii, z_t, r)

    ci_lo = root(up_fun, a_tail)
    if sides == 2:
        # the lower-tail p-value decreases in theta; its upper limit solves
        # P_theta(at least as extreme downward) = alpha / 2
        ci_hi = root(lambda th: _lower_p(th, reg, ii, z_t, r), a_tail, increasing=False)
    else:
        ci_hi = math.inf
    mue = root(up_fun, 0.5)
    return StagewiseResult(float(p), float(ci_lo), float(ci_hi), float(mue))


def repeated_ci(estimate: np.ndarray, se: np.ndarray, bound: np.ndarray, sides: int
                ) -> tuple[np.ndarray, np.ndarray]:
    """Repeated confidence interval ``estimate +- bound * se`` (Jennison and Turnbull
    1989). For a one-sided plan the upper limit is ``inf``.

    ``bound`` must be the boundaries of a test that does not rely on the stopping
    rule (see the module docstring and
    :meth:`seqtest.monitoring.rules.GroupSequentialRule.interval_boundaries`), or the
    intervals do not hold their level."""
    est = np.asarray(estimate, float)
    s = np.asarray(se, float)
    c = np.asarray(bound, float)
    lo = est - c * s
    hi = est + c * s if sides == 2 else np.full_like(est, np.inf)
    return lo, hi


# below this share of paths still going on, conditional power stops integrating
_GOING_ON = 1e-12


def conditional_power(
    z_now: float,
    t_now: float,
    future_fractions: ArrayLike,
    future_upper: ArrayLike,
    drift: float,
    *,
    sides: int = 2,
    r: int = DEFAULT_R,
) -> float:
    """Probability of crossing an efficacy boundary at a later look.

    Parameters
    ----------
    z_now, t_now : float
        Current z statistic and information fraction.
    future_fractions, future_upper : array_like
        Later looks' information fractions (above ``t_now``) and efficacy boundaries.
    drift : float
        Assumed ``delta * sqrt(I_max)`` (the mean of ``Z`` at fraction 1); its sign
        is the direction of the effect, so it is the caller's to choose: for the
        planned effect of a two-sided plan, the sign of the current estimate
        (:func:`seqtest.analyze` does so; a one-sided plan tests the positive
        direction only).
    sides : {1, 2}
        Two-sided plans count crossings of either boundary.

    Notes
    -----
    The recursion of :mod:`seqtest.core.recursion` started from the point mass
    ``S = z_now sqrt(t_now)``; futility boundaries are not applied (the chance of
    reaching significance if the experiment continues to its end). Once fewer than
    1e-12 of the paths are still going on after a look, the looks after it are not
    integrated (they could add no more than that).
    """
    tf = np.asarray(future_fractions, float).ravel()
    uf = np.asarray(future_upper, float).ravel()
    if tf.size == 0:
        return 0.0
    s_now = float(z_now) * math.sqrt(float(t_now))
    state = _State(np.array([float(z_now)]), np.ones(1), float(t_now), float(drift),
                   s_now, float(t_now))
    region = Region.of_plan(sides, uf)
    total = 0.0
    for j in range(tf.size):
        exits = state.prob_above(uf[j], tf[j])
        if sides == 2:
            exits += state.prob_below(-uf[j], tf[j])
        total += exits
        # paths still going on after this look: when they are below 1e-12 of all, the
        # looks after it cannot add more than that (no futility stops them)
        if j + 1 < tf.size and state.mass() - exits > _GOING_ON:
            state = state.advance(region.intervals(j), tf[j], r, tf[j + 1])
        else:
            break
    return float(min(1.0, total))


def naive_ci(estimate: float, se: float, alpha: float, sides: int) -> tuple[float, float]:
    """Unadjusted fixed-sample interval, for comparison with the adjusted one."""
    q = float(-special.ndtri(alpha / sides))
    if sides == 2:
        return estimate - q * se, estimate + q * se
    return estimate - q * se, math.inf
