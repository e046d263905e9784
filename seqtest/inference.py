"""Adjusted inference for a group-sequential test.

Everything here is on the canonical scale of :mod:`seqtest.boundaries`: at look
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

Roots are found by secant steps on the probit of the probability (nearly linear
in ``theta``), with Brent's method as the fallback, to 1e-10 on the probit scale
(about 1e-10 standard errors), so the accuracy is that of the integration (about
1e-7 on probabilities).

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
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import optimize, special

from seqtest.boundaries import DEFAULT_R, _State, crossing_probabilities

__all__ = ["StagewiseResult", "stagewise", "repeated_ci", "conditional_power"]


def _inner(inner: np.ndarray | None) -> dict:
    if inner is None:
        return {}
    w = inner.copy()
    w[-1] = 0.0  # the stopping look's own outcome is ordered by z alone
    return {"inner_lower": -w, "inner_upper": w}


def _upper_p(theta: float, upper: np.ndarray, lower: np.ndarray, info: np.ndarray,
             z_stop: float, r: int, inner: np.ndarray | None = None) -> float:
    """P_theta(outcome at least as extreme upward as (T, z_stop))."""
    up = upper.copy()
    lo = lower.copy()
    up[-1] = z_stop
    lo[-1] = -np.inf
    cr = crossing_probabilities(up, lo, info, theta, r=r, **_inner(inner))
    return float(cr.upper.sum())


def _lower_p(theta: float, upper: np.ndarray, lower: np.ndarray, info: np.ndarray,
             z_stop: float, r: int, inner: np.ndarray | None = None) -> float:
    """P_theta(outcome at least as extreme downward as (T, z_stop))."""
    up = upper.copy()
    lo = lower.copy()
    up[-1] = np.inf
    lo[-1] = z_stop
    cr = crossing_probabilities(up, lo, info, theta, r=r, **_inner(inner))
    return float(cr.lower.sum())


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
    z: Sequence[float],
    info: Sequence[float],
    upper: Sequence[float],
    lower: Sequence[float] | None = None,
    *,
    alpha: float = 0.05,
    sides: int = 2,
    r: int = DEFAULT_R,
    inner: Sequence[float] | None = None,
) -> StagewiseResult:
    """Stage-wise ordering p-value, confidence interval and median-unbiased estimate.

    Parameters
    ----------
    z : array_like
        z statistics of the looks up to and including the stopping look ``T``.
    info : array_like
        Information (``1 / se^2``) at those looks, strictly increasing.
    upper, lower : array_like
        The efficacy boundaries used at looks ``1..T`` (``lower`` is ``-upper`` for a
        two-sided test, ``-inf`` or ``None`` for a one-sided one). The values at
        look ``T`` are not used: the test stopped there.
    alpha : float
        The interval has level ``1 - alpha`` (two-sided; for ``sides=1`` it is the
        one-sided lower limit at ``1 - alpha`` and the upper limit is ``inf``).
    sides : {1, 2}
        Two-sided p-value ``2 min(p_up, p_down)`` or one-sided upper.
    inner : array_like, optional
        Half-widths ``b_k`` of a binding two-sided futility region (paths with
        ``|Z_k| < b_k`` stopped at look ``k``); for a one-sided binding futility
        boundary pass it as ``lower``.

    Returns
    -------
    StagewiseResult
        ``theta`` is in the units of the estimate.

    Notes
    -----
    See the module docstring (Tsiatis, Rosner and Mehta 1984). With a single look
    this is the fixed-sample z test and interval.
    """
    zz = np.asarray(z, float).ravel()
    ii = np.asarray(info, float).ravel()
    t = zz.size
    up = np.asarray(upper, float).ravel()[:t].copy()
    lo = (np.full(t, -np.inf) if lower is None else np.asarray(lower, float).ravel()[:t]).copy()
    if up.size != t or lo.size != t or ii.size != t:
        raise ValueError("z, info, upper, lower: need one value per look up to the stop")
    inn = None if inner is None else np.asarray(inner, float).ravel()[:t].copy()
    if inn is not None and inn.size != t:
        raise ValueError("inner: need one value per look up to the stop")
    z_t = float(zz[-1])
    se_t = 1.0 / math.sqrt(ii[-1])
    est = z_t * se_t

    p_up0 = _upper_p(0.0, up, lo, ii, z_t, r, inn)
    p_lo0 = _lower_p(0.0, up, lo, ii, z_t, r, inn)
    p = min(1.0, 2.0 * min(p_up0, p_lo0)) if sides == 2 else p_up0

    def bracketed(fun, target: float) -> float:
        # fun is increasing in theta; bracket around the naive estimate
        lo_th, hi_th = est - 12 * se_t, est + 12 * se_t
        f_lo, f_hi = fun(lo_th) - target, fun(hi_th) - target
        k = 0
        while f_lo > 0 and k < 20:
            lo_th -= 12 * se_t
            f_lo = fun(lo_th) - target
            k += 1
        while f_hi < 0 and k < 40:
            hi_th += 12 * se_t
            f_hi = fun(hi_th) - target
            k += 1
        return optimize.brentq(lambda th: fun(th) - target, lo_th, hi_th,
                               xtol=1e-10 * se_t, rtol=1e-12)

    def root(fun, target: float, sign: float = 1.0) -> float:
        # Secant steps on the probit scale first: sign * (ndtri(fun) - ndtri(target))
        # rises by about 1 / se_T per unit of theta (exactly so with one look), so
        # from the naive estimate three or four steps reach 1e-10; Brent's method on
        # a bracket is the fallback. ``sign`` is -1 for a decreasing ``fun``.
        goal = float(special.ndtri(target))

        def g(th: float) -> float:
            q = min(max(fun(th), 1e-300), 1.0 - 1e-16)
            return sign * (float(special.ndtri(q)) - goal)

        x0 = est
        g0 = g(x0)
        x1 = x0 - g0 * se_t
        for _ in range(8):
            if not (abs(x1 - est) < 40 * se_t and math.isfinite(x1)):
                break
            g1 = g(x1)
            if abs(g1) < 1e-10:
                return x1
            if g1 == g0:
                break
            x0, g0, x1 = x1, g1, x1 - g1 * (x1 - x0) / (g1 - g0)
        if sign > 0:
            return bracketed(fun, target)
        return bracketed(lambda th: -fun(th), -target)

    a_tail = alpha / 2 if sides == 2 else alpha

    def up_fun(th: float) -> float:
        return _upper_p(th, up, lo, ii, z_t, r, inn)

    ci_lo = root(up_fun, a_tail)
    if sides == 2:
        # the lower-tail p-value decreases in theta; its upper limit solves
        # P_theta(at least as extreme downward) = alpha / 2
        ci_hi = root(lambda th: _lower_p(th, up, lo, ii, z_t, r, inn), a_tail, -1.0)
    else:
        ci_hi = math.inf
    mue = root(up_fun, 0.5)
    return StagewiseResult(float(p), float(ci_lo), float(ci_hi), float(mue))


def repeated_ci(estimate: np.ndarray, se: np.ndarray, bound: np.ndarray, sides: int
                ) -> tuple[np.ndarray, np.ndarray]:
    """Repeated confidence interval ``estimate +- bound * se`` (Jennison and Turnbull
    1989). For a one-sided plan the upper limit is ``inf``.

    ``bound`` must be the boundaries of a test that does not rely on the stopping
    rule (see the module docstring and :func:`seqtest.monitor.interval_bounds`),
    or the intervals do not hold their level."""
    est = np.asarray(estimate, float)
    s = np.asarray(se, float)
    c = np.asarray(bound, float)
    lo = est - c * s
    hi = est + c * s if sides == 2 else np.full_like(est, np.inf)
    return lo, hi


def conditional_power(
    z_now: float,
    t_now: float,
    future_fractions: Sequence[float],
    future_upper: Sequence[float],
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
    The recursion of :mod:`seqtest.boundaries` started from the point mass
    ``S = z_now sqrt(t_now)``; futility boundaries are not applied (the chance of
    reaching significance if the experiment continues to its end).
    """
    tf = np.asarray(future_fractions, float).ravel()
    uf = np.asarray(future_upper, float).ravel()
    if tf.size == 0:
        return 0.0
    s_now = float(z_now) * math.sqrt(float(t_now))
    state = _State(np.array([float(z_now)]), np.ones(1), float(t_now), float(drift),
                   s_now, float(t_now))
    total = 0.0
    for j in range(tf.size):
        total += state.prob_above(uf[j], tf[j])
        if sides == 2:
            total += state.prob_below(-uf[j], tf[j])
        if j + 1 < tf.size:
            iv = [(-uf[j], uf[j])] if sides == 2 else [(-np.inf, uf[j])]
            state = state.advance(iv, tf[j], r, tf[j + 1])
    return float(min(1.0, total))


def naive_ci(estimate: float, se: float, alpha: float, sides: int) -> tuple[float, float]:
    """Unadjusted fixed-sample interval, for comparison with the adjusted one."""
    q = float(-special.ndtri(alpha / sides))
    if sides == 2:
        return estimate - q * se, estimate + q * se
    return estimate - q * se, math.inf
