"""An exact screen: which simulated experiments cannot need their own boundaries.

With random traffic every simulated experiment has its own information fractions, so
its efficacy boundaries are its own; computing them (one numerical recursion per
experiment) is nearly all the time of such a run. Most experiments, however, stay so
far from any boundary, or cross one by so much, that their decision is certain from
bounds that cost a few normal and bivariate-normal probabilities. This module proves
such bounds and applies them; the experiments they cannot settle get their exact
boundaries as before, so every decision is the one the exact boundaries give.

Setting
-------
Looks ``1..k`` at fractions ``t_1 < ... < t_k`` (uncapped: over-running allowed), the
rule's cumulative alpha per tail ``c_1 <= ... <= c_k`` (the final look spends the whole
tail alpha; classical plans through their design's cumulative alpha), ``s`` sides.
Under the canonical null law ``Z_j ~ N(0, 1)``, ``Cov(Z_i, Z_j) = sqrt(t_i / t_j)``
(``sqrt(t) Z`` is a Brownian motion, so ``Z`` is Markov). Write ``E_k(x)`` for
``{Z_k >= x}`` (one-sided) or ``{|Z_k| >= x}`` (two-sided), ``Q(x) = 1 - Phi(x)``,
``Delta_k = c_k - c_{k-1}``, and ``C_{k-1}`` for "no efficacy exit before look k".
When futility plays no part in the efficacy boundaries (no futility boundary, or a
non-binding one), the exact boundary ``a_k`` solves

    G(a_k) = s Delta_k,    G(x) = P(C_{k-1} and E_k(x)),

and ``G`` is continuous and strictly decreasing, so ``G(x) > s Delta_k`` implies
``x < a_k`` and ``G(x) <= s Delta_k`` implies ``x >= a_k``. With ``rho = sqrt(t_{k-1} /
t_k)`` let, per tail,

    D_u(x) = P(|Z_{k-1}| < u, Z_k >= x)   (two-sided),   P(Z_{k-1} < u, Z_k >= x)   (one-sided),

so that ``s D_u(x) = P(B_u and E_k(x))`` with ``B_u = {|Z_{k-1}| < u}`` (one-sided
``{Z_{k-1} < u}``); at the first look ``D_u(x) = Q(x)``.

Lower bound (a look that cannot cross). With ``v = Q^{-1}(c_{k-1})``,
``G(x) >= s D_v(x)``. Proof: ``G(x) = P(E_k(x)) - P(not C_{k-1}, E_k(x))``, and by the
Markov property ``P(not C_{k-1}, E_k(x)) = integral f(z) q(z) dz`` with ``q(z) =
P(E_k(x) | Z_{k-1} = z)`` and ``f`` the sub-density of ``Z_{k-1}`` on the paths that
already stopped. ``Z_k`` given ``Z_{k-1} = z`` is ``N(rho z, 1 - rho^2)``, so ``q`` grows
with ``|z|`` (two-sided) or with ``z`` (one-sided); ``0 <= f <= phi`` and ``f`` has mass
``s c_{k-1}``. Among such ``f`` the integral is largest when all the mass sits furthest
out, ``f = phi`` on ``{|z| >= v}`` (``{z >= v}``) (the bathtub principle), so
``P(not C_{k-1}, E_k(x)) <= P(not B_v, E_k(x))`` and ``G(x) >= P(B_v, E_k(x))``.
Hence ``D_v(x) > Delta_k`` implies ``x < a_k``. At the first look, and as a cruder form
at any look, ``Q(x) > c_k`` implies ``x < a_k`` (``E_k(a_k)`` lies inside the union of
the exits up to ``k``, of probability ``s c_k``).

Upper bound (a look that must cross). For any ``w >= a_{k-1}``, ``C_{k-1}`` lies in
``B_w``, so ``G(x) <= s D_w(x)``; hence ``D_w(x) <= Delta_k`` implies ``x >= a_k``.
The chain ``U_1 = Q^{-1}(c_1)``, ``U_k`` = any ``x`` with ``D_{U_{k-1}}(x) <=
Delta_k``, gives ``U_k >= a_k`` at every look. ``U_k`` is found by Newton steps on
``log D`` from ``Q^{-1}(Delta_k)`` (where ``D <= Q <= Delta_k``): ``log D_w`` is concave
in ``x`` (``D_w`` is the integral over ``[x, inf)`` of ``phi`` times the normal
probability of a convex set, both log-concave; Prekopa's theorem), so every step stays
on the side ``D <= Delta_k``, and each step is checked. As a crude form at any look,
``Q(x) <= Delta_k`` implies ``x >= a_k``.

A replicate is settled when, at its analysed looks in order, every look is below a
lower bound until one is above an upper bound (it stops for efficacy there) or none is
(it completes at its last look). Decisions keep a margin ``MARGIN`` on the z scale,
which covers the accuracy of the computed boundaries and rounding, so that a settled
decision is the one the computed boundaries give as well as the exact one. Measured
against the exact two-look boundary (Owen's formula below, checked against quadrature),
the computed boundaries are within 7e-5 while consecutive looks keep ``t_{k-1} / t_k
<= 0.95`` (``MARGIN`` = 5e-4), within 1.3e-3 up to a ratio of 0.99 and 5e-3 beyond,
at the close look and (less) at the looks after it; ``CLOSE_MARGINS`` widens the
margin to 0.01 and 0.05 from the first such pair on. Statistics beyond ``Z_CAP`` are
never settled (there a boundary depends on alpha spent below 1e-13, where rounding of
the spending could decide). Everything else gets its exact boundaries.

Futility: a futility stop needs the futility boundary itself, and a binding futility
boundary lowers the efficacy boundary below these bounds (paths stopped at futility no
longer count in ``G``); so the screen is used only when futility is absent or ignored.

The bivariate normal probabilities are Owen's (1956) formula through Owen's T
(``scipy.special.owens_t``), accurate to about 1e-15 absolute.

References
----------
.. [1] Owen, D. B. (1956). Tables for computing bivariate normal probabilities. Annals
       of Mathematical Statistics 27, 1075-1090.
.. [2] Prekopa, A. (1973). On logarithmic concave measures and functions. Acta Sci.
       Math. (Szeged) 34, 335-343.
.. [3] Lieb, E. H. and Loss, M. (2001). Analysis, 2nd ed., theorem 1.14 (the bathtub
       principle).
.. [4] Jennison, C. and Turnbull, B. W. (2000). Group Sequential Methods with
       Applications to Clinical Trials, chapters 7 and 19.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special

from seqtest.core.vocabulary import Decision

__all__ = ["MARGIN", "Z_CAP", "Settled", "bvn_upper", "chain_upper", "settle", "tail_mass"]

#: Margin on the z scale between a statistic and a bound before a look is settled.
MARGIN = 5e-4
#: Wider margins from the first pair of analysed looks closer than a ratio on:
#: ``(ratio of t_{k-1} / t_k above which, margin)``, the closest pair so far counts.
CLOSE_MARGINS = ((0.95, 0.01), (0.99, 0.05))
#: Statistics at or beyond this are never settled by the screen.
Z_CAP = 7.5
# a threshold beyond this is replaced by infinity in the upper chain (loses < 1e-16)
_W_INF = 8.5
_NEWTON_STEPS = 8
# absolute rounding allowance of a computed tail_mass (Owen's T to about 1e-16)
_ROUND = 2e-15
_EFFICACY = np.int8(Decision.STOP_EFFICACY.code)
_COMPLETE = np.int8(Decision.COMPLETE.code)


def bvn_upper(h: np.ndarray, k: np.ndarray, rho: np.ndarray, s: np.ndarray) -> np.ndarray:
    """``P(X >= h, Y >= k)`` for standard bivariate normal ``(X, Y)`` with correlation
    ``rho``, given ``s = sqrt(1 - rho^2) > 0``; ``h, k > 0`` (Owen 1956).

    ``P = (Q(h) + Q(k)) / 2 - T(h, (k - rho h) / (h s)) - T(k, (h - rho k) / (k s))``
    with Owen's T; ``h = inf`` gives 0.
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        ah = (k - rho * h) / (h * s)
        ak = (h - rho * k) / (k * s)
        out = (0.5 * (special.ndtr(-h) + special.ndtr(-k)) - special.owens_t(h, ah)
               - special.owens_t(k, ak))
    return np.where(np.isinf(h), 0.0, out)


