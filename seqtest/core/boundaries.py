"""Boundary solvers: efficacy boundaries by error spending or classical constants,
futility boundaries by beta spending, and the two together when futility is binding.

Each boundary is the root of a crossing probability from the recursion of
:mod:`seqtest.core.recursion`, found by :func:`seqtest.core.roots.solve` (Newton steps on
the log of the exit probability, which is nearly linear in the boundary, kept inside a
bracket; to 1e-12 on z). The continuation region at each look comes from
:class:`seqtest.core.region.Region`. The accuracy is that of the integration (see
:mod:`seqtest.core.recursion`).

References
----------
.. [1] Lan, K. K. G. and DeMets, D. L. (1983). Discrete sequential boundaries for
       clinical trials. Biometrika 70, 659-663.
.. [2] Jennison, C. and Turnbull, B. W. (2000). Group Sequential Methods with
       Applications to Clinical Trials. Chapman & Hall/CRC, chapters 7 and 19.
.. [3] Pampallona, S. and Tsiatis, A. A. (1994). Group sequential designs for
       one-sided and two-sided hypothesis testing with provision for early stopping
       in favor of the null hypothesis. JSPI 42, 19-35.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Any, TypeVar

import numpy as np
from numpy.typing import ArrayLike
from scipy import special

from seqtest.core.classical import ClassicalBoundary
from seqtest.core.recent import Recent
from seqtest.core.recursion import (
    BIG,
    DEFAULT_R,
    _as_bounds,
    _as_info,
    _State,
    check_r,
)
from seqtest.core.region import Region
from seqtest.core.roots import NoRoot, solve
from seqtest.core.spending import SpendingFunction

__all__ = [
    "SOLVED",
    "Boundary",
    "SolvedLooks",
    "binding_bounds",
    "binding_with_power",
    "constant_bounds",
    "efficacy_bounds",
    "futility_bounds",
    "futility_with_power",
    "spending_bounds",
]

#: How a plan's efficacy boundary is made: error spending or a classical shape.
Boundary = SpendingFunction | ClassicalBoundary
T = TypeVar("T")


class SolvedLooks(Recent[tuple, Any]):
    """Boundaries already solved look by look, and the recursion's states after them,
    kept so that a later computation on the same first looks does not solve them again.

    A look's boundary depends only on what came before it and on the look itself
    (the information of each look, the error spent at each, the binding futility
    boundaries, the sides, the grid; for a futility boundary also the drift and the
    efficacy boundaries), so a key made of exactly those numbers, look by look, names
    one result. Monitoring asks for the boundaries of every look again at each new
    look; with the memo only the new looks are solved, and the answers are the same
    numbers, bit for bit, as without it (the same computation, done once). The state
    after a look also depends on the information of the look after it (it shapes the
    next grid), which its key includes.

    At most ``size`` entries, the least recently used dropped first
    (:class:`seqtest.core.recent.Recent`; states are not changed once made, apart from
    caches of their own that any thread may fill with the same values). A state holds
    a few hundred nodes (about 5 KB, 9 KB at most in the tests), so the default 4096
    entries, half of them states, stay below about 20 MB.
    """

    def __init__(self, size: int = 4096) -> None:
        super().__init__(size)


#: The memo monitoring passes to the solvers (``reuse=True``); simulations, whose looks
#: rarely repeat, do not use it.
SOLVED = SolvedLooks()


def _look_intervals(sides: int, a: float, b: float | None) -> list[tuple[float, float]]:
    """Continuation of one look (the region's rule, for solvers that go look by look)."""
    return Region.of_plan(sides, [a], None if b is None else [b]).intervals(0)


def _solve_probability(state: _State, info: float, target: float, lo: float, hi: float,
                       x0: float, prob: Any, decreasing: bool) -> float:
    """Root of ``prob(x) = target`` on ``[lo, hi]`` for a monotone exit probability,
    by Newton steps on ``log prob - log target``."""
    log_t = math.log(target)

    def g(x: float) -> tuple[float, float]:
        p, dp = prob(x)
        if p <= 0.0:
            return -math.inf, 0.0
        return math.log(p) - log_t, dp / p

    return solve(g, x0, with_slope=True, increasing=not decreasing, bracket=(lo, hi),
                 gtol=1e-13, xtol=1e-12)


def _solve_upper(state: _State, info_next: float, target: float, sides: int,
                 floor: float, start: float | None = None) -> float:
    """Bound ``u`` with exit probability ``target`` above ``u`` (and below ``-u`` when
    two-sided) from ``state``; ``floor`` is the smallest bound allowed, ``start`` a
    nearby bound to start from."""
    if target <= 0.0:
        return math.inf

    def prob(u: float) -> tuple[float, float]:
        p = state.prob_above(u, info_next)
        d = -state.density(u, info_next)
        if sides == 2:
            p += state.prob_below(-u, info_next)
            d -= state.density(-u, info_next)
        return p, d

    if prob(floor)[0] <= target:
        # spending more than what is left to spend: everything stops here
        return floor
    if start is not None and floor < start < BIG:
        x0 = start
    else:
        mass = state.mass()
        share = min(target / (sides * mass), 0.5) if mass > 0 else 0.5
        x0 = float(-special.ndtri(share))
    return _solve_probability(state, info_next, target, floor, BIG, x0, prob,
                              decreasing=True)


def _solve_futility(state: _State, info: float, target: float, a: float, sides: int,
                    start: float | None = None) -> float:
    """Futility bound with probability ``target`` of stopping for futility at this look
    (below it one-sided, inside the band two-sided), under the state's drift; ``start``
    a nearby bound to start Newton's steps from (a neighbouring drift's)."""
    if sides == 1:
        def prob(x: float) -> tuple[float, float]:
            return state.prob_below(x, info), state.density(x, info)
        floor = -BIG
    else:
        def prob(x: float) -> tuple[float, float]:
            if not 0.0 < x < BIG:
                return (state.prob_between(-x, x, info),
                        state.density(x, info) + state.density(-x, info))
            return state.between_with_density(-x, x, info)
        floor = 0.0
    if target <= 0.0:
        return -math.inf if sides == 1 else 0.0
    top = min(a, BIG)
    # Whether the futility region reaches the efficacy boundary (everything left stops
    # here) is checked first, unless a nearby drift's boundary lies well below it:
    # then the search runs first and the check is made only if it ends at the top
    # (the same answer, one exit probability fewer per look in a drift search).
    lazy = start is not None and floor < start < top - 0.05
    if not lazy and prob(top)[0] <= target:
        return a
    mass = state.mass()
    mu = state.theta * math.sqrt(info)
    narrow = math.inf
    if sides == 2 and target < 1e-6:
        # a band narrower than 1e-6 holds 2 x f(0) (1 + O(x^2)) of the paths, to a
        # relative 1e-12 (f smooth on the scale of 1); a difference of normal CDFs
        # would lose that to rounding, so the band is solved from the density (f is
        # below 0.4, so only targets below 1e-6 can give such a band)
        narrow = target / max(2 * state.density(0.0, info), 1e-300)
        if narrow < 1e-6:
            return narrow
    if start is not None and floor < start < top:
        x0 = start
    elif sides == 1:
        x0 = mu + float(special.ndtri(min(max(target / max(mass, 1e-300), 1e-300), 0.5)))
    else:
        if not math.isfinite(narrow):
            narrow = target / max(2 * state.density(0.0, info), 1e-300)
        x0 = min(top, narrow)
    x = _solve_probability(state, info, target, floor, top, x0, prob, decreasing=False)
    if lazy and x >= top - 1e-9 * max(1.0, abs(top)) and prob(top)[0] <= target:
        return a
    return x


def spending_bounds(
    info: ArrayLike,
    cumulative_alpha: ArrayLike,
    *,
    sides: int = 1,
    futility: ArrayLike | None = None,
    r: int = DEFAULT_R,
    reuse: bool = False,
    r_after: tuple[int, int] | None = None,
) -> np.ndarray:
    """Efficacy boundaries that spend a given cumulative error at each look.

    Parameters
    ----------
    info : array_like
        Information (or information fractions) at each look, strictly increasing.
    cumulative_alpha : array_like
        Cumulative type I error to have spent by each look, per tail
        (non-decreasing). A two-sided symmetric test spends it on each tail, so the
        total is twice this.
    sides : {1, 2}
        One-sided upper test, or symmetric two-sided test (``+-u_k``).
    futility : array_like, optional
        Binding futility boundaries under the null: for ``sides=1`` a lower
        boundary ``b_k`` (stop when ``Z_k <= b_k``); for ``sides=2`` an inner
        half-width ``b_k`` (stop when ``|Z_k| < b_k``). ``None``: non-binding (the
        efficacy boundaries ignore futility).
    r : int
        Grid size parameter.
    reuse : bool
        Take the looks already solved from :data:`SOLVED` (:class:`SolvedLooks`) and
        keep the new ones there: the same numbers, computed once.
    r_after : (int, int), optional
        ``(j, r2)``: the sub-densities after look ``j`` (0-based) on the grid ``r2``
        instead (the looks from ``j + 1`` on are then as accurate as that grid; the
        earlier ones are unchanged, as each depends only on the looks before it).

    Returns
    -------
    ndarray
        Upper z boundary per look (``inf`` where nothing is spent).

    Notes
    -----
    Each boundary is found by :func:`seqtest.core.roots.solve` (Newton steps on the
    log exit probability, to 1e-12 on z); the overall accuracy is that of the
    integration (:mod:`seqtest.core.recursion`).

    References
    ----------
    .. [1] Lan and DeMets (1983), Biometrika 70, 659-663.
    .. [2] Jennison and Turnbull (2000), chapter 19.
    """
    inf = _as_info(info)
    k = inf.size
    cum = np.asarray(cumulative_alpha, dtype=float).ravel()
    bad = np.any(~np.isfinite(cum)) or np.any(cum < 0) or np.any(np.diff(cum) < -1e-15)
    if cum.size != k or bad:
        raise ValueError(f"cumulative_alpha: got {cum.tolist()}; allowed is {k} "
                         "non-decreasing numbers >= 0")
    if sides not in (1, 2):
        raise ValueError(f"sides: got {sides!r}; allowed are 1 and 2")
    fut = None if futility is None else _as_bounds("futility", futility, k, -math.inf)
    r = check_r(r)
    after, r2 = (k, r) if r_after is None else (int(r_after[0]), check_r(r_after[1]))
    inc = np.diff(np.concatenate(([0.0], cum))) * sides
    out = np.empty(k)
    state = _State.origin(0.0)
    memo = SOLVED if reuse else None
    key: tuple = ("efficacy", sides)
    for j in range(k):
        floor = 0.0 if sides == 2 else -BIG
        if fut is not None:
            floor = max(floor, fut[j])
        if memo is not None:
            key = (*key, float(inf[j]), float(inc[j]),
                   -math.inf if fut is None else float(fut[j]))
        out[j] = _recall(memo, key, _solve_upper, state, inf[j], inc[j], sides, floor)
        if j + 1 < k:
            # the state after look j, and the key of what follows, name its grid too
            r_j = r2 if j >= after else r
            if memo is not None:
                key = (*key, r_j, float(inf[j + 1]))
            iv = _look_intervals(sides, float(out[j]), None if fut is None else float(fut[j]))
            state = _recall(memo, key, state.advance, iv, float(inf[j]), r_j,
                            float(inf[j + 1]))
    return out


def _recall(memo: SolvedLooks | None, key: tuple, compute: Callable[..., T], *args: Any
            ) -> T:
    """``compute(*args)``, taken from ``memo`` when it holds ``key`` (which must name
    everything the result depends on), else computed and, with a memo, kept there."""
    hit = None if memo is None else memo.get(key)
    if hit is None:
        hit = compute(*args)
        if memo is not None:
            memo.put(key, hit)
    out: T = hit
    return out


def _futility_look(state: _State, info: float, a: float, target: float, sides: int,
                   start: float | None) -> tuple[float, float]:
    """One look of a futility recursion: its boundary and the exit probability above
    the efficacy boundary ``a`` there."""
    exit_up = state.prob_above(a, info)
    return float(_solve_futility(state, info, target, a, sides, start)), exit_up


def constant_bounds(
    info: ArrayLike,
    alpha: float,
    shape: ArrayLike,
    *,
    sides: int = 1,
    fixed: ArrayLike | None = None,
    futility: ArrayLike | None = None,
    r: int = DEFAULT_R,
) -> np.ndarray:
    """Boundaries ``c * shape_k`` with the constant ``c`` solved for level ``alpha``.

    Parameters
    ----------
    info : array_like
        Information (or fractions) at each look.
    alpha : float
        Total type I error: one-sided, or both tails together when ``sides=2``.
    shape : array_like
        Boundary shape per look, e.g. ``t_k ** (Delta - 0.5)`` for the Wang-Tsiatis
        family (Delta = 0.5 Pocock, Delta = 0 O'Brien-Fleming).
    fixed : array_like of bool, optional
        Looks whose boundary is ``shape_k`` itself, not scaled (Haybittle-Peto's
        interim boundary of 3); the constant then scales only the other looks.
    sides : {1, 2}
        One-sided upper, or symmetric two-sided.
    futility : array_like, optional
        Binding futility boundaries (as in :func:`spending_bounds`).
    r : int
        Grid size parameter.

    Returns
    -------
    ndarray
        The boundary per look.

    Notes
    -----
    ``c`` is found by :func:`seqtest.core.roots.solve` (secant steps with a bracket,
    tolerance 1e-12) on the total exit probability under the null, from the recursion
    of :mod:`seqtest.core.recursion`.

    References
    ----------
    .. [1] Pocock (1977), Biometrika 64, 191-199.
    .. [2] O'Brien and Fleming (1979), Biometrics 35, 549-556.
    .. [3] Wang and Tsiatis (1987), Biometrics 43, 193-199.
    """
    inf = _as_info(info)
    k = inf.size
    s = np.asarray(shape, dtype=float).ravel()
    if s.size != k or np.any(~np.isfinite(s)) or np.any(s <= 0):
        raise ValueError(f"shape: got {s.tolist()}; allowed is {k} positive numbers")
    fx = np.zeros(k, bool) if fixed is None else np.asarray(fixed, bool).ravel()
    fut = None if futility is None else _as_bounds("futility", futility, k, -math.inf)

    def bounds(c: float) -> np.ndarray:
        return np.where(fx, s, c * s)

    def level(c: float) -> float:
        region = Region.of_plan(sides, bounds(c), fut)
        return float(region.efficacy_probability(inf, 0.0, r).sum())

    return bounds(_solve_constant(level, alpha, 1.0))


def _solve_constant(level: Any, alpha: float, c0: float, lo: float = 1e-3,
                    hi: float = 1e3) -> float:
    """The constant ``c`` at which the decreasing ``level(c)`` equals ``alpha``, by
    secant steps on ``log alpha - log level(c)`` (nearly linear in ``c``)."""
    log_a = math.log(alpha)

    def g(c: float) -> float:
        v = level(c)
        return log_a - math.log(v) if v > 0 else math.inf

    try:
        return solve(g, c0, step=0.5, lo=lo, hi=hi, xtol=1e-12, gtol=1e-14)
    except NoRoot as exc:
        raise ValueError(f"alpha: got {alpha!r}; no boundary constant in [{lo:g}, {hi:g}] "
                         "reaches it") from exc


def efficacy_bounds(t: np.ndarray, alpha: float, sides: int, efficacy: Boundary,
                    futility_z: np.ndarray | None = None, r: int = DEFAULT_R) -> np.ndarray:
    """Efficacy boundaries of a plan at fractions ``t``: error spending (``alpha /
    sides`` per tail by the spending function) or a classical shape scaled to level
    ``alpha``. ``futility_z``: a binding futility boundary (``None``: ignored)."""
    if isinstance(efficacy, SpendingFunction):
        return spending_bounds(t, efficacy(t, alpha / sides), sides=sides,
                               futility=futility_z, r=r)
    shape, fixed = efficacy.shape(t)
    return constant_bounds(t, alpha, shape, sides=sides, fixed=fixed, futility=futility_z,
                           r=r)


def futility_bounds(t: np.ndarray, drift: float, a: np.ndarray, sides: int, beta: float,
                    futility: SpendingFunction, r: int = DEFAULT_R, final: bool = True,
                    reuse: bool = False) -> np.ndarray:
    """Beta-spending futility boundary under the design alternative, given the efficacy
    boundary ``a``.

    ``t`` are information fractions (values above 1 spend all of beta); with ``final``
    the last look's futility boundary is the efficacy boundary (they meet). ``reuse``:
    as in :func:`spending_bounds`."""
    return futility_with_power(t, drift, a, sides, beta, futility, r, final,
                               reuse=reuse)[0]


def futility_with_power(t: np.ndarray, drift: float, a: np.ndarray, sides: int,
                        beta: float, futility: SpendingFunction, r: int = DEFAULT_R,
                        final: bool = True, start: np.ndarray | None = None,
                        reuse: bool = False) -> tuple[np.ndarray, float]:
    """:func:`futility_bounds` and, from the same recursion under ``drift``, the
    probability of crossing the upper efficacy boundary (the power at ``drift``):
    equal to :meth:`Region.crossing`'s upper sum, without a second pass. ``start``:
    the boundary at a nearby drift, where each look's search starts (a drift search
    passes its last one; the result is the same root, found in fewer steps).
    ``reuse`` (without ``start``, whose searches end within the tolerance of the root
    but not on the same bits): the looks already solved from :data:`SOLVED`."""
    k = t.size
    cum = futility(np.minimum(t, 1.0), beta)
    inc = np.diff(np.concatenate(([0.0], cum)))
    b = np.empty(k)
    upper = 0.0
    state = _State.origin(drift)
    memo = SOLVED if reuse and start is None else None
    key: tuple = ("futility", float(drift), sides, r)
    for j in range(k):
        if memo is not None:
            key = (*key, float(t[j]), float(a[j]), float(inc[j]))
        if j == k - 1 and final:
            upper += state.prob_above(float(a[j]), t[j])
            b[j] = a[j]
            break
        b[j], exit_up = _recall(memo, key, _futility_look, state, t[j], a[j], inc[j], sides,
                                None if start is None else float(start[j]))
        upper += exit_up
        if j == k - 1:
            break
        if memo is not None:
            key = (*key, float(t[j + 1]))
        state = _recall(memo, key, state.advance,
                        _look_intervals(sides, float(a[j]), float(b[j])), float(t[j]), r,
                        float(t[j + 1]))
    return b, upper


def binding_bounds(t: np.ndarray, alpha: float, sides: int, efficacy: Boundary,
                   futility: SpendingFunction, beta: float, drift: float,
                   r: int = DEFAULT_R, final: bool = True,
                   cumulative_alpha: np.ndarray | None = None,
                   ) -> tuple[np.ndarray, np.ndarray]:
    """Efficacy and futility boundaries that account for each other (binding futility).

    With error spending the two are solved look by look, the efficacy boundary under
    the null and the futility boundary under the drift, on the same continuation
    region. A classical shape's constant is solved with the futility boundary in place.
    ``cumulative_alpha`` (per tail) overrides the spending function's."""
    a, b, _ = binding_with_power(t, alpha, sides, efficacy, futility, beta, drift, r,
                                 final, cumulative_alpha)
    return a, b


def binding_with_power(t: np.ndarray, alpha: float, sides: int, efficacy: Boundary,
                       futility: SpendingFunction, beta: float, drift: float,
                       r: int = DEFAULT_R, final: bool = True,
                       cumulative_alpha: np.ndarray | None = None,
                       start: tuple[np.ndarray, np.ndarray] | None = None,
                       ) -> tuple[np.ndarray, np.ndarray, float]:
    """:func:`binding_bounds` and the probability of crossing the upper efficacy
    boundary under ``drift`` (the power), from the recursion under the drift that
    the futility boundary is solved on. ``start``: efficacy and futility boundaries
    at a nearby drift, where the searches start (error spending only)."""
    k = t.size
    if isinstance(efficacy, SpendingFunction):
        tc = np.minimum(t, 1.0)
        ca = efficacy(tc, alpha / sides) if cumulative_alpha is None else cumulative_alpha
        inc_a = np.diff(np.concatenate(([0.0], ca))) * sides
        inc_b = np.diff(np.concatenate(([0.0], futility(tc, beta))))
        a = np.empty(k)
        b = np.empty(k)
        upper = 0.0
        s0, s1 = _State.origin(0.0), _State.origin(drift)
        for j in range(k):
            a[j] = _solve_upper(s0, t[j], inc_a[j], sides, 0.0 if sides == 2 else -BIG,
                                None if start is None else float(start[0][j]))
            upper += s1.prob_above(float(a[j]), t[j])
            if j == k - 1 and final:
                b[j] = a[j]
                break
            b[j] = _solve_futility(s1, t[j], inc_b[j], a[j], sides,
                                   None if start is None else float(start[1][j]))
            if j == k - 1:
                break
            iv = _look_intervals(sides, a[j], b[j])
            s0 = s0.advance(iv, t[j], r, t[j + 1])
            s1 = s1.advance(iv, t[j], r, t[j + 1])
        return a, b, upper
    shape, fixed = efficacy.shape(t)

    def both(c: float) -> tuple[np.ndarray, np.ndarray, float]:
        aa = np.where(fixed, shape, c * shape)
        bb, power = futility_with_power(t, drift, aa, sides, beta, futility, r)
        return aa, bb, power

    def level(c: float) -> float:
        aa, bb, _ = both(c)
        return float(Region.of_plan(sides, aa, bb).efficacy_probability(t, 0.0, r).sum())

    # While the drift is still being searched, a futility boundary can stop nearly
    # every path before the scaled looks; the constant then has to go low (even
    # below zero for Haybittle-Peto's final look). If even that cannot reach alpha,
    # the lowest constant is used and the drift search moves on.
    lo_c, hi_c = -20.0, 20.0
    if level(lo_c) < alpha:
        c = lo_c
    else:
        c = _solve_constant(level, alpha, 1.0, lo_c, hi_c)
    return both(c)
