"""One root finder for every solve in seqtest.

Boundaries (a tail probability equal to the error to spend), the drift of a plan (its
power equal to the target), the classical constant (the level equal to alpha), the
stage-wise p-value, confidence limits and median-unbiased estimate (a probability equal
to a level): each is the root of a monotone function of one variable that is nearly
linear on a well-chosen scale (log or probit of a probability). :func:`solve` finds it;
:func:`solve_brackets` finds many already-bracketed roots at once (interval limits).

Method of :func:`solve`: Newton steps when the caller supplies the slope, secant steps
otherwise, from a starting point and a guess of the scale; once a sign change is seen,
the root is kept bracketed and any step that leaves the bracket, or fails to halve it
within two steps, is replaced by an Anderson-Bjorck step (regula falsi with the
Anderson-Bjorck weight; bisection when the end values are unknown). Before a sign
change is seen, the search follows the Newton or secant step downhill (at most four
times the previous move), doubling the move when there is no usable step, up to the
limits ``lo``/``hi``. It stops when ``|g| <= gtol`` or the bracket is narrower than ``xtol``
(relative to ``max(1, |x|)``). On the nearly linear scales used here it takes two to
five evaluations.

References
----------
.. [1] Anderson, N. and Bjorck, A. (1973). A new high order method of regula falsi
       type for computing a root of an equation. BIT 13, 253-264.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any

import numpy as np

from seqtest.core.errors import SeqtestError

__all__ = ["NoRoot", "solve", "solve_brackets"]


class NoRoot(SeqtestError, ArithmeticError):
    """The function keeps one sign up to the limit of the search.

    Attributes
    ----------
    at_limit : float
        The limit reached (``lo`` or ``hi``).
    """

    def __init__(self, message: str, at_limit: float) -> None:
        super().__init__(message)
        self.at_limit = at_limit


def solve(
    g: Callable[[float], float] | Callable[[float], tuple[float, float]],
    x0: float,
    *,
    step: float = 1.0,
    lo: float = -math.inf,
    hi: float = math.inf,
    increasing: bool = True,
    with_slope: bool = False,
    bracket: tuple[float, float] | None = None,
    xtol: float = 1e-12,
    gtol: float = 0.0,
    max_evals: int = 200,
) -> float:
    """Root of a monotone function ``g`` (see the module docstring).

    Parameters
    ----------
    g : callable
        ``g(x) -> value``, or ``g(x) -> (value, slope)`` with ``with_slope``. May return
        ``-inf``/``inf`` far from the root (a log of a probability that underflows).
    x0 : float
        Starting point.
    step : float
        Scale of ``x`` over which ``g`` changes by about one unit: the first secant step
        and the unit of the downhill search.
    lo, hi : float
        Limits of the search; :class:`NoRoot` when ``g`` keeps its sign up to one.
    increasing : bool
        Whether ``g`` increases with ``x``.
    bracket : (a, b), optional
        Points known to bracket the root without evaluating them (the root lies in
        ``[a, b]``); the search then starts bracketed.
    xtol, gtol : float
        Stop when the bracket is narrower than ``xtol * max(1, |x|)`` or ``|g| <= gtol``.
    max_evals : int
        Hard limit on evaluations (the best point so far is returned).
    """
    sign = 1.0 if increasing else -1.0

    def ev(x: float) -> tuple[float, float | None]:
        out = g(x)
        if with_slope:
            v, s = out  # type: ignore[misc]
            return sign * float(v), sign * float(s)
        return sign * float(out), None  # type: ignore[arg-type]

    # bracket ends: a has g < 0, b has g > 0 (values None when only known in sign)
    a, b = -math.inf, math.inf
    fa: float | None = None
    fb: float | None = None
    if bracket is not None:
        a, b = float(bracket[0]), float(bracket[1])
    x = min(max(float(x0), lo, a), hi, b)
    fx, sx = ev(x)
    best = (abs(fx), x)
    prev: tuple[float, float] | None = None
    older: tuple[float, float] | None = None
    steps: list[float] = []
    side = 0  # which end moved last, for the Anderson-Bjorck weight
    for _ in range(max_evals):
        if math.isnan(fx):
            raise ArithmeticError(f"the function is not a number at {x!r}")
        if abs(fx) <= gtol:
            return x
        if fx < 0:
            if side == -1 and fb is not None and fa is not None and math.isfinite(fx):
                m = 1.0 - fx / fa if fa != 0 else 0.5
                fb *= m if m > 0 else 0.5
            a, fa, side = x, fx, -1
        else:
            if side == 1 and fa is not None and fb is not None and math.isfinite(fx):
                m = 1.0 - fx / fb if fb != 0 else 0.5
                fa *= m if m > 0 else 0.5
            b, fb, side = x, fx, 1
        bracketed = math.isfinite(a) and math.isfinite(b) and a <= b
        if bracketed and b - a <= xtol * max(1.0, abs(x)):
            return x
        # candidate: Newton, secant, or a first step of the given scale
        cand = math.nan
        if math.isfinite(fx):
            if sx is not None and sx > 0 and math.isfinite(sx):
                cand = x - fx / sx
            elif prev is not None and math.isfinite(prev[1]) and prev[1] != fx:
                cand = x - fx * (x - prev[0]) / (fx - prev[1])
                if older is not None and math.isfinite(older[1]):
                    cand = _inverse_quadratic(older, prev, (x, fx), cand)
            elif sx is None and prev is None:
                cand = x - fx * step
        if bracketed:
            # a step must at least halve the step before last, as in safeguarded Newton
            slow = len(steps) >= 2 and abs(cand - x) > 0.5 * steps[-2]
            if not (a < cand < b) or slow:
                if fa is not None and fb is not None and math.isfinite(fa) \
                        and math.isfinite(fb) and fb != fa:
                    cand = b - fb * (b - a) / (fb - fa)
                if not (a < cand < b):
                    cand = 0.5 * (a + b)
            if abs(cand - x) <= xtol * max(1.0, abs(x)):
                return cand
            steps.append(abs(cand - x))
        else:
            # downhill search: towards larger x when g < 0 (g increasing)
            direction = 1.0 if fx < 0 else -1.0
            limit = hi if direction > 0 else lo
            last = abs(x - prev[0]) if prev is not None else abs(step)
            if not math.isfinite(cand) or (cand - x) * direction <= 0:
                # no usable model (or it points uphill): expand geometrically
                cand = x + direction * (2.0 * last if prev is not None else abs(step))
            elif prev is not None:
                # the model's step, at most four times the last move
                cand = x + direction * min(direction * (cand - x), 4.0 * last)
            if (cand - limit) * direction >= 0:
                if x == limit:
                    raise NoRoot(f"no root before the limit {limit!r} (the function keeps "
                                 f"one sign there: {sign * fx!r})", limit)
                cand = limit
        older, prev = prev, (x, fx)
        x = cand
        fx, sx = ev(x)
        if abs(fx) < best[0]:
            best = (abs(fx), x)
    return best[1]


def _inverse_quadratic(p0: tuple[float, float], p1: tuple[float, float],
                       p2: tuple[float, float], fallback: float) -> float:
    """Root of the quadratic in ``g`` through three points ``(x, g)`` (inverse quadratic
    interpolation, as in Brent's method): it follows the curvature that a secant step
    undershoots. ``fallback`` when two values coincide or the result is not finite."""
    (x0, f0), (x1, f1), (x2, f2) = p0, p1, p2
    d01, d02, d12 = f0 - f1, f0 - f2, f1 - f2
    if d01 == 0 or d02 == 0 or d12 == 0:
        return fallback
    out = (x0 * f1 * f2 / (d01 * d02) - x1 * f0 * f2 / (d01 * d12)
           + x2 * f0 * f1 / (d02 * d12))
    return out if math.isfinite(out) else fallback


def solve_brackets(fun: Callable[[np.ndarray, np.ndarray], np.ndarray], a: Any, b: Any,
                   fa: Any, fb: Any, xtol: Any, max_iter: int = 200
                   ) -> tuple[np.ndarray, np.ndarray]:
    """Many roots at once, each already bracketed: the vectorised form of the same
    method (for interval limits at every look of many experiments).

    Safeguarded regula falsi for ``fun(x, j) = 0`` (``j``: positions in the arrays)
    with ``fun(a) >= 0 > fun(b)`` elementwise (any order of a and b).

    Anderson-Bjorck weights; a bisection step whenever the interpolated point is
    not strictly inside the bracket, and every third step when the bracket has not
    halved over the last three (so the worst case is bisection's). Stops when the
    bracket is narrower than ``xtol`` or its ends are adjacent floats. Returns the
    final ends ``(a, b)``: ``fun >= 0`` at ``a`` and ``< 0`` at ``b``.
    """
    a, b, fa, fb = (np.array(v, float).ravel() for v in (a, b, fa, fb))
    xtol = np.broadcast_to(np.asarray(xtol, float).ravel(), a.shape)
    width_ref = np.abs(b - a)
    side = np.zeros(a.shape, int)
    active = np.abs(b - a) > xtol
    for it in range(1, max_iter + 1):
        if not np.any(active):
            break
        j = np.flatnonzero(active)
        aa, bb, fa_, fb_ = a[j], b[j], fa[j], fb[j]
        lo, hi = np.minimum(aa, bb), np.maximum(aa, bb)
        mid = 0.5 * (aa + bb)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            x = bb - fb_ * (bb - aa) / (fb_ - fa_)
        force = (it % 3 == 0) & (hi - lo > 0.5 * width_ref[j])
        x = np.where(~np.isfinite(x) | (x <= lo) | (x >= hi) | force, mid, x)
        if it % 3 == 0:
            width_ref[j] = hi - lo
        stuck = (x <= lo) | (x >= hi)          # adjacent floats: nothing in between
        fx = fun(x, j)
        pos = fx >= 0
        hit = fx == 0
        sd = side[j]
        # Anderson-Bjorck: when the same end is replaced twice running, scale the
        # value kept at the other end by m = 1 - f(new) / f(replaced end)
        with np.errstate(divide="ignore", invalid="ignore"):
            m_a = np.where(fa_ != 0, 1.0 - fx / np.where(fa_ != 0, fa_, 1.0), 0.5)
            m_b = np.where(fb_ != 0, 1.0 - fx / np.where(fb_ != 0, fb_, 1.0), 0.5)
        m_a = np.where(m_a > 0, m_a, 0.5)
        m_b = np.where(m_b > 0, m_b, 0.5)
        keep = stuck
        a[j] = np.where(keep, aa, np.where(pos, x, aa))
        fa[j] = np.where(keep, fa_, np.where(pos, fx, np.where(sd == -1, fa_ * m_b, fa_)))
        b[j] = np.where(keep, bb, np.where(pos & ~hit, bb, x))
        fb[j] = np.where(keep, fb_, np.where(pos & ~hit, np.where(sd == 1, fb_ * m_a, fb_),
                                             fx))
        side[j] = np.where(pos, 1, -1)
        active[j] = ~stuck & ~hit & (np.abs(b[j] - a[j]) > xtol[j])
    return a, b