def tail_mass(u: np.ndarray, x: np.ndarray, rho: np.ndarray, s: np.ndarray, sides: int
              ) -> np.ndarray:
    """``D_u(x)``: per tail, ``P(|Z_{k-1}| < u, Z_k >= x)`` (two-sided) or
    ``P(Z_{k-1} < u, Z_k >= x)`` (one-sided); ``u = inf`` gives ``Q(x)``."""
    out = special.ndtr(-x) - bvn_upper(u, x, rho, s)
    if sides == 2:
        out = out - bvn_upper(u, x, -rho, s)
    return out


def _slope(u: np.ndarray, x: np.ndarray, rho: np.ndarray, s: np.ndarray, sides: int
           ) -> np.ndarray:
    """``d D_u(x) / dx = -phi(x) P(B_u | Z_k = x)``."""
    with np.errstate(invalid="ignore", over="ignore"):
        cond = special.ndtr((u - rho * x) / s)
        if sides == 2:
            cond = cond - special.ndtr((-u - rho * x) / s)
    cond = np.where(np.isinf(u), 1.0, cond)
    with np.errstate(over="ignore", invalid="ignore"):
        return -np.exp(-0.5 * x * x) / np.sqrt(2.0 * np.pi) * cond


def chain_upper(w: np.ndarray, delta: np.ndarray, rho: np.ndarray, s: np.ndarray,
                sides: int) -> np.ndarray:
    """An upper bound ``U`` on the exact boundary: some ``x`` with ``D_w(x) <= delta``
    (``w`` an upper bound at the previous look, ``inf`` at the first one); ``inf``
    where ``delta <= 0`` or no such point was found."""
    with np.errstate(divide="ignore"):
        # just right of Q^{-1}(delta), where D <= Q < delta
        x = -special.ndtri(np.clip(delta, 0.0, 0.5) * (1.0 - 1e-10))
    best = np.full(x.shape, np.inf)
    ok = np.isfinite(x) & (delta > 0)
    log_t = np.log(np.where(ok, delta, 1.0))
    # D_inf = Q is computed to relative rounding; otherwise allow Owen's T's rounding
    tol = np.where(np.isinf(w), 0.0, _ROUND)
    for _ in range(_NEWTON_STEPS):
        if not ok.any():
            break
        d = tail_mass(w[ok], x[ok], rho[ok], s[ok], sides)
        good = d + tol[ok] <= delta[ok]
        idx = np.flatnonzero(ok)
        best[idx[good]] = x[idx[good]]
        slope = _slope(w[ok], x[ok], rho[ok], s[ok], sides)
        with np.errstate(divide="ignore", invalid="ignore"):
            step = -(np.log(d) - log_t[ok]) * d / slope     # Newton on log D: <= 0
        move = good & np.isfinite(step) & (step < 0)
        # damped, and kept positive (the bivariate formula needs x > 0): every point
        # is checked before it is used, so damping only affects how tight U is
        x[idx[move]] = np.maximum(x[idx[move]] + np.maximum(step[move], -0.5),
                                  0.5 * x[idx[move]])
        # stop where the step is negligible or the point left the valid side
        ok[idx[~move | (np.abs(step) < 1e-9)]] = False
    return best


