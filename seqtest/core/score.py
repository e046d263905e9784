"""Score statistics with the variance restricted to the null, for binary and rate metrics.

Two arms, control (``c``) and treatment (``t``); the effect is treatment relative to
control, on the ``"difference"`` scale (``m_t - m_c``) or the ``"relative"`` scale
(``m_t / m_c - 1``, i.e. the ratio ``phi = m_t / m_c`` less one). Every function is
pure numpy and vectorised: the totals, the null and the critical values broadcast
together (for instance ``(replications, looks)`` in simulation).

What is computed
----------------
For a null value ``theta0`` the score contrast ``S`` and its restricted variance are

- binary, difference, ``H0: p_t - p_c = d0``:
  ``S = p_t^ - p_c^ - d0``, ``V = p~_t (1 - p~_t) / n_t + p~_c (1 - p~_c) / n_c``;
- binary, relative, ``H0: p_t / p_c = phi0``:
  ``S = p_t^ - phi0 p_c^``, ``V = p~_t (1 - p~_t) / n_t + phi0^2 p~_c (1 - p~_c) / n_c``;
- rate (events over exposure), difference ``l_t - l_c = d0``:
  ``S = l_t^ - l_c^ - d0``, ``V = l~_t / E_t + l~_c / E_c``;
- rate, relative ``l_t / l_c = phi0``:
  ``S = l_t^ - phi0 l_c^``, ``V = l~_t / E_t + phi0^2 l~_c / E_c``,

where ``~`` marks the maximum-likelihood estimates restricted to the null
(Miettinen and Nurminen 1985; Farrington and Manning 1990). The score statistic is
``z = S / sqrt(V)``. Restricted estimates, all in closed form:

- binary difference: the cubic of Farrington and Manning (1990, eq. 5 and the
  appendix; the trigonometric solution of Miettinen and Nurminen 1985), then
  polished by safeguarded Newton steps on the likelihood equation in factored form
  (bracketed, so always the maximum on the feasible range; it repairs the digits the
  trigonometric form loses for rare outcomes, ``p~`` of 1e-6 and below, and the
  rare wrong root it picks there). At ``d0 = 0`` it is exactly the pooled
  proportion;
- binary relative: the smaller root of the quadratic of Miettinen and Nurminen
  (1985), ``N phi0 p^2 - (n_t phi0 + x_t + n_c + x_c phi0) p + x = 0`` for ``p~_c``,
  in the cancellation-free form ``2 C / (-B + sqrt(B^2 - 4 A C))``;
- rate difference: the positive root of ``E l^2 + (E d0 - X) l - x_c d0 = 0`` for
  ``l~_c`` (``E = E_c + E_t``, ``X = x_c + x_t``), cancellation-free;
- rate relative: ``l~_c = X / (E_c + phi0 E_t)``. Then ``z`` equals the score
  statistic of the conditional binomial test, ``(x_t - X pi0) / sqrt(X pi0 (1 - pi0))``
  with ``pi0 = phi0 E_t / (phi0 E_t + E_c)`` (exact algebraic identity): the
  conditional law of ``x_t`` given the total ``X`` is free of the nuisance rate, which
  is why the conditional form is the natural one for a ratio. A difference of rates
  has no such conditioning, so its score uses the restricted estimate above; at
  ``d0 = 0`` both reduce to the pooled-rate test ``(l_t^ - l_c^) / sqrt(l^ (1/E_t +
  1/E_c))``.

At the no-effect null (``d0 = 0`` or ``phi0 = 1``) the four statistics are the pooled
tests (binary: the two-proportion z test whose square is Pearson's chi-square), and
the difference and relative statistics of one kind are *the same number*: the
decision at no effect does not depend on the scale; the scale matters only for
intervals and for non-zero margins.

Skewness correction (recommended for decisions)
-----------------------------------------------
With unequal arms the score contrast is skewed under the null (the small arm's
proportion is right-skewed), so ``z`` is not symmetric: at a 2% baseline with 8,000
control and 32,000 treatment users the pooled z rejects 0.0235 upward and 0.0264
downward at 1.96 per tail (exact enumeration; the unpooled Wald z: 0.0297 and
0.0209). The correction of Bartlett (1953) and Gart and Nam (1988, 1990), in the
form of Laud (2017), uses the third central moment of ``S`` at the restricted
estimates,

- binary: ``mu3 = p~_t q~_t (q~_t - p~_t) / n_t^2 - w^3 p~_c q~_c (q~_c - p~_c) / n_c^2``
  (``q = 1 - p``; ``w = 1`` on the difference scale, ``phi0`` on the relative one);
- rate: ``mu3 = l~_t / E_t^2 - w^3 l~_c / E_c^2``,

and its skewness ``gamma = mu3 / V^(3/2)``: by the Cornish-Fisher expansion the
upper and lower ``c``-quantiles of ``z`` are ``+-c + gamma (c^2 - 1) / 6``. The
corrected statistic ``z_sc`` solves ``z_sc + gamma (z_sc^2 - 1) / 6 = z`` on the
increasing branch (closed form below), so ``z_sc >= c`` exactly when
``z >= c + gamma (c^2 - 1) / 6``, and ``z_sc <= -c`` exactly when
``z <= -c + gamma (c^2 - 1) / 6`` (for ``c < 3 / |gamma|``, i.e. always in practice:
``|gamma|`` is below 0.1 once the smaller arm expects about 100 outcomes). In the
example above it gives 0.0250 and 0.0250. :attr:`ScoreTest.corrected_z` is this
statistic; compare it with the usual boundaries. Beyond the increasing branch (only
for ``|gamma| > 3 / |z|``) it is continued with slope 1, so it stays monotone.

Which statistic where
---------------------
- binary and rate metrics, both scales: the skewness-corrected score statistic for
  decisions and intervals (it holds each tail at its level with unequal arms, where
  the unpooled Wald z leaks one tail and the plain score z the other); the plain
  score z (``correction=False``, no skewness term) is what the published
  Farrington-Manning test is and what the outside references compute.
- continuous metrics keep Welch's unpooled statistic: with unequal variances a
  pooled variance is wrong in size even asymptotically when the arms differ in size
  (the Behrens-Fisher problem), and the mean of a continuous metric has no
  mean-variance link to restrict under the null. The unpooled statistic also stays
  the right one for a *difference of two estimated ratios or regression-adjusted
  means* (delta method), where no likelihood under the null is available.

What to show at a look
----------------------
``se`` is the standard error restricted to the null, on the scale of the estimate,
so that ``z = (estimate - null) / se`` holds exactly:

- difference scale: ``se = sqrt(V)``;
- relative scale: ``estimate = m_t^ / m_c^ - 1`` and ``se = sqrt(V) / m_c^``,
  because ``S = m_c^ (phi^ - phi0)``; infinite when the control arm has no
  outcomes (then the estimate is ``inf`` or ``nan`` while ``z`` stays finite).
  The same ``z`` on the log ratio: ``log phi^ - log phi0`` over
  ``sqrt(V) / L(m_t^, phi0 m_c^)`` with ``L`` the logarithmic mean (see
  :func:`log_ratio`), for machinery that works on the log scale (mixture plans).

``information = 1 / V`` (of the contrast ``S``, the same at no effect on both scales)
is proportional to the sample size at a fixed allocation and is the quantity for
information fractions; the matching maximum is ``n_c,max / v0`` with ``v0`` from
:func:`design_variances`.

Intervals
---------
:func:`interval` inverts the test: the limits are the nulls where the statistic
equals the critical value, ``z(theta0) = c`` (lower) and ``z(theta0) = -c`` (upper;
``sides=2``), for the plain or the skewness-corrected statistic. A repeated
confidence interval at look ``k`` is this with ``c`` = the look's efficacy boundary
(non-binding boundaries; Jennison and Turnbull 1989): under ``theta0`` the score
statistics at ``theta0`` over the looks have asymptotically the canonical joint
distribution, which is all the repeated interval needs. Stage-wise inference at the
end: the p-value is the stage-wise ordering p-value of the observed sequence of
(corrected) score statistics at the null, exactly the statistics the decisions used;
the confidence interval and median-unbiased estimate are found, as now, on the
canonical scale with ``theta = estimate`` and information ``1 / se^2`` at the
stopping look.

Root finding: the lower and the upper limits of all looks are solved together, as
one set of problems, so that each vectorised evaluation of the statistic serves
all of them (:func:`_limit`). The first evaluation brackets each limit with points
from 0.15 to 14 times a Wald-type distance ``c * step`` from the estimate (``step``
a Wald-type standard error, on the log ratio for the relative scale; dense around
the Wald-type guess ``estimate -+ c * step``) and the end of the range; then each
evaluation takes an inverse quadratic interpolation of ``z(theta) - (+-c)`` inside
the bracket and points each side of it, from a quarter of the tolerance up to its
estimated error, so that the bracket shrinks to a few times the interpolation's
error (superlinear), and to the tolerance once that error is below it; points
evenly across the bracket where interpolation fails. A typical look takes three
evaluations for both limits, the test at ``null`` included (at most eight in the
tests' random set of small, huge, rare and extreme samples). It stops when the bracket is
narrower than ``1e-12`` times the larger of the Wald scale and the estimate's
magnitude (on the log ratio for the relative scale), so each limit is within that
distance of a root of the computed statistic; ``tests/test_score.py`` and
``tests/test_score_interval_solver.py`` check the limits against
``scipy.optimize.brentq`` at a tolerance of ``1e-14`` on the same scale, and against
statsmodels' closed-form ratio interval to 1e-8. Where the statistic is itself
noisy at its root (both arms with nearly all successes, on the relative scale, where
the restricted estimates lose digits), it changes sign more than once within a
width larger than that tolerance, and the limit is one of those sign changes. The
returned limit is the final bracket's end on the accepting side (or the root itself
when met exactly); a relative lower limit below a log ratio of ``log 2^-52``, where
``expm1`` stops resolving the ratio from 0, is -1. When ``null`` is given the limits
are then moved, on the returned scale and by at most that tolerance, so that the
interval excludes ``null`` exactly when the test at ``null`` rejects.

Validity rests on ``z`` being decreasing in ``theta0``; this is proved for the rate
ratio (``z = A / sqrt(phi0) - B sqrt(phi0)``) and checked numerically for the others
in the tests (every table with arms up to 30 and a grid of margins).

References
----------
.. [1] Miettinen, O. and Nurminen, M. (1985). Comparative analysis of two rates.
       Statistics in Medicine 4, 213-226.
.. [2] Farrington, C. P. and Manning, G. (1990). Test statistics and sample size
       formulae for comparative binomial trials with null hypothesis of non-zero risk
       difference or non-unity relative risk. Statistics in Medicine 9, 1447-1454.
.. [3] Gart, J. J. and Nam, J. (1988). Approximate interval estimation of the ratio
       of binomial parameters: a review and corrections for skewness. Biometrics 44,
       323-338.
.. [4] Gart, J. J. and Nam, J. (1990). Approximate interval estimation of the
       difference in binomial parameters: correction for skewness and extension to
       multiple tables. Biometrics 46, 637-643.
.. [5] Bartlett, M. S. (1953). Approximate confidence intervals. II. More than one
       unknown parameter. Biometrika 40, 306-317.
.. [6] Laud, P. J. (2017). Equal-tailed confidence intervals for comparison of rates.
       Pharmaceutical Statistics 16, 334-348.
.. [7] Jennison, C. and Turnbull, B. W. (1989). Interim analyses: the repeated
       confidence interval approach. JRSS B 51, 305-361.
.. [8] Brent, R. P. (1973). Algorithms for Minimization without Derivatives.
       Prentice-Hall (inverse quadratic interpolation and its order of convergence).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy import special

from seqtest.core.region import Region
from seqtest.core.roots import solve

__all__ = [
    "KINDS",
    "SCALES",
    "DesignVariances",
    "ScoreTest",
    "binary_difference",
    "binary_relative",
    "corrected_z",
    "design_variances",
    "fixed_sample_size",
    "group_sequential_size",
    "interval",
    "log_ratio",
    "rate_difference",
    "rate_relative",
    "score_drift",
    "score_test",
    "skew_bounds",
]

KINDS: tuple[str, ...] = ("binary", "rate")
SCALES: tuple[str, ...] = ("difference", "relative")

# Relative width at which the interval search stops (see the module docstring).
XTOL = 1e-12
# |log ratio| beyond which a limit is reported as the end of the range (0 or inf):
# with totals below 1e30 no finite limit comes near it (|log| < 80).
_LOG_RANGE = 300.0
# The log ratio below which a lower limit is reported as -1 (a ratio of 0): the
# smallest w with expm1(w) = -1 + 2^-52; below about -36.7 expm1 rounds to -1, where
# the statistic jumps to its value at a ratio of exactly 0.
_LOG_FLOOR = math.log(2.0 ** -52)

Array = np.ndarray


# ---------------------------------------------------------------------------
# Input checks
# ---------------------------------------------------------------------------


def _first_bad(x: Array, ok: Array) -> float:
    bad = x[~ok] if x.ndim else x
    return float(np.ravel(bad)[0])


def _array(name: str, value: Any) -> Array:
    try:
        x = np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise ValueError(f"{name}: got {value!r}; allowed is a finite number or an array "
                         "of them") from None
    ok = np.isfinite(x)
    if not np.all(ok):
        raise ValueError(f"{name}: got {_first_bad(x, ok)!r}; allowed is a finite number")
    return x


def _counts(kind: str, x_c: Any, n_c: Any, x_t: Any, n_t: Any) -> tuple[Array, ...]:
    size = "n" if kind == "binary" else "exposure"
    count = "successes" if kind == "binary" else "events"
    out = []
    for arm, x, n in (("control", x_c, n_c), ("treatment", x_t, n_t)):
        xa = _array(f"{arm} {count}", x)
        na = _array(f"{arm} {size}", n)
        if not np.all(na > 0):
            raise ValueError(f"{arm} {size}: got {_first_bad(na, na > 0)!r}; allowed is a "
                             "number > 0")
        if not np.all(xa >= 0):
            raise ValueError(f"{arm} {count}: got {_first_bad(xa, xa >= 0)!r}; allowed is a "
                             "number >= 0")
        if kind == "binary":
            xb, nb = np.broadcast_arrays(xa, na)
            ok = xb <= nb
            if not np.all(ok):
                raise ValueError(f"{arm} {count}: got {_first_bad(xb, ok)!r}; allowed is at "
                                 f"most {size} ({_first_bad(nb, ok)!r})")
        out += [xa, na]
    return tuple(np.broadcast_arrays(*out))


def _check_kind_scale(kind: Any, scale: Any) -> tuple[str, str]:
    if kind not in KINDS:
        raise ValueError(f"kind: got {kind!r}; allowed are 'binary' and 'rate' (continuous "
                         "metrics keep Welch's statistic)")
    if scale not in SCALES:
        raise ValueError(f"scale: got {scale!r}; allowed are 'difference' and 'relative'")
    return kind, scale


def _check_null(kind: str, scale: str, null: Any) -> Array:
    d = _array("null", null)
    if scale == "relative":
        ok = d > -1.0
        if not np.all(ok):
            raise ValueError(f"null: got {_first_bad(d, ok)!r}; allowed is a relative effect "
                             "> -1 (a ratio > 0)")
    elif kind == "binary":
        ok = np.abs(d) < 1.0
        if not np.all(ok):
            raise ValueError(f"null: got {_first_bad(d, ok)!r}; allowed is a difference of "
                             "proportions strictly between -1 and 1")
    return d


def _scalar(x: Array) -> Any:
    return x[()] if isinstance(x, np.ndarray) and x.ndim == 0 else x


# ---------------------------------------------------------------------------
# Restricted maximum-likelihood estimates (no checks; arrays broadcast)
# ---------------------------------------------------------------------------


def _polish_difference_root(p: Array, p1: Array, p2: Array, th: Array, d: Array,
                            lo: Array, hi: Array) -> Array:
    """Safeguarded Newton on the likelihood equation of ``P1`` (the treatment's
    restricted proportion) in its factored form

        h(P1) = (p1 - P1) P2 (1 - P2) + th (p2 - P2) P1 (1 - P1),  P2 = P1 - d,

    which is the score times ``P1 (1 - P1) P2 (1 - P2) / n_t > 0``, so ``h >= 0``
    left of the maximum and ``<= 0`` right of it on ``[lo, hi]`` (the restricted
    log-likelihood is concave). The bracket shrinks with the sign of ``h``; a Newton
    step outside it is replaced by bisection. From the closed-form root this takes
    one or two steps; it also repairs the rare cases where rounding makes the
    trigonometric formula pick a neighbouring root (rates of 1e-9 and a margin of
    the same size). Converges to a few ulps of ``P1``; the factored form keeps full
    relative precision for tiny rates, where the expanded cubic cancels."""
    shape = np.broadcast_shapes(p.shape, p1.shape, p2.shape, th.shape, d.shape, lo.shape,
                                hi.shape)
    # flat copies (0-d arrays would turn comparisons into scalars)
    lo, hi, p = (np.broadcast_to(v, shape).ravel().copy() for v in (lo, hi, p))
    p1, p2, th, d = (np.broadcast_to(v, shape).ravel() for v in (p1, p2, th, d))

    def h_and_slope(x: Array, j: Array) -> tuple[Array, Array]:
        dj, thj, p1j, p2j = d[j], th[j], p1[j], p2[j]
        q = x - dj
        h = (p1j - x) * q * (1.0 - q) + thj * (p2j - q) * x * (1.0 - x)
        hp = (-q * (1.0 - q) + (p1j - x) * (1.0 - 2.0 * q) - thj * x * (1.0 - x)
              + thj * (p2j - q) * (1.0 - 2.0 * x))
        return h, hp

    every = np.arange(p.size)
    # the maximum at an end of the range: h <= 0 just right of lo, or >= 0 just left
    # of hi (h can vanish at an end through its factor P1 or P2; then its slope
    # tells the sign inside)
    h_lo, s_lo = h_and_slope(lo, every)
    h_hi, s_hi = h_and_slope(hi, every)
    at_lo = (h_lo < 0) | ((h_lo == 0) & (s_lo <= 0))
    at_hi = ((h_hi > 0) | ((h_hi == 0) & (s_hi < 0))) & ~at_lo
    p = np.where(at_lo, lo, np.where(at_hi, hi, p))
    active = (hi > lo) & ~at_lo & ~at_hi
    for _ in range(100):
        if not np.any(active):
            break
        j = np.flatnonzero(active)
        pj = p[j]
        h, hp = h_and_slope(pj, j)
        lo_j = np.where(h > 0, pj, lo[j])
        hi_j = np.where(h < 0, pj, hi[j])
        with np.errstate(divide="ignore", invalid="ignore"):
            newton = pj - h / hp
        inside = np.isfinite(newton) & (newton >= lo_j) & (newton <= hi_j)
        # a Newton step of relative size 1e-8 leaves an error of order its square
        # (a step below one ulp gives newton == pj: converged, not outside)
        converged = inside & (np.abs(newton - pj) <= 1e-8 * np.abs(pj))
        inside &= converged | ((newton > lo_j) & (newton < hi_j))
        nxt = np.where(inside, newton, 0.5 * (lo_j + hi_j))
        done = (h == 0) | converged | (hi_j - lo_j <= 4e-16 * np.abs(hi_j))
        p[j] = np.where(h == 0, pj, nxt)
        lo[j], hi[j] = lo_j, hi_j
        active[j] = ~done
    return p.reshape(shape)


def _binary_difference_null(x_c: Array, n_c: Array, x_t: Array, n_t: Array, d: Array
                            ) -> tuple[Array, Array]:
    """Restricted MLE ``(p~_c, p~_t)`` under ``p_t - p_c = d`` (Farrington-Manning)."""
    pooled = (x_c + x_t) / (n_c + n_t)
    if np.all(d == 0):
        # no effect under the null: the pooled proportion in both arms (what the cubic
        # gives, and what is returned below for d == 0 anyway), without solving it
        p_same = np.where(d == 0, pooled, pooled)  # the broadcast shape, a new array
        return p_same, p_same.copy()
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        p1 = x_t / n_t          # arm "1" of the paper is the treatment
        p2 = x_c / n_c
        th = n_c / n_t
        a = 1.0 + th
        b = -(1.0 + th + p1 + th * p2 + d * (th + 2.0))
        c = d * d + d * (2.0 * p1 + th + 1.0) + p1 + th * p2
        e = -p1 * d * (1.0 + d)
        b3a = b / (3.0 * a)
        v = b3a ** 3 - b * c / (6.0 * a * a) + e / (2.0 * a)
        u2 = np.maximum(b3a * b3a - c / (3.0 * a), 0.0)
        u = np.where(v < 0, -1.0, 1.0) * np.sqrt(u2)
        u3 = u * u * u
        cos_arg = np.clip(np.where(u3 != 0, v / np.where(u3 != 0, u3, 1.0), 0.0), -1.0, 1.0)
        w = (math.pi + np.arccos(cos_arg)) / 3.0
        p = 2.0 * u * np.cos(w) - b3a
        lo = np.maximum(0.0, d)
        hi = np.minimum(1.0, 1.0 + d)
        p = np.clip(np.where(np.isfinite(p), p, 0.5 * (lo + hi)), lo, hi)
        p = _polish_difference_root(p, p1, p2, th, d, lo, hi)
    p_t = np.where(d == 0, pooled, p)
    p_c = np.where(d == 0, pooled, np.clip(p_t - d, 0.0, 1.0))
    return p_c, p_t


def _binary_ratio_null(x_c: Array, n_c: Array, x_t: Array, n_t: Array, phi: Array
                       ) -> tuple[Array, Array]:
    """Restricted MLE ``(p~_c, p~_t)`` under ``p_t / p_c = phi`` (Miettinen-Nurminen)."""
    n = n_c + n_t
    x = x_c + x_t
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        a = n * phi
        b = -(n_t * phi + x_t + n_c + x_c * phi)
        disc = np.maximum(b * b - 4.0 * a * x, 0.0)
        den = -b + np.sqrt(disc)
        p_c = np.where(den > 0, 2.0 * x / np.where(den > 0, den, 1.0), 0.0)
        p_c = np.clip(p_c, 0.0, np.minimum(1.0, 1.0 / phi))
        p_c = np.where(phi == 1.0, x / n, p_c)
        p_t = np.minimum(phi * p_c, 1.0)
    return p_c, p_t


def _rate_difference_null(x_c: Array, e_c: Array, x_t: Array, e_t: Array, d: Array
                          ) -> tuple[Array, Array]:
    """Restricted MLE ``(l~_c, l~_t)`` under ``l_t - l_c = d``."""
    e = e_c + e_t
    x = x_c + x_t
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        h = x / e - d                       # l^2 - h l - d x_c / e = 0
        k = d * x_c / e
        s = np.sqrt(np.maximum(h * h + 4.0 * k, 0.0))
        # positive root (h + s) / 2, without cancellation when h < 0
        den = s - h
        alt = np.where(den > 0, 2.0 * k / np.where(den > 0, den, 1.0), 0.0)
        l_c = np.where(h >= 0, 0.5 * (h + s), alt)
        l_c = np.maximum(l_c, np.maximum(0.0, -d))
        l_c = np.where(d == 0, x / e, l_c)
        l_t = np.maximum(l_c + d, 0.0)
    return l_c, l_t


def _rate_ratio_null(x_c: Array, e_c: Array, x_t: Array, e_t: Array, phi: Array
                     ) -> tuple[Array, Array]:
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        l_c = (x_c + x_t) / (e_c + phi * e_t)
    return l_c, phi * l_c


# ---------------------------------------------------------------------------
# The statistic
# ---------------------------------------------------------------------------


def corrected_z(z: Any, skewness: Any) -> Array:
    """Skewness-corrected statistic: the root ``u`` of ``u + g (u^2 - 1) = z``,
    ``g = skewness / 6``, on the branch where the left side increases.

    Closed form ``u = 2 (g + z) / (1 + sqrt(1 + 4 g (g + z)))`` (no division by
    ``g``, so exact as ``g -> 0``); where the square root's argument is negative
    (``z`` beyond the branch, only for ``|skewness| > 3 / |z|``) ``u`` is continued
    linearly with slope 1 from the branch's end ``u = -1 / (2 g)``. Increasing in
    ``z``; ``u >= c`` iff ``z >= c + g (c^2 - 1)`` for ``0 <= c < 1 / (2 |g|)``.
    """
    zz = np.asarray(z, float)
    g = np.asarray(skewness, float) / 6.0
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        dsc = 1.0 + 4.0 * g * (g + zz)
        root = 2.0 * (g + zz) / (1.0 + np.sqrt(np.maximum(dsc, 0.0)))
        g_safe = np.where(g != 0, g, 1.0)
        z_end = -1.0 / (4.0 * g_safe) - g
        beyond = -1.0 / (2.0 * g_safe) + (zz - z_end)
        out = np.where(dsc >= 0, root, beyond)
    # infinite z (zero variance) stays infinite
    out = np.where(np.isfinite(zz), out, zz)
    return _scalar(out)


def skew_bounds(critical: Any, skewness: Any) -> tuple[Array, Array]:
    """Boundaries on the plain score ``z`` equivalent to ``+-critical`` on the
    corrected statistic: ``(c + g (c^2 - 1), -c + g (c^2 - 1))``, ``g = skewness/6``.

    For displaying a look with ``z = (estimate - null) / se`` next to the boundaries
    it is compared with (valid for ``c < 3 / |skewness|``; see the module docstring).
    """
    c = np.asarray(critical, float)
    shift = np.asarray(skewness, float) / 6.0 * (c * c - 1.0)
    return _scalar(c + shift), _scalar(-c + shift)


@dataclass(frozen=True)
class ScoreTest:
    """The score test of one null at one or many looks (arrays broadcast).

    Attributes
    ----------
    kind, scale : str
        ``"binary"`` or ``"rate"``; ``"difference"`` or ``"relative"``.
    null : ndarray or float
        The null value on the scale (relative: ``phi0 - 1``).
    estimate : ndarray or float
        ``m_t^ - m_c^`` or ``m_t^ / m_c^ - 1`` (``inf``/``nan`` when ``m_c^ = 0``).
    se : ndarray or float
        Standard error restricted to the null, on the estimate's scale:
        ``z = (estimate - null) / se`` (see the module docstring); ``inf`` where
        `degenerate`.
    z : ndarray or float
        The score statistic ``S / sqrt(V)`` (Farrington-Manning; with
        ``correction=True`` the Miettinen-Nurminen variance); 0 where `degenerate`.
    skewness : ndarray or float
        ``mu3 / V^(3/2)`` of ``S`` at the restricted estimates; 0 where `degenerate`.
    corrected_z : ndarray or float
        The skewness-corrected statistic (:func:`corrected_z`): the one to compare
        with the boundaries and to turn into p-values.
    variance : ndarray or float
        ``V``, the restricted variance of the contrast ``S``.
    information : ndarray or float
        ``1 / V`` (0 where `degenerate`).
    control_null, treatment_null : ndarray or float
        The restricted estimates of the two arms' means.
    degenerate : ndarray or bool
        ``V = 0``: no outcomes at all (or, binary at no effect, all units with the
        outcome) so no evidence either way; ``z`` and ``corrected_z`` are 0.
    """

    kind: str
    scale: str
    null: Any
    estimate: Any
    se: Any
    z: Any
    skewness: Any
    corrected_z: Any
    variance: Any
    information: Any
    control_null: Any
    treatment_null: Any
    degenerate: Any

    def p_value(self, sides: int = 2, *, corrected: bool = True) -> Any:
        """Fixed-sample p-value: one-sided upper (``sides=1``, treatment better) or
        two-sided; from the normal survival function (``ndtr(-z)``), so tiny
        p-values keep their relative precision."""
        if sides not in (1, 2) or isinstance(sides, bool):
            raise ValueError(f"sides: got {sides!r}; allowed are 1 and 2")
        zz = np.asarray(self.corrected_z if corrected else self.z, float)
        if sides == 1:
            return _scalar(special.ndtr(-zz))
        return _scalar(np.minimum(1.0, 2.0 * special.ndtr(-np.abs(zz))))


def _moments(kind: str, scale: str, x_c: Array, n_c: Array, x_t: Array, n_t: Array,
             null: Array, correction: bool) -> tuple[Array, ...]:
    """(S, V, mu3, m_c^, m_t^, restricted m_c, restricted m_t) without checks."""
    m_c = x_c / n_c
    m_t = x_t / n_t
    fn: Callable[[Array, Array, Array, Array, Array], tuple[Array, Array]]
    if scale == "difference":
        w = np.ones_like(null)
        fn = _binary_difference_null if kind == "binary" else _rate_difference_null
        r_c, r_t = fn(x_c, n_c, x_t, n_t, null)
        s = m_t - m_c - null
    else:
        w = 1.0 + null
        fn = _binary_ratio_null if kind == "binary" else _rate_ratio_null
        r_c, r_t = fn(x_c, n_c, x_t, n_t, w)
        s = m_t - w * m_c
    with np.errstate(over="ignore", invalid="ignore"):
        if kind == "binary":
            u_t, u_c = r_t * (1.0 - r_t), r_c * (1.0 - r_c)
            v = u_t / n_t + w * w * u_c / n_c
            mu3 = (u_t * (1.0 - 2.0 * r_t) / (n_t * n_t)
                   - w ** 3 * u_c * (1.0 - 2.0 * r_c) / (n_c * n_c))
            if correction:
                n = n_c + n_t
                v = v * (n / (n - 1.0))
        else:
            v = r_t / n_t + w * w * r_c / n_c
            mu3 = r_t / (n_t * n_t) - w ** 3 * r_c / (n_c * n_c)
    return s, v, mu3, m_c, m_t, r_c, r_t


def _z_raw(kind: str, scale: str, x_c: Array, n_c: Array, x_t: Array, n_t: Array,
           null: Array, correction: bool, skew: bool) -> Array:
    """The statistic (corrected or not) as a function of the null; V = 0 gives
    ``sign(S) * inf`` (0 when S = 0): the limit at the ends of the parameter range."""
    s, v, mu3, *_ = _moments(kind, scale, x_c, n_c, x_t, n_t, null, correction)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        pos = v > 0
        sd = np.sqrt(np.where(pos, v, 1.0))
        z = np.where(pos, s / sd, np.where(s > 0, np.inf, np.where(s < 0, -np.inf, 0.0)))
        if skew:
            gamma = np.where(pos, mu3 / (np.where(pos, v, 1.0) * sd), 0.0)
            z = corrected_z(z, gamma)
    return np.asarray(z, float)


def _score(kind: str, scale: str, x_c: Any, n_c: Any, x_t: Any, n_t: Any, null: Any,
           correction: bool) -> ScoreTest:
    kind, scale = _check_kind_scale(kind, scale)
    xc, nc, xt, nt = _counts(kind, x_c, n_c, x_t, n_t)
    d = _check_null(kind, scale, null)
    xc, nc, xt, nt, d = np.broadcast_arrays(xc, nc, xt, nt, d)
    s, v, mu3, m_c, m_t, r_c, r_t = _moments(kind, scale, xc, nc, xt, nt, d,
                                             bool(correction) and kind == "binary")
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        degenerate = ~(v > 0)
        v_ok = np.where(degenerate, 1.0, v)
        sd = np.sqrt(v_ok)
        z = np.where(degenerate, 0.0, s / sd)
        gamma = np.where(degenerate, 0.0, mu3 / (v_ok * sd))
        zc = np.asarray(corrected_z(z, gamma), float)
        if scale == "difference":
            est = m_t - m_c
            se = np.where(degenerate, np.inf, sd)
        else:
            est = np.where(m_c > 0, m_t / np.where(m_c > 0, m_c, 1.0) - 1.0,
                           np.where(m_t > 0, np.inf, np.nan))
            se = np.where(degenerate | (m_c == 0), np.inf, sd / np.where(m_c > 0, m_c, 1.0))
        info = np.where(degenerate, 0.0, 1.0 / v_ok)
    return ScoreTest(kind=kind, scale=scale, null=_scalar(d), estimate=_scalar(est),
                     se=_scalar(se), z=_scalar(z), skewness=_scalar(gamma),
                     corrected_z=_scalar(zc), variance=_scalar(np.asarray(v, float)),
                     information=_scalar(info), control_null=_scalar(r_c),
                     treatment_null=_scalar(r_t), degenerate=_scalar(degenerate))


def binary_difference(x_c: Any, n_c: Any, x_t: Any, n_t: Any, null: Any = 0.0, *,
                      correction: bool = False) -> ScoreTest:
    """Score test of ``p_t - p_c = null`` (Farrington and Manning 1990).

    Parameters
    ----------
    x_c, n_c, x_t, n_t : array_like
        Successes and units per arm (real values allowed, e.g. expected counts;
        ``0 <= x <= n``, ``n > 0``).
    null : array_like
        The null difference, strictly between -1 and 1.
    correction : bool
        Multiply the variance by ``N / (N - 1)`` (Miettinen and Nurminen 1985;
        statsmodels' ``correction=True``). Off by default: at ``null = 0`` the plain
        statistic is the classical pooled two-proportion z.
    """
    return _score("binary", "difference", x_c, n_c, x_t, n_t, null, correction)


def binary_relative(x_c: Any, n_c: Any, x_t: Any, n_t: Any, null: Any = 0.0, *,
                    correction: bool = False) -> ScoreTest:
    """Score test of ``p_t / p_c - 1 = null`` (Miettinen and Nurminen 1985;
    Farrington and Manning 1990), i.e. of the ratio ``phi0 = 1 + null``."""
    return _score("binary", "relative", x_c, n_c, x_t, n_t, null, correction)


def rate_difference(x_c: Any, e_c: Any, x_t: Any, e_t: Any, null: Any = 0.0) -> ScoreTest:
    """Score test of ``l_t - l_c = null`` for Poisson events ``x`` over exposure
    ``e`` (unconditional score with the restricted estimates)."""
    return _score("rate", "difference", x_c, e_c, x_t, e_t, null, False)


def rate_relative(x_c: Any, e_c: Any, x_t: Any, e_t: Any, null: Any = 0.0) -> ScoreTest:
    """Score test of ``l_t / l_c - 1 = null``; equal to the conditional binomial
    score test given the total count (see the module docstring)."""
    return _score("rate", "relative", x_c, e_c, x_t, e_t, null, False)


_FIELDS = {"binary": ("successes", "n"), "rate": ("events", "exposure")}


def score_test(kind: str, control: Mapping, treatment: Mapping, *,
               scale: str = "difference", null: Any = 0.0,
               correction: bool = False) -> ScoreTest:
    """The score test from per-arm totals given as mappings, as
    :func:`seqtest.monitoring.metrics.effect` takes them (binary: ``n``, ``successes``; rate:
    ``exposure``, ``events``)."""
    kind, scale = _check_kind_scale(kind, scale)
    count, size = _FIELDS[kind]
    args: list[tuple[Any, Any]] = []
    for arm, totals in (("control", control), ("treatment", treatment)):
        if not isinstance(totals, Mapping) or count not in totals or size not in totals:
            raise ValueError(f"{arm}: got {totals!r}; allowed is a mapping with "
                             f"{size!r} and {count!r}")
        args.append((totals[count], totals[size]))
    (x_c, n_c), (x_t, n_t) = args
    return _score(kind, scale, x_c, n_c, x_t, n_t, null, correction)


def log_ratio(test: ScoreTest) -> tuple[Any, Any]:
    """The relative-scale test on the log ratio: ``(log phi^, se_log)`` with
    ``(log phi^ - log phi0) / se_log = z`` exactly.

    ``se_log = sqrt(V) / L(m_t^, phi0 m_c^)``, ``L(a, b) = (a - b) / (log a - log b)``
    the logarithmic mean (``L(a, a) = a``), since ``S = m_t^ - phi0 m_c^``. Infinite
    when an arm has no outcomes.
    """
    if test.scale != "relative":
        raise ValueError(f"test: got a test on the {test.scale} scale; allowed is one on "
                         "the relative scale")
    est = np.asarray(test.estimate, float)
    phi0 = 1.0 + np.asarray(test.null, float)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        log_est = np.log1p(est)
        diff = log_est - np.log(phi0)
        # S = m_c (phi^ - phi0); L(m_t, phi0 m_c) = m_c (phi^ - phi0) / diff
        small = np.abs(diff) < 1e-8
        # series for (x - 1) / log x at x = phi^ / phi0 near 1: 1 + diff / 2 + diff^2 / 6
        lm_rel = np.where(small, 1.0 + diff / 2.0 + diff * diff / 6.0,
                          np.expm1(diff) / np.where(small, 1.0, diff))
        # se on the relative scale is sqrt(V) / m_c; on the log scale sqrt(V) / L
        # with L = phi0 m_c lm_rel
        se_rel = np.asarray(test.se, float)
        se_log = se_rel / (phi0 * lm_rel)
        se_log = np.where(np.isfinite(log_est) & (lm_rel > 0), se_log, np.inf)
    return _scalar(log_est), _scalar(se_log)


# ---------------------------------------------------------------------------
# Interval by inversion
# ---------------------------------------------------------------------------


# The points of the interval search (see :func:`_limit`): multiples of
# ``critical * step`` beyond the estimate at which the first call evaluates each
# limit; the number of points each side of an interpolated limit; the fractions of
# the bracket evaluated when interpolation fails; multiples of the distance
# covered when no sign change has been seen yet.
_FIRST = np.array([0.15, 0.3, 0.45, 0.6, 0.7, 0.78, 0.84, 0.885, 0.92, 0.945, 0.965,
                   0.98, 0.99, 1.0, 1.01, 1.02, 1.035, 1.055, 1.08, 1.11, 1.15, 1.21,
                   1.3, 1.45, 1.7, 2.1, 2.8, 4.0, 6.0, 9.0, 14.0])
_RUNGS = 7
_POWERS = np.arange(_RUNGS)
_EVEN = np.arange(1, 2 * _RUNGS + 1) / (2 * _RUNGS + 1)
_EXPAND = 2.0 ** np.arange(-2, 14)


def _narrow(f: Callable[[Array, Array], Array], idx: Array, pts: Array, a: Array,
            fa: Array, b: Array, fb: Array) -> tuple[Array, ...]:
    """Evaluate ``f`` at the points ``pts`` (row ``i``: problem ``idx[i]``; nan: no
    point) in one call and narrow each bracket ``(a, b)`` to the largest accepting
    (``f < 0``) and smallest rejecting (``f >= 0``) point below it. Returns the new
    ends and their values, and the point other than the ends with the smallest
    ``|f|`` (for interpolation) and its value."""
    ok = ~np.isnan(pts)
    val = np.full(pts.shape, np.nan)
    val[ok] = f(pts[ok], idx[np.nonzero(ok)[0]])
    u = np.concatenate((pts, a[:, None], b[:, None]), axis=1)
    v = np.concatenate((val, fa[:, None], fb[:, None]), axis=1)
    i = np.arange(u.shape[0])
    rej = v >= 0
    cand = np.where(rej, u, np.inf)
    k = np.argmin(cand, axis=1)
    b, fb = cand[i, k], v[i, k]
    cand = np.where(~rej & (u < b[:, None]), u, -np.inf)
    k = np.argmax(cand, axis=1)
    a, fa = cand[i, k], v[i, k]
    # nan values (no point) count as infinitely far from the root
    key = np.fmin(np.where((u != a[:, None]) & (u != b[:, None]), np.abs(v), np.inf), np.inf)
    k = np.argmin(key, axis=1)
    return a, fa, b, fb, u[i, k], v[i, k]


def _limit(f: Callable[[Array, Array], Array], u0: Array, size: Array, u_end: Array,
           u_other: Array, xtol: Array, max_calls: int = 100) -> Array:
    """Roots of many problems ``f(u) = 0`` at once, each ``f`` increasing in ``u``
    (``f >= 0``: the test rejects); every call of ``f`` evaluates a set of points of
    every unfinished problem (the cost of a call barely depends on its size, so the
    number of calls is what counts).

    All arrays are flat, one entry per problem: ``u0`` the start (the estimate,
    normally accepting), ``size`` the Wald-type distance from it to the root
    (critical value times a Wald-type standard error), ``u_other < u_end`` the ends
    of the range (the test rejects towards ``u_end``; an infinite end is never
    evaluated). ``f(u, j)`` evaluates problem ``j[i]`` at ``u[i]``.

    1. First call: the start, ``u0 + size * m`` for the multipliers ``_FIRST``
       (0.15 to 14, dense around the Wald-type guess ``m = 1``, where the limits of
       all but small or skewed samples lie, so that most brackets are then a few
       per cent of ``size`` wide) and the end ``u_end``.
    2. No sign change yet (a root beyond ``u0 + 14 size`` towards an infinite end,
       or a start that rejects): points ``2^-2 .. 2^13`` times the distance covered
       so far beyond the last point (and the far end, when the start rejects).
    3. Bracketed: inverse quadratic interpolation through the bracket's ends and
       the point nearest the root of the last call; twice its distance to the
       secant point of the ends bounds its error ``d``. Evaluated: the estimate,
       seven points each side of it at ``xtol / 4 * rho^k`` (``rho >= 2`` chosen so
       that the largest is ``d``) and the bracket's middle. Where the estimate falls
       outside the bracket: the secant point and 14 points evenly across it.

    Each call keeps the largest accepting and the smallest rejecting point: the
    bracket at least halves, shrinks to a few times the estimate's error when ``d``
    bounds it, and to ``xtol / 2`` once the estimate is within ``xtol / 4`` of the
    root. Inverse quadratic interpolation converges superlinearly (order about
    1.84 for a simple root; Brent 1973), so two such calls usually follow the first one.

    Stops when the bracket is at most ``xtol`` wide (or its ends are adjacent
    floats) and returns its accepting end, or the root itself when a point has
    ``f = 0``: within ``xtol`` of a root. No point rejecting up to a finite end:
    the end. A start that rejects all the way to ``u_other``: ``u_other``.
    """
    m = u0.size
    result = np.empty(m)
    idx = np.arange(m)
    pts = np.empty((m, _FIRST.size + 2))
    pts[:, 0] = u0
    pts[:, 1:-1] = u0[:, None] + size[:, None] * _FIRST
    pts[:, -1] = u_end
    pts[:, 1:-1][pts[:, 1:-1] >= u_end[:, None]] = np.nan
    pts[np.isinf(pts)] = np.nan
    a, fa, b, fb, c, fc = _narrow(f, idx, pts, np.full(m, -np.inf), np.full(m, np.nan),
                                  np.full(m, np.inf), np.full(m, np.nan))
    tol, ue, uo, start, reach = xtol, u_end, u_other, u0, size
    for _ in range(max_calls):
        # finished: a root met exactly, a bracket narrow enough (or between adjacent
        # floats); no root in the range: nothing rejects up to the (probed, finite)
        # end, or the start rejects down to the far end
        done = (fb == 0) | (b - a <= tol) | (np.nextafter(a, np.inf) >= b)
        res = np.where(fb == 0, b, a)
        open_ = np.isinf(a) | np.isinf(b)
        if open_.any():
            beyond = np.isinf(b) & (np.isfinite(ue) | np.isinf(a))
            below = np.isinf(a) & (b == uo)
            res = np.where(beyond, ue, np.where(below, b, res))
            done |= beyond | below
        if done.any():
            result[idx[done]] = res[done]
            keep = ~done
            if not keep.any():
                return result
            (idx, a, fa, b, fb, c, fc, tol, ue, uo, start, reach, open_) = (
                v[keep] for v in (idx, a, fa, b, fb, c, fc, tol, ue, uo, start, reach,
                                  open_))
        # the estimate: inverse quadratic interpolation, else the secant of the
        # ends, else the middle; its error bound: twice its distance to the secant
        # point
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            sec = b - fb * (b - a) / (fb - fa)
            dab, dac, dbc = fa - fb, fa - fc, fb - fc
            iqi = a * fb * fc / (dab * dac) - b * fa * fc / (dab * dbc) \
                + c * fa * fb / (dac * dbc)
        good = (iqi > a) & (iqi < b)
        err = np.where(np.isfinite(sec), 2.0 * np.abs(iqi - sec), b - a)
        err = np.minimum(np.maximum(err, tol), b - a)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            rho = np.maximum((4.0 * err / tol) ** (1.0 / (_RUNGS - 1)), 2.0)
            offs = (0.25 * tol)[:, None] * rho[:, None] ** _POWERS
        pts = np.concatenate((iqi[:, None], iqi[:, None] - offs, iqi[:, None] + offs,
                              0.5 * (a + b)[:, None]), axis=1)
        if not good.all():
            # no usable interpolation: the secant point and points evenly across
            # the bracket
            bad = ~good
            even = a[bad, None] + (b - a)[bad, None] * _EVEN
            pts[bad, :-1] = np.concatenate((sec[bad, None], even), axis=1)
        pts = np.where((pts > a[:, None]) & (pts < b[:, None]), pts, np.nan)
        if open_.any():
            # no sign change yet: expand beyond the last point, towards the end
            # (start accepting) or towards the far end (start rejecting)
            up = np.isinf(b)
            last = np.where(up, a, b)
            reach = np.maximum(np.abs(last - start), reach)
            far = last[:, None] + np.where(up, reach, -reach)[:, None] * _EXPAND
            far = np.where((far > uo[:, None]) & (far < ue[:, None]), far, np.nan)
            far = np.column_stack((far, np.where(~up & np.isfinite(uo), uo, np.nan)))
            width = max(pts.shape[1], far.shape[1])
            grid = np.full((idx.size, width), np.nan)
            grid[~open_, :pts.shape[1]] = pts[~open_]
            grid[open_, :far.shape[1]] = far[open_]
            pts = grid
        a, fa, b, fb, c, fc = _narrow(f, idx, pts, a, fa, b, fb)
    # not reached in practice: the last bracket's accepting end, else an end
    result[idx] = np.where(np.isfinite(a) & np.isfinite(b), a,
                           np.where(np.isinf(b), ue, uo))
    return result


def interval(kind: str, x_c: Any, n_c: Any, x_t: Any, n_t: Any, critical: Any, *,
             scale: str = "difference", sides: int = 2, skew: bool = True,
             correction: bool = False, null: Any = None) -> tuple[Any, Any]:
    """Confidence limits by inverting the score test at critical value(s) ``critical``.

    Parameters
    ----------
    kind : {"binary", "rate"}
    x_c, n_c, x_t, n_t : array_like
        Per-arm totals (binary: successes, n; rate: events, exposure).
    critical : array_like
        Critical value(s) ``c > 0`` (e.g. each look's efficacy boundary for repeated
        confidence intervals; ``inf`` at a look that spends nothing gives the whole
        range); broadcast with the totals.
    scale : {"difference", "relative"}
        Limits for ``m_t - m_c`` or for ``m_t / m_c - 1``.
    sides : {1, 2}
        Two-sided: ``{theta0 : |z(theta0)| < c}``. One-sided: the lower limit of
        ``{theta0 : z(theta0) < c}``; the upper limit is the end of the range (1 for
        a difference of proportions, ``inf`` otherwise).
    skew : bool
        Invert the skewness-corrected statistic (default) or the plain score z.
    correction : bool
        Miettinen-Nurminen variance factor ``N / (N - 1)`` (binary only).
    null : array_like, optional
        The null the test is run at (0 for no effect): the limits are then adjusted,
        by at most the solver's tolerance, so that the interval excludes ``null``
        exactly when the test at ``null`` rejects (``|z| >= c``; one-sided
        ``z >= c``).

    Returns
    -------
    lower, upper : ndarray or float
        The broadcast shape. Accuracy: within ``1e-12 * max(scale, |estimate|)`` of
        the root of the computed statistic (of a sign change of it, where it is
        noisy at the root), ``scale`` being a Wald-type standard error (on the log
        ratio for the relative scale); see the module docstring.

    Notes
    -----
    Both limits of every look are found together by :func:`_limit`: one vectorised
    evaluation brackets each from a Wald-type guess, then inverse quadratic
    interpolation with points each side of the estimate narrows the brackets to the
    tolerance, typically in two more evaluations (the test at ``null`` rides along
    with the first).
    """
    kind, scale = _check_kind_scale(kind, scale)
    if sides not in (1, 2) or isinstance(sides, bool):
        raise ValueError(f"sides: got {sides!r}; allowed are 1 and 2")
    xc, nc, xt, nt = _counts(kind, x_c, n_c, x_t, n_t)
    try:
        c = np.asarray(critical, dtype=float)
    except (TypeError, ValueError):
        raise ValueError(f"critical: got {critical!r}; allowed is a number > 0 (inf for a "
                         "look that spends nothing)") from None
    if not np.all(c > 0):
        raise ValueError(f"critical: got {_first_bad(c, c > 0)!r}; allowed is a number > 0 "
                         "(inf for a look that spends nothing)")
    xc, nc, xt, nt, c = np.broadcast_arrays(xc, nc, xt, nt, c)
    shape = c.shape
    xc, nc, xt, nt, c = (np.array(v, float).ravel() for v in (xc, nc, xt, nt, c))
    # an infinite boundary (a look that spends no alpha) rejects nothing: the
    # interval is the whole range (not searched)
    endless = np.isinf(c)
    c = np.where(endless, 1.0, c)
    corr = bool(correction) and kind == "binary"
    m_c, m_t = xc / nc, xt / nt
    relative = scale == "relative"

    if relative:
        # work on the log ratio log phi0
        half_t = (xt + 0.5) / (nt + 0.5) if kind == "binary" else (xt + 0.5) / nt
        half_c = (xc + 0.5) / (nc + 0.5) if kind == "binary" else (xc + 0.5) / nc
        with np.errstate(divide="ignore", invalid="ignore"):
            est = np.log(m_t) - np.log(m_c)     # nan or +-inf with a zero count
        start = np.where(np.isfinite(est), est, np.log(half_t) - np.log(half_c))
        step = np.sqrt(1.0 / (xt + 0.5) + 1.0 / (xc + 0.5))
        lo_end, hi_end = _LOG_FLOOR, _LOG_RANGE
    else:
        start = m_t - m_c
        if kind == "binary":
            # the ends of the range: z there is +-inf (0 when the estimate is at the
            # end)
            step = np.sqrt((xt + 0.5) * (nt - xt + 0.5) / (nt + 1.0) ** 3
                           + (xc + 0.5) * (nc - xc + 0.5) / (nc + 1.0) ** 3)
            lo_end, hi_end = -1.0, 1.0
        else:
            step = np.sqrt((xt + 0.5) / nt ** 2 + (xc + 0.5) / nc ** 2)
            lo_end, hi_end = -np.inf, np.inf
    xtol = XTOL * np.maximum(step, np.abs(start))
    # both limits of every look with a finite critical value as one set of problems,
    # on u = -theta (lower limit) and u = theta (upper), so that the test rejects
    # towards larger u in each
    solve_at = np.flatnonzero(~endless)
    look = np.concatenate((solve_at, solve_at)) if sides == 2 else solve_at
    lower_half = np.arange(look.size) < solve_at.size
    sign = np.where(lower_half, -1.0, 1.0)
    target = np.where(lower_half, c[look], -c[look])
    d0 = None if null is None else np.broadcast_to(_check_null(kind, scale, null),
                                                   shape).ravel()
    z0 = np.zeros(xc.size)
    pending = [d0 is not None]

    def f(u: Array, j: Array) -> Array:
        """The test's statistic at the problems' points, oriented so that >= 0
        rejects; the first call also evaluates the test at ``null``."""
        w = sign[j] * u
        null_w = np.expm1(np.clip(w, -_LOG_RANGE, _LOG_RANGE)) if relative else w
        i = look[j]
        if pending[0]:
            # one vectorised evaluation for both
            assert d0 is not None
            pending[0] = False
            every = np.arange(xc.size)
            i, null_w = np.concatenate((i, every)), np.concatenate((null_w, d0))
            z = _z_raw(kind, scale, xc[i], nc[i], xt[i], nt[i], null_w, corr, skew)
            z0[:] = z[u.size:]
            z = z[:u.size]
        else:
            z = _z_raw(kind, scale, xc[i], nc[i], xt[i], nt[i], null_w, corr, skew)
        return -sign[j] * (z - target[j])

    u0 = sign * start[look]
    u_end = np.where(lower_half, -lo_end, hi_end)
    u_other = np.where(lower_half, -hi_end, lo_end)
    if look.size:
        root = sign * _limit(f, u0, c[look] * step[look], u_end, u_other, xtol[look])
    else:
        root = np.zeros(0)
    if pending[0]:
        assert d0 is not None
        z0 = _z_raw(kind, scale, xc, nc, xt, nt, d0, corr, skew)
    lower = np.full(xc.size, float(lo_end))
    upper = np.full(xc.size, float(hi_end))
    lower[solve_at] = root[:solve_at.size]
    if sides == 2:
        upper[solve_at] = root[solve_at.size:]
    if relative:
        lower = np.where(lower <= _LOG_FLOOR, -1.0, np.expm1(lower))
        upper = np.where(upper >= _LOG_RANGE, np.inf, np.expm1(upper))
    if sides == 1 and not (kind == "binary" and not relative):
        upper = np.full(lower.shape, np.inf)
    if d0 is not None:
        # on the returned scale, so that no rounding of the scale change can undo it;
        # the interval excludes d0 from below iff the test rejects upward, and from
        # above iff it rejects downward (two-sided)
        reject_up = (z0 >= c) & ~endless
        lower = np.where(reject_up, np.maximum(lower, np.nextafter(d0, np.inf)),
                         np.minimum(lower, d0))
        if sides == 2:
            reject_down = (z0 <= -c) & ~endless
            upper = np.where(reject_down, np.minimum(upper, np.nextafter(d0, -np.inf)),
                             np.maximum(upper, d0))
    return _scalar(lower.reshape(shape)), _scalar(upper.reshape(shape))


# ---------------------------------------------------------------------------
# Sizing
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class DesignVariances:
    """Per-control-unit moments of the score contrast ``S`` at design rates.

    With ``n_c`` control units (exposure) and ``allocation * n_c`` treatment units,
    ``E[S] = delta``, ``Var(S) = v1 / n_c`` under the design effect, and the test's
    restricted variance converges to ``v0 / n_c``; the skewness of ``S`` at the
    restricted rates is ``third0 / (v0^1.5 sqrt(n_c))``.

    Attributes
    ----------
    delta : float
        ``m_t - m_c - d0`` (difference) or ``m_t - phi0 m_c`` (relative).
    v0, v1 : float
        Null (restricted) and alternative per-unit variances.
    third0 : float
        Per-unit third central moment of ``S`` at the restricted rates.
    control_null, treatment_null : float
        The limits of the restricted estimates (expected data as input).
    """

    delta: float
    v0: float
    v1: float
    third0: float
    control_null: float
    treatment_null: float


def design_variances(kind: str, control: float, treatment: float, *,
                     allocation: float = 1.0, scale: str = "difference",
                     null: float = 0.0) -> DesignVariances:
    """Null and alternative per-unit variances of the score contrast for sizing.

    Parameters
    ----------
    kind : {"binary", "rate"}
    control, treatment : float
        Design means: proportions (binary) or rates per unit of exposure.
    allocation : float
        Treatment units per control unit, ``q``.
    scale, null
        The test (as in :func:`score_test`).

    Notes
    -----
    ``v1 = m_t (1 - m_t) / q + w^2 m_c (1 - m_c)`` (binary; rate: ``m_t / q + w^2 m_c``)
    with ``w = 1`` (difference) or ``phi0``; ``v0`` is the same at the restricted
    estimates computed from the expected data ``(m_c, 1, q m_t, q)`` (Farrington and
    Manning 1990, sec. 3). The fixed-sample size is then
    ``n_c = (z_a sqrt(v0) + z_b sqrt(v1))^2 / delta^2``.
    """
    kind, scale = _check_kind_scale(kind, scale)
    q = float(allocation)
    if not (math.isfinite(q) and q > 0):
        raise ValueError(f"allocation: got {allocation!r}; allowed is a number > 0")
    m_c, m_t = float(control), float(treatment)
    lim = "a proportion in (0, 1)" if kind == "binary" else "a rate > 0"
    for name, m in (("control", m_c), ("treatment", m_t)):
        ok = math.isfinite(m) and m > 0 and (kind == "rate" or m < 1)
        if not ok:
            raise ValueError(f"{name}: got {m!r}; allowed is {lim}")
    d = _check_null(kind, scale, null)
    if d.ndim:
        raise ValueError(f"null: got {null!r}; allowed is one number")
    x_c, n_c, x_t, n_t = np.array(m_c), np.array(1.0), np.array(q * m_t), np.array(q)
    s, _v, _mu3, _, _, r_c, r_t = _moments(kind, scale, x_c, n_c, x_t, n_t, d, False)
    w = 1.0 if scale == "difference" else 1.0 + float(d)
    if kind == "binary":
        v1 = m_t * (1 - m_t) / q + w * w * m_c * (1 - m_c)
        v0 = float(r_t * (1 - r_t)) / q + w * w * float(r_c * (1 - r_c))
        t3 = (float(r_t * (1 - r_t) * (1 - 2 * r_t)) / (q * q)
              - w ** 3 * float(r_c * (1 - r_c) * (1 - 2 * r_c)))
    else:
        v1 = m_t / q + w * w * m_c
        v0 = float(r_t) / q + w * w * float(r_c)
        t3 = float(r_t) / (q * q) - w ** 3 * float(r_c)
    return DesignVariances(delta=float(s), v0=v0, v1=v1, third0=t3,
                           control_null=float(r_c), treatment_null=float(r_t))


def _check_prob(name: str, value: float) -> float:
    x = float(value)
    if not (math.isfinite(x) and 0 < x < 1):
        raise ValueError(f"{name}: got {value!r}; allowed is a probability in (0, 1)")
    return x


def fixed_sample_size(dv: DesignVariances, *, alpha: float, power: float, sides: int = 2,
                      allocation: float = 1.0) -> tuple[float, float]:
    """Fixed-sample ``(n_c, n_t)`` for the score test (not rounded):
    ``n_c = (z_{1-alpha/sides} sqrt(v0) + z_{power} sqrt(v1))^2 / delta^2``
    (Farrington and Manning 1990, eq. 7; the far tail of a two-sided test is
    ignored, as usual)."""
    a = _check_prob("alpha", alpha)
    b = _check_prob("power", power)
    if sides not in (1, 2) or isinstance(sides, bool):
        raise ValueError(f"sides: got {sides!r}; allowed are 1 and 2")
    if dv.delta == 0:
        raise ValueError("delta: got 0; the design effect must differ from the null")
    za = -float(special.ndtri(a / sides))
    zb = float(special.ndtri(b))
    n_c = (za * math.sqrt(dv.v0) + zb * math.sqrt(dv.v1)) ** 2 / dv.delta ** 2
    return n_c, n_c * float(allocation)


def score_drift(info_fractions: Sequence[float] | Array,
                efficacy_z: Sequence[float] | Array, *,
                sides: int, power: float, ratio: float,
                skew: Sequence[float] | Array | None = None,
                futility_z: Sequence[float] | Array | None = None, r: int = 24,
                start: float | None = None) -> float:
    """Drift on the alternative's canonical scale that gives the score test `power`.

    Under the design effect the score statistic is ``Z_k = Y_k / ratio`` with
    ``ratio = sqrt(v0 / v1)`` and ``Y_k`` canonical with drift
    ``D1 sqrt(t_k)``, ``D1 = delta sqrt(n_c,max / v1)`` (``S`` has variance
    ``v1 / n`` while the test divides by ``sqrt(v0 / n)``). So the plan's efficacy
    boundaries ``a_k`` on ``Z`` are ``ratio * a_k`` on ``Y``; with the skewness
    correction they are ``ratio * (a_k + skew_k (a_k^2 - 1) / 6)``. This returns the
    ``D1`` at which ``Y`` crosses them (upper boundary; for ``sides=2`` the lower
    one ``-ratio * (a_k - skew_k (a_k^2 - 1)/6)`` is kept in the sample space) with
    probability `power`; then ``n_c,max = v1 (D1 / delta)^2``. A futility boundary
    ``b_k`` (paths that stop there cannot reject later) enters as ``ratio * b_k``
    (without the skewness term, which is not monotone for ``|b_k| < 1``).

    ``ratio = 1`` and no skew give back the plan's own drift; one look gives
    ``ratio z_{1-alpha/sides} + z_power`` (the fixed-sample formula). Computed by the
    recursion of :func:`seqtest.core.recursion.crossing_probabilities` (accuracy about
    1e-7 on the power) and :func:`seqtest.core.roots.solve` on the probit of the power,
    to 1e-11 on that scale.
    """
    t = np.asarray(info_fractions, float).ravel()
    a = np.asarray(efficacy_z, float).ravel()
    if t.size != a.size or t.size == 0:
        raise ValueError("efficacy_z: need one boundary per information fraction")
    rho = float(ratio)
    if not (math.isfinite(rho) and rho > 0):
        raise ValueError(f"ratio: got {ratio!r}; allowed is a number > 0")
    p = _check_prob("power", power)
    g = np.zeros(t.size) if skew is None else np.asarray(skew, float).ravel() / 6.0
    with np.errstate(invalid="ignore"):
        up = rho * (a + g * (a * a - 1.0))
        lo = -rho * (a - g * (a * a - 1.0)) if sides == 2 else np.full(t.size, -np.inf)
    up = np.where(np.isfinite(a), up, np.inf)
    lo = np.where(np.isfinite(a), lo, -np.inf)
    inner = None
    if futility_z is not None:
        b = rho * np.asarray(futility_z, float).ravel()
        if sides == 1:
            lo = np.minimum(np.maximum(lo, b), up)
        else:
            inner = np.clip(b, 0.0, np.minimum(up, -lo))
    region = Region(up, lo, inner, sides == 2)
    goal = float(special.ndtri(p))

    def h(d: float) -> float:
        pw = float(region.crossing(t, d, r).upper.sum())
        return float(special.ndtri(min(max(pw, 1e-300), 1 - 1e-16))) - goal

    x0 = start if start is not None else (float(up[-1]) + goal if np.isfinite(up[-1])
                                          else 3.0)
    return solve(h, max(x0, 0.1), step=1.0, lo=1e-6, hi=1e3, gtol=1e-11, xtol=1e-12)


def group_sequential_size(dv: DesignVariances, info_fractions: Sequence[float] | Array,
                          efficacy_z: Sequence[float] | Array, *, sides: int, power: float,
                          allocation: float = 1.0, skew: bool = True, r: int = 24,
                          futility_z: Sequence[float] | Array | None = None,
                          ) -> tuple[float, float]:
    """Maximum ``(n_c, n_t)`` (not rounded) of a group-sequential plan run with the
    score test: ``n_c = v1 (D1 / delta)^2`` with ``D1`` from :func:`score_drift`.

    Power is for rejecting in the direction of ``dv.delta`` (a negative design
    effect is handled as the mirror image, with the skewness's sign flipped; a
    one-sided plan rejects upward only, so give it a positive effect).

    With ``skew`` the boundaries carry the skewness correction, whose size depends
    on ``n_c`` itself (``skew_k = third0 / (v0^1.5 sqrt(n_c t_k))``): solved by
    fixed-point iteration (each step changes ``n_c`` by a relative ``O(n^-1/2)``
    amount; iterated until it moves by less than 1e-8 relative, far below the rounding
    to whole users), each solve starting from the previous drift.
    """
    if dv.delta == 0:
        raise ValueError("delta: got 0; the design effect must differ from the null")
    t = np.asarray(info_fractions, float).ravel()
    sign = 1.0 if dv.delta > 0 else -1.0
    delta = abs(dv.delta)
    third = sign * dv.third0   # skewness of -S for a negative design effect
    rho = math.sqrt(dv.v0 / dv.v1)
    d1 = score_drift(t, efficacy_z, sides=sides, power=power, ratio=rho, r=r,
                     futility_z=futility_z)
    n_c = dv.v1 * (d1 / delta) ** 2
    if skew:
        for _ in range(50):
            gam = third / (dv.v0 ** 1.5 * np.sqrt(n_c * t))
            d1 = score_drift(t, efficacy_z, sides=sides, power=power, ratio=rho, skew=gam,
                             futility_z=futility_z, r=r, start=d1)
            new = dv.v1 * (d1 / delta) ** 2
            done = abs(new - n_c) <= 1e-8 * n_c
            n_c = new
            if done:
                break
    return n_c, n_c * float(allocation)