@dataclass(frozen=True)
class Settled:
    """What the screen settled for a chunk of replicates.

    Attributes
    ----------
    settled : ndarray of bool
        Replicates whose decision is certain without their boundaries.
    stop, code : ndarray
        For those: the 0-based stopping look and the decision code (efficacy, or
        completion at the last analysed look).
    """

    settled: np.ndarray
    stop: np.ndarray
    code: np.ndarray


def settle(stat: np.ndarray, valid: np.ndarray, frac: np.ndarray, cum: np.ndarray,
           end: np.ndarray, sides: int, margin: float = MARGIN) -> Settled:
    """Settle the replicates whose decision the bounds make certain.

    Parameters
    ----------
    stat : ndarray (n, K)
        ``|z|`` (two-sided) or ``z`` (one-sided) at each look.
    valid : ndarray of bool (n, K)
        The looks analysed (before ``end``).
    frac : ndarray (n, K)
        Observed information fractions (uncapped).
    cum : ndarray (n, K)
        The rule's cumulative alpha per tail at each analysed look (the last analysed
        look: the whole tail alpha).
    end : ndarray of int (n,)
        Number of looks of each replicate; its last look is ``end - 1``.
    sides : {1, 2}
    margin : float
        Distance kept from each bound on the z scale (wider after close looks:
        ``CLOSE_MARGINS``).

    Returns
    -------
    Settled
    """
    n, k = stat.shape
    look = np.arange(k)[None, :]
    valid = valid & (look < end[:, None])
    margins = _margins(frac, valid, margin)
    with np.errstate(divide="ignore"):
        # crude: Q(stat + margin) > c_k  ->  the look continues
        clear0 = special.ndtr(-(stat + margins)) > cum
    clear0 &= stat + margins < Z_CAP
    unclear = valid & ~clear0
    stop = end - 1
    code = np.full(n, _COMPLETE, dtype=np.int8)
    settled = ~unclear.any(axis=1)
    rows = np.flatnonzero(~settled)
    if rows.size == 0:
        return Settled(settled, stop, code)
    # the first look that the crude bound does not clear; earlier looks all continue
    j0 = np.argmax(unclear[rows], axis=1)
    prev_c = np.where(j0 > 0, _previous(cum[rows], valid[rows], j0), 0.0)
    s0 = stat[rows, j0]
    m0 = margins[rows, j0]
    with np.errstate(divide="ignore"):
        cross0 = (special.ndtr(-(s0 - m0)) <= cum[rows, j0] - prev_c) & (s0 + m0 < Z_CAP)
    hit = rows[cross0]
    settled[hit] = True
    stop[hit] = j0[cross0]
    code[hit] = _EFFICACY
    rest = rows[~cross0]
    if rest.size:
        ok, r_stop, r_code = _refine(stat[rest], valid[rest], frac[rest], cum[rest], sides,
                                     margins[rest])
        settled[rest[ok]] = True
        stop[rest[ok]] = np.where(r_stop[ok] >= 0, r_stop[ok], stop[rest[ok]])
        code[rest[ok]] = r_code[ok]
    return Settled(settled, stop, code)


def _margins(frac: np.ndarray, valid: np.ndarray, margin: float) -> np.ndarray:
    """Per look: ``margin``, widened by ``CLOSE_MARGINS`` from the first analysed look
    that follows the previous analysed one closely (the closest pair so far counts)."""
    n, k = frac.shape
    out = np.full((n, k), float(margin))
    prev = np.full(n, np.nan)
    closest = np.zeros(n)
    for j in range(k):
        v = valid[:, j]
        with np.errstate(invalid="ignore"):
            ratio = np.where(v & np.isfinite(prev), prev / frac[:, j], 0.0)
        closest = np.maximum(closest, ratio)
        for above, wide in CLOSE_MARGINS:
            out[closest > above, j] = max(float(margin), wide)
        prev = np.where(v, frac[:, j], prev)
    return out


def _previous(cum: np.ndarray, valid: np.ndarray, j: np.ndarray) -> np.ndarray:
    """Cumulative alpha at the last analysed look before look ``j`` (0 if none)."""
    k = cum.shape[1]
    before = valid & (np.arange(k)[None, :] < j[:, None])
    has = before.any(axis=1)
    last = k - 1 - np.argmax(before[:, ::-1], axis=1)
    return np.where(has, cum[np.arange(cum.shape[0]), last], 0.0)


def _refine(stat: np.ndarray, valid: np.ndarray, frac: np.ndarray, cum: np.ndarray,
            sides: int, margins: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The refined bounds, look by look, for the replicates the crude ones left open.

    Returns (settled, stop, code); ``stop = -1`` for a completion at the last look."""
    n, k = stat.shape
    open_ = np.ones(n, bool)
    settled = np.zeros(n, bool)
    stop = np.full(n, -1, dtype=np.int64)
    code = np.full(n, _COMPLETE, dtype=np.int8)
    prev_c = np.zeros(n)
    prev_t = np.ones(n)
    w = np.full(n, np.inf)          # upper bound at the previous analysed look
    has = np.zeros(n, bool)
    for j in range(k):
        r = np.flatnonzero(open_ & valid[:, j])
        if r.size == 0:
            continue
        c = cum[r, j]
        delta = c - prev_c[r]
        t = frac[r, j]
        first = ~has[r]
        rho = np.where(first, 0.0, np.sqrt(prev_t[r] / t))
        s = np.where(first, 1.0, np.sqrt(np.maximum(t - prev_t[r], 0.0) / t))
        x = stat[r, j]
        margin = margins[r, j]
        inside = x + margin < Z_CAP
        # lower bound: D_v(x + margin) > Delta  ->  continues
        with np.errstate(divide="ignore"):
            v = np.where(first, np.inf, np.minimum(-special.ndtri(prev_c[r]), _W_INF))
        hi = x + margin
        lower_ok = inside & (hi > 0)
        d_low = np.zeros(r.size)
        if lower_ok.any():
            d_low[lower_ok] = tail_mass(v[lower_ok], hi[lower_ok], rho[lower_ok],
                                        s[lower_ok], sides)
        clear = lower_ok & (d_low > delta + _ROUND)
        # upper bound chain at this look (needed now, and for later looks)
        u = chain_upper(w[r], delta, rho, s, sides)
        lo = x - margin
        cross = ~clear & inside & (lo > 0) & np.isfinite(u) & (lo >= u)
        done_cross = r[cross]
        settled[done_cross] = True
        stop[done_cross] = j
        code[done_cross] = _EFFICACY
        open_[done_cross] = False
        unsure = r[~clear & ~cross]
        open_[unsure] = False          # needs its exact boundaries
        keep = r[clear]
        prev_c[keep] = c[clear]
        prev_t[keep] = t[clear]
        w[keep] = np.where(u[clear] > _W_INF, np.inf, u[clear])
        has[keep] = True
    settled |= open_                   # cleared every look: completes at its last look
    return settled, stop, code
