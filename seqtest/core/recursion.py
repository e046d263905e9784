"""Recursive numerical integration for group-sequential boundaries.

The z statistics at looks ``k = 1..K`` follow the canonical joint distribution

    Z_k ~ N(theta * sqrt(I_k), 1),   Cov(Z_j, Z_k) = sqrt(I_j / I_k)  (j <= k),

equivalently the score ``S_k = Z_k sqrt(I_k)`` has independent normal increments
with mean ``theta * (I_k - I_{k-1})`` and variance ``I_k - I_{k-1}``.

Crossing probabilities are computed by the recursion of Armitage, McPherson and
Rowe (1969): the sub-density of ``Z_k`` on the continuation region is propagated
look by look, integrating with Simpson's rule on the grid of Jennison and Turnbull
(2000, chapter 19): about ``6 r - 1`` points centred on the mean, denser near it,
trimmed to the continuation region with the boundary itself as a grid point.
Exit probabilities are evaluated with the normal survival function so that very
small probabilities (early O'Brien-Fleming looks) keep their relative precision.

Where the integrands are sharper than that grid resolves, it is refined. A step's
kernel (the normal density of the next increment) has sd
``s = sqrt((I_{k+1} - I_k) / I_k)`` on the z scale. A boundary met at look ``j``
stays a sharp edge of the later sub-densities until the information since has
smoothed it: its width at look ``k`` is ``sqrt((I_k - I_j) / I_k)``. So after a very
small increment the previous boundary is still a near-step in the density, and
the ordinary step that follows must resolve it, not only the increment ahead.
The grid of look ``k``:

1. keeps its middle spacing ``1.5 / r`` at most ``s / 4`` (``s / 5`` under the null,
   where efficacy boundaries are solved from small exit probabilities), raising
   ``r`` up to 200 (50 equally spaced looks: about 43, and 54 under the null);
2. at a boundary more than 3 sd from the mean, where the grid's panels widen: under
   the null, where they are wider than ``0.3 s``, panels of ``0.2 s`` over the zone
   where the next exit's integrand lives; otherwise (only the absolute accuracy
   counts there) panels of ``0.6 s``, and only within 4 sd of the mean; the panels
   then grow by half the distance;
3. has panels of 0.15 of its width around the image of each earlier boundary that
   the grid does not yet resolve (it may sit at, and be cut again by, the current
   boundary), growing away from it in the same way (and around
   the starting point of paths that start from a point, as for conditional power:
   their density is then a normal bump as narrow as the first increment);
4. when ``s < 0.025``, a kernel that panels could only follow by shrinking with
   it, integrates the step exactly instead: the sub-density is interpolated by the
   quadratics of the Simpson panels (then at most 0.025 wide) and each quadratic
   is integrated against the kernel, and against its distribution function for
   exit probabilities, in closed form (product integration). This holds however
   small the increment, down to looks that coincide to rounding, at a cost that
   does not grow as it shrinks. Merging close looks was rejected: its error, of
   the order of ``s`` times the density at the boundary, exceeds 1e-7 unless the
   increment is below about 1e-11 of the information.

Accuracy, checked for 1 to 50 looks at any spacing (increments down to 1e-13 of
the information) against an independent dense-grid recursion and, for three
looks, one-dimensional quadrature of Brownian-bridge probabilities
(``tests/test_accuracy.py``): exit probabilities within 1e-7 absolute at each look
(sums such as the power within 1e-7 per look: about 1e-6 for 50 looks); boundaries
within 1e-6 on the z scale below 5 (where a look's exit probability is above about
3e-7), within 5e-6 from 5 to 8, and beyond 8 (exit probabilities below 1e-15)
within about 1e-3. Each look costs one ``m x m`` kernel evaluation with ``m`` about
``12 r`` (``r = 24`` by default, raised as above).

References
----------
.. [1] Armitage, P., McPherson, C. K. and Rowe, B. C. (1969). Repeated significance
       tests on accumulating data. JRSS A 132, 235-244.
.. [2] Jennison, C. and Turnbull, B. W. (2000). Group Sequential Methods with
       Applications to Clinical Trials. Chapman & Hall/CRC, chapter 19.
.. [3] Davis, P. J. and Rabinowitz, P. (1984). Methods of Numerical Integration,
       2nd ed. Academic Press (product integration; cited from memory).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike
from scipy import special

__all__ = [
    "BIG",
    "Crossing",
    "DEFAULT_R",
    "check_r",
    "continuation_intervals",
    "crossing_probabilities",
]

DEFAULT_R = 24
BIG = 40.0  # |z| beyond this has probability below 1e-300: treated as infinity
_SQRT2PI = math.sqrt(2.0 * math.pi)


@functools.lru_cache(maxsize=64)
def _grid_offsets(r: int) -> np.ndarray:
    """The ``6 r - 1`` grid points of Jennison and Turnbull around a mean of 0."""
    i = np.arange(1, 6 * r, dtype=float)
    x = np.where(
        i < r,
        -3.0 - 4.0 * np.log(r / i),
        np.where(i <= 5 * r, -3.0 + 3.0 * (i - r) / (2.0 * r),
                 3.0 + 4.0 * np.log(r / np.maximum(6 * r - i, 1e-300))),
    )
    x.setflags(write=False)
    return x


def _jt_spacing(offset: float, r: int) -> float:
    """Width of the Jennison-Turnbull grid's panels at ``offset`` from its centre."""
    o = abs(offset)
    return 1.5 / r if o < 3.0 else (4.0 / r) * math.exp((o - 3.0) / 4.0)


def _grid(mu: float, lo: float, hi: float, r: int,
          need: _Need | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Simpson nodes and weights on ``[lo, hi]`` for a density centred at ``mu``.

    ``need`` (optional) asks for finer panels where the integrands are sharp (see
    :class:`_Need`)."""
    off = _grid_offsets(r)
    lo_eff = max(lo, mu + off[0])
    hi_eff = min(hi, mu + off[-1])
    if not lo_eff < hi_eff:
        return np.empty(0), np.empty(0)
    a = int(np.searchsorted(off, lo_eff - mu, side="right"))
    b = int(np.searchsorted(off, hi_eff - mu, side="left"))
    inner = mu + off[a:b]
    inner = inner[(inner > lo_eff) & (inner < hi_eff)]
    pts = np.concatenate(([lo_eff], inner, [hi_eff]))
    if need is not None:
        pts = need.refine(pts, mu, lo_eff, hi_eff, r)
    # odd points are the grid, even points the midpoints
    m = 2 * pts.size - 1
    z = np.empty(m)
    z[0::2] = pts
    z[1::2] = 0.5 * (pts[:-1] + pts[1:])
    d = np.diff(pts)
    w = np.zeros(m)
    w[0::2][:-1] += d / 6.0
    w[0::2][1:] += d / 6.0
    w[1::2] = 4.0 * d / 6.0
    return z, w


# Refinement of the grid (see the module docstring).
_C_R = 0.25       # middle spacing 1.5 / r at most _C_R * s (s: sd of the next kernel),
_C_R_NULL = 0.2   # ... _C_R_NULL * s under the null,
_R_MAX = 200      # ... raising r up to this
_EDGE_FROM = 3.0  # boundaries farther than this from the mean, where panels widen, get
_C_EDGE = 0.3     # panels of _C_EDGE * (the feature's width) ...
_ZONE = 4.0       # ... over _ZONE widths (and to where an exit's integrand peaks),
_GRADE = 0.5      # then growing by _GRADE times the distance beyond;
_C_FEATURE = 0.5  # an earlier boundary's width counts half (it may be cut again)
_NULL_EDGE = 2.0 / 3.0  # a boundary's width: (2/3) s under the null, where the grid
_NULL_SLACK = 1.5  # is refined only if its panels are 1.5 times too wide; 2 s
_EDGE_ABS = 4.0   # otherwise, and only within 4 sd of the mean (exits beyond: < 3e-5)
_WINDOW = 9.0     # no refinement beyond 9 sd from the mean (density below 1e-18)
_S_EXACT = 0.025  # a next kernel narrower than this is integrated exactly
_H_EXACT = 0.025  # ... against the interpolant, carried on panels at most this wide
_TAIL = 9.0       # kernel arguments beyond +-_TAIL sd count as 0 or 1


@dataclass
class _Need:
    """Where a look's grid must be finer than the Jennison-Turnbull grid.

    ``inner``: the widest panel allowed within ``_WINDOW`` of the mean (for the
    exact integration of a narrow next kernel, see the module docstring);
    ``edges``: triples ``(position, width, zone)`` of sharp features of the
    integrands (boundaries where the next kernel is cut, images of earlier
    boundaries), where panels must be at most ``_C_EDGE * width`` wide within
    ``zone`` of the position, and at most ``_GRADE`` times the distance beyond."""

    inner: float
    edges: list[tuple[float, float, float, float]]

    def _binds(self, lo: float, hi: float, mu: float, r: int) -> bool:
        """Whether the grid on ``[lo, hi]`` (already cut to the window) needs any
        refinement: a few scalar comparisons, so the common case costs nothing.

        The grid's panels widen with the distance from ``mu`` (by at most a quarter
        of their width per unit, less than ``_GRADE``), so comparing them with the
        allowed width nearest to each edge, at the zone's ends and where the
        grid's tail starts is enough."""
        far = max(abs(lo - mu), abs(hi - mu))
        if self.inner < _jt_spacing(far, r):
            return True
        for x, s, ext, slack in self.edges:
            cands = [min(max(x, lo), hi), min(max(x - ext, lo), hi),
                     min(max(x + ext, lo), hi)]
            for c in (mu - 3.0, mu + 3.0):
                if lo <= c <= hi:
                    cands.append(c)
            for c in cands:
                d = abs(c - x)
                allowed = slack * (_C_EDGE * s + _GRADE * max(d - ext, 0.0))
                # the widest panel touching c: one step further out
                o = abs(c - mu)
                if allowed < _jt_spacing(o + _jt_spacing(o, r), r):
                    return True
        return False

    def refine(self, pts: np.ndarray, mu: float, lo: float, hi: float, r: int
               ) -> np.ndarray:
        """The grid points ``pts`` (on ``[lo, hi]``) cut into the panels asked for.

        Each pass cuts every panel wider than allowed into equal pieces: as many as
        needed when the panel lies within a zone (or only ``inner`` applies), at
        most four otherwise, so that the panels grade away from a zone."""
        lo_w, hi_w = max(lo, mu - _WINDOW), min(hi, mu + _WINDOW)
        if not lo_w < hi_w or not self._binds(lo_w, hi_w, mu, r):
            return pts
        for _ in range(60):
            left, right = pts[:-1], pts[1:]
            width = right - left
            live = (right > lo_w) & (left < hi_w)
            want = np.full(width.shape, self.inner)
            graded = np.zeros(width.shape, bool)
            for x, s, ext, _ in self.edges:
                dist = np.maximum(0.0, np.maximum(left - x, x - right))
                w_e = _C_EDGE * s + _GRADE * np.maximum(dist - ext, 0.0)
                tighter = w_e < want
                outside = np.maximum(np.abs(left - x), np.abs(right - x)) > ext
                graded = np.where(tighter, outside, graded)
                want = np.where(tighter, w_e, want)
            pieces = np.where(live, np.ceil(width / want * (1.0 - 1e-9)), 1.0)
            if not np.any(pieces > 1.0):
                return pts
            pieces = np.where(graded, np.minimum(pieces, 4.0), pieces)
            pieces = np.maximum(pieces, 1.0).astype(np.int64)
            reps = np.repeat(np.arange(left.size), pieces)
            frac = np.arange(reps.size) - np.repeat(np.cumsum(pieces) - pieces, pieces)
            pts = np.append(left[reps] + width[reps] * (frac / pieces[reps]), pts[-1])
        return pts


# Integrals of t^n Phi(t) and t^n phi(t) (n = 0, 1, 2), for the exact integration
# of a quadratic against a normal kernel.
def _int_cdf(t: np.ndarray, n: int) -> np.ndarray:
    """An antiderivative of ``t^n Phi(t)``."""
    p, d = special.ndtr(t), np.exp(-0.5 * t * t) / _SQRT2PI
    if n == 0:
        return t * p + d
    if n == 1:
        return 0.5 * ((t * t - 1.0) * p + t * d)
    return (t * t * t * p + (t * t + 2.0) * d) / 3.0


@dataclass
class _State:
    """Sub-density of continuing paths at one look, as weighted node masses."""

    z: np.ndarray  # nodes on the z scale
    g: np.ndarray  # Simpson weight times sub-density at each node
    info: float
    theta: float
    s0: float = 0.0  # score S at the starting point of the paths ...
    i0: float = 0.0  # ... and its information: grids centre on E[S] from there
    # boundaries met so far, as (score S, information): sharp features of the density
    cuts: list[tuple[float, float]] = field(default_factory=list)
    f: np.ndarray | None = None  # sub-density at the nodes (None: point masses)
    segments: tuple[tuple[int, int], ...] = ()  # node ranges of the Simpson intervals

    @classmethod
    def origin(cls, theta: float) -> _State:
        return cls(np.zeros(1), np.ones(1), 0.0, theta)

    def _moments(self, info_next: float) -> tuple[np.ndarray, float, float | None]:
        """Means and sd of the next look's score from each node, and the kernel's
        sd on this look's z scale when the step is to be integrated exactly (it is
        narrower than ``_S_EXACT``; see the module docstring), else None."""
        # root finders query one state many times at the same next look
        cached = self.__dict__.get("_cache")
        if cached is not None and cached[0] == info_next:
            return cached[1], cached[2], cached[3]
        delta = info_next - self.info
        if delta <= 0:
            raise ValueError("info: information must be strictly increasing between looks")
        mean_s = self.z * math.sqrt(self.info) + self.theta * delta
        sd = math.sqrt(delta)
        s_x = None
        if self.f is not None and self.z.size >= 3:
            s_x = math.sqrt(delta / self.info)
            if s_x >= _S_EXACT:
                s_x = None
        self.__dict__["_cache"] = (info_next, mean_s, sd, s_x)
        return mean_s, sd, s_x

    # -- exact integration of the interpolant against a narrow kernel ----------------
    def _to_x(self, zz: float, info_next: float) -> float:
        """The point of this look's z scale that a value ``zz`` of the next look's z
        maps onto (the kernel's centre there)."""
        return (zz * math.sqrt(info_next) - self.theta * (info_next - self.info)) \
            / math.sqrt(self.info)

    def _to_x_all(self, zz: np.ndarray, info_next: float) -> np.ndarray:
        """:meth:`_to_x` for an array."""
        return (zz * math.sqrt(info_next) - self.theta * (info_next - self.info)) \
            / math.sqrt(self.info)

    def _panels(self) -> tuple[np.ndarray, ...]:
        """Panels of the Simpson rule: ends, midpoint, the interpolating quadratic
        ``f_mid + b (x - mid) + c (x - mid)^2`` and its integral, with cumulative
        sums of the integrals from each end."""
        cached = self.__dict__.get("_panel_cache")
        if cached is not None:
            return cached
        assert self.f is not None
        left, mid, right, f0, f1, f2 = ([] for _ in range(6))
        for a, b in self.segments:
            zz, ff = self.z[a:b], self.f[a:b]
            left.append(zz[0:-1:2])
            mid.append(zz[1::2])
            right.append(zz[2::2])
            f0.append(ff[0:-1:2])
            f1.append(ff[1::2])
            f2.append(ff[2::2])
        pl, pm, pr = np.concatenate(left), np.concatenate(mid), np.concatenate(right)
        v0, v1, v2 = np.concatenate(f0), np.concatenate(f1), np.concatenate(f2)
        h = 0.5 * (pr - pl)
        cb = (v2 - v0) / (2.0 * h)
        cc = (v2 - 2.0 * v1 + v0) / (2.0 * h * h)
        area = (pr - pl) * (v0 + 4.0 * v1 + v2) / 6.0
        below = np.concatenate(([0.0], np.cumsum(area)))  # integral of panels < i
        out = (pl, pm, pr, v1, cb, cc, area, below)
        self.__dict__["_panel_cache"] = out
        return out

    def _exact_cdf(self, c: float, s: float, sign: int) -> float:
        """``integral of Q(x) Phi(sign (x - c) / s) dx`` over the panels, ``Q`` the
        piecewise quadratic through the nodes."""
        pl, pm, pr, v1, cb, cc, area, below = self._panels()
        lo_x, hi_x = c - _TAIL * s, c + _TAIL * s
        i0 = int(np.searchsorted(pr, lo_x, side="right"))  # first panel reaching lo_x
        i1 = int(np.searchsorted(pl, hi_x, side="left"))   # panels starting below hi_x
        # panels wholly on the side where the kernel's CDF is 1
        total = float(below[-1] - below[i1]) if sign > 0 else float(below[i0])
        if i1 <= i0:
            return total
        sl = slice(i0, i1)
        a = np.maximum(pl[sl], lo_x)
        b = np.minimum(pr[sl], hi_x)
        m, q, k, kk = pm[sl], v1[sl], cb[sl], cc[sl]
        # the parts of band panels beyond the band on the CDF-1 side, exactly
        if sign > 0:
            ua, ub = b - m, pr[sl] - m
        else:
            ua, ub = pl[sl] - m, a - m
        total += float(np.sum(q * (ub - ua) + k * (ub ** 2 - ua ** 2) / 2
                              + kk * (ub ** 3 - ua ** 3) / 3))
        # within the band: Q as a polynomial in t = sign (x - c) / s
        d = c - m
        q0 = q + k * d + kk * d * d
        q1 = sign * s * (k + 2.0 * kk * d)
        q2 = kk * s * s
        ta, tb = sign * (a - c) / s, sign * (b - c) / s
        t_lo, t_hi = np.minimum(ta, tb), np.maximum(ta, tb)
        val = (q0 * (_int_cdf(t_hi, 0) - _int_cdf(t_lo, 0))
               + q1 * (_int_cdf(t_hi, 1) - _int_cdf(t_lo, 1))
               + q2 * (_int_cdf(t_hi, 2) - _int_cdf(t_lo, 2)))
        return total + s * float(val.sum())

    def _exact_pdf(self, c: np.ndarray, s: float) -> np.ndarray:
        """``integral of Q(x) phi((x - c) / s) / s dx`` for each centre ``c``."""
        pl, pm, pr, v1, cb, cc, _, _ = self._panels()
        c = np.atleast_1d(np.asarray(c, float))
        i0 = np.searchsorted(pr, c - _TAIL * s, side="right")
        i1 = np.searchsorted(pl, c + _TAIL * s, side="left")
        width = int(np.max(i1 - i0)) if c.size else 0
        if width <= 0:
            return np.zeros(c.size)
        idx = i0[:, None] + np.arange(width)[None, :]
        ok = idx < i1[:, None]
        idx = np.minimum(idx, pl.size - 1)
        cc_ = c[:, None]
        ta = np.clip((pl[idx] - cc_) / s, -_TAIL, _TAIL)
        tb = np.clip((pr[idx] - cc_) / s, -_TAIL, _TAIL)
        # P(ta < T < tb) without cancellation in the upper tail
        upper = ta > 0
        m0 = np.where(upper, special.ndtr(-ta) - special.ndtr(-tb),
                      special.ndtr(tb) - special.ndtr(ta))
        pa, pb = np.exp(-0.5 * ta * ta) / _SQRT2PI, np.exp(-0.5 * tb * tb) / _SQRT2PI
        m1 = pa - pb
        m2 = m0 + ta * pa - tb * pb
        d = cc_ - pm[idx]
        k, kk = cb[idx], cc[idx]
        val = (v1[idx] + k * d + kk * d * d) * m0 + s * (k + 2.0 * kk * d) * m1 \
            + kk * s * s * m2
        return np.where(ok, val, 0.0).sum(axis=1)

    # -- exit probabilities ----------------------------------------------------------
    def prob_above(self, u: float, info_next: float) -> float:
        if u >= BIG:
            return 0.0
        mean_s, sd, s = self._moments(info_next)
        if s is not None:
            return self._exact_cdf(self._to_x(u, info_next), s, 1)
        return float(self.g @ special.ndtr((mean_s - u * math.sqrt(info_next)) / sd))

    def prob_below(self, lo: float, info_next: float) -> float:
        if lo <= -BIG:
            return 0.0
        mean_s, sd, s = self._moments(info_next)
        if s is not None:
            return self._exact_cdf(self._to_x(lo, info_next), s, -1)
        return float(self.g @ special.ndtr((lo * math.sqrt(info_next) - mean_s) / sd))

    def prob_between(self, lo: float, hi: float, info_next: float) -> float:
        if not lo < hi:
            return 0.0
        mean_s, sd, s = self._moments(info_next)
        if s is not None:
            lo_x = self._to_x(lo, info_next)
            hi_x = self._to_x(hi, info_next)
            below_hi = self._exact_cdf(hi_x, s, -1)
            above_lo = self._exact_cdf(lo_x, s, 1)
            # the difference taken on the side with less mass
            if below_hi <= above_lo:
                return max(0.0, below_hi - self._exact_cdf(lo_x, s, -1))
            return max(0.0, above_lo - self._exact_cdf(hi_x, s, 1))
        q = math.sqrt(info_next)
        a = (lo * q - mean_s) / sd
        b = (hi * q - mean_s) / sd
        # P(a < X < b) without cancellation on either tail: reflected when a > 0
        flip = a > 0
        p = special.ndtr(np.where(flip, -a, b)) - special.ndtr(np.where(flip, -b, a))
        return float(self.g @ p)

    def between_with_density(self, lo: float, hi: float, info_next: float
                             ) -> tuple[float, float]:
        """``prob_between(lo, hi)`` and ``density(hi) + density(lo)`` at the next look,
        from one pass over the nodes (the same numbers as the two calls: a Newton
        step on a band needs both). ``lo < hi``, both finite."""
        mean_s, sd, s = self._moments(info_next)
        if s is not None:
            return (self.prob_between(lo, hi, info_next),
                    self.density(lo, info_next) + self.density(hi, info_next))
        q = math.sqrt(info_next)
        a = (lo * q - mean_s) / sd
        b = (hi * q - mean_s) / sd
        flip = a > 0
        p = special.ndtr(np.where(flip, -a, b)) - special.ndtr(np.where(flip, -b, a))
        g = self.g
        scale = sd * _SQRT2PI
        # in the order and grouping of density(hi) + density(lo), to the bit
        dens = float(g @ np.exp(-0.5 * b * b)) * q / scale \
            + float(g @ np.exp(-0.5 * a * a)) * q / scale
        return float(g @ p), dens

    def density(self, x: float, info_next: float) -> float:
        """Sub-density of ``Z`` at ``x`` at the next look (for Newton steps)."""
        mean_s, sd, s = self._moments(info_next)
        if s is not None:
            c = self._to_x(x, info_next)
            jac = math.sqrt(info_next / self.info)
            return float(self._exact_pdf(np.array([c]), s)[0]) * jac
        q = math.sqrt(info_next)
        y = (x * q - mean_s) / sd
        return float(self.g @ np.exp(-0.5 * y * y)) * q / (sd * _SQRT2PI)

    def mass(self) -> float:
        return float(self.g.sum())

    def advance(self, intervals: Sequence[tuple[float, float]], info_next: float,
                r: int, info_after: float | None = None) -> _State:
        """Sub-density at ``info_next`` on the continuation ``intervals``.

        ``info_after`` (the information of the look after, when known) shapes the
        grid for the step after: see the module docstring.
        """
        mean_s, sd, s_x = self._moments(info_next)
        q = math.sqrt(info_next)
        mu = (self.s0 + self.theta * (info_next - self.i0)) / q
        inner = math.inf
        edges: list[tuple[float, float, float, float]] = []
        if info_after is not None and info_after > info_next:
            sd_next = math.sqrt((info_after - info_next) / info_next)
            if sd_next < _S_EXACT:
                # integrated exactly against the interpolant (which the panels must
                # carry finely), so cutting it at the boundaries costs nothing
                inner = _H_EXACT
            else:
                # resolved by the panels everywhere (item 1 of the module
                # docstring), and where it is cut at a boundary in the grid's wider
                # tail panels (item 2): more finely under the null, where efficacy
                # boundaries are solved from the small exit probabilities beyond
                # them; otherwise only the absolute accuracy counts
                null = self.theta == 0.0
                c_r = _C_R_NULL if null else _C_R
                r = min(_R_MAX, max(r, math.ceil(1.5 / (c_r * sd_next))))
                reach = _WINDOW if null else _EDGE_ABS
                scale = _NULL_EDGE * sd_next if null else 2.0 * sd_next
                slack = _NULL_SLACK if null else 1.0
                for lo, hi in intervals:
                    for e in (lo, hi):
                        o = abs(e - mu)
                        # (the grid's panels are widest at the boundary itself)
                        if _EDGE_FROM < o < reach and \
                                slack * _C_EDGE * scale < _jt_spacing(o, r):
                            # an exit's integrand (the tail density, log-slope -o,
                            # times the kernel's CDF) peaks o s^2 inside
                            edges.append((e, scale, (_ZONE + o * sd_next) * sd_next,
                                          slack))
        # the earlier boundaries, smoothed only by the information since: sharp
        # features of this density while narrower than the grid resolves, (1.5 / r)
        # / _C_R (item 3); wider ones are dropped for good
        cuts: list[tuple[float, float]] = []
        sharp = 1.5 / (r * _C_R)
        for s_cut, i_cut in self.cuts:
            width = math.sqrt((info_next - i_cut) / info_next)
            if width < sharp:
                cuts.append((s_cut, i_cut))
                edges.append(((s_cut + self.theta * (info_next - i_cut)) / q,
                              _C_FEATURE * width, _ZONE * width, 1.0))
        if self.f is None and self.info > 0.0:
            # paths started from a point (conditional power): the density is a
            # normal bump as narrow as the first increment, a feature like the above
            width = math.sqrt((info_next - self.info) / info_next)
            if width < sharp:
                for z0 in self.z:
                    centre = (z0 * math.sqrt(self.info)
                              + self.theta * (info_next - self.info)) / q
                    edges.append((centre, _C_FEATURE * width, 2.0 * _ZONE * width, 1.0))
        need = _Need(inner, edges) if (edges or inner < math.inf) else None
        zs, ws, segs, n = [], [], [], 0
        for lo, hi in intervals:
            z, w = _grid(mu, max(lo, -BIG), min(hi, BIG), r, need)
            if z.size:
                zs.append(z)
                ws.append(w)
                segs.append((n, n + z.size))
                n += z.size
        cuts += [(e * q, info_next) for lo, hi in intervals for e in (lo, hi)
                 if abs(e) < BIG]
        if n == 0:
            return _State(np.empty(0), np.empty(0), info_next, self.theta, self.s0,
                          self.i0, cuts, np.empty(0), ())
        z = np.concatenate(zs) if len(zs) > 1 else zs[0]
        w = np.concatenate(ws) if len(ws) > 1 else ws[0]
        if s_x is not None:
            dens = self._exact_pdf(self._to_x_all(z, info_next), s_x) \
                * math.sqrt(info_next / self.info)
        else:
            x = np.subtract.outer(z * (q / sd), mean_s / sd)
            np.square(x, out=x)
            x *= -0.5
            np.exp(x, out=x)
            dens = (x @ self.g) * (q / (sd * _SQRT2PI))
        return _State(z, w * dens, info_next, self.theta, self.s0, self.i0, cuts, dens,
                      tuple(segs))


def continuation_intervals(lower: float, upper: float, in_lo: float, in_hi: float
                           ) -> list[tuple[float, float]]:
    """The z values in ``(lower, upper)`` outside the inner band ``(in_lo, in_hi)``, as
    intervals (the only place the set difference is written)."""
    if in_lo < in_hi:
        out = []
        if lower < min(in_lo, upper):
            out.append((lower, min(in_lo, upper)))
        if max(in_hi, lower) < upper:
            out.append((max(in_hi, lower), upper))
        return out
    return [(lower, upper)] if lower < upper else []


def _as_info(info: ArrayLike) -> np.ndarray:
    arr = np.asarray(info, dtype=float).ravel()
    if arr.size == 0 or np.any(~np.isfinite(arr)) or arr[0] <= 0 or np.any(np.diff(arr) <= 0):
        raise ValueError(
            f"info: got {np.asarray(info).tolist()}; allowed is a strictly increasing "
            "sequence of positive numbers")
    return arr


def _as_bounds(name: str, b: ArrayLike | None, k: int, fill: float) -> np.ndarray:
    if b is None:
        return np.full(k, fill)
    arr = np.asarray(b, dtype=float).ravel()
    if arr.size != k or np.any(np.isnan(arr)):
        raise ValueError(f"{name}: got {np.asarray(b).tolist()}; allowed is {k} numbers "
                         "(one per look, +-inf for none)")
    return arr


@dataclass(frozen=True)
class Crossing:
    """Per-look first-exit probabilities.

    Attributes
    ----------
    upper : ndarray
        ``P(continue to look k and Z_k >= upper_k)``.
    lower : ndarray
        ``P(continue to look k and Z_k <= lower_k)``.
    inner : ndarray
        ``P(continue to look k and inner_lower_k < Z_k < inner_upper_k)`` (zero when
        there is no inner region).
    """

    upper: np.ndarray
    lower: np.ndarray
    inner: np.ndarray

    @property
    def stop(self) -> np.ndarray:
        """Probability of stopping at each look, for any reason."""
        return self.upper + self.lower + self.inner


def crossing_probabilities(
    upper: ArrayLike,
    lower: ArrayLike | None,
    info: ArrayLike,
    drift: float = 0.0,
    *,
    inner_lower: ArrayLike | None = None,
    inner_upper: ArrayLike | None = None,
    r: int = DEFAULT_R,
) -> Crossing:
    """First-exit probabilities of a group-sequential test.

    Parameters
    ----------
    upper, lower : array_like
        z boundaries per look; the test stops at look ``k`` when ``Z_k >= upper[k]``
        or ``Z_k <= lower[k]``. Use ``inf`` / ``-inf`` (or ``lower=None``) for none.
    info : array_like
        Information at each look, strictly increasing (only ratios matter when
        ``drift`` is expressed per unit of the last look's information).
    drift : float
        ``theta``: the mean of ``Z_k`` is ``theta * sqrt(info[k])``.
    inner_lower, inner_upper : array_like, optional
        An inner stopping region ``inner_lower[k] < Z_k < inner_upper[k]`` (used for
        futility of a two-sided test).
    r : int
        Grid size parameter (about ``12 r`` nodes per interval).

    Returns
    -------
    Crossing
        Probabilities of first exit through each region at each look.

    Notes
    -----
    Method and accuracy: see the module docstring. Reference: Jennison and
    Turnbull (2000), chapter 19.
    """
    inf = _as_info(info)
    k = inf.size
    up = _as_bounds("upper", upper, k, math.inf)
    lo = _as_bounds("lower", lower, k, -math.inf)
    il = _as_bounds("inner_lower", inner_lower, k, 0.0)
    iu = _as_bounds("inner_upper", inner_upper, k, 0.0 if inner_lower is None else math.nan)
    if np.any(np.isnan(iu)):
        raise ValueError("inner_upper: required when inner_lower is given")
    theta = float(drift)
    if not math.isfinite(theta):
        raise ValueError(f"drift: got {drift!r}; allowed is a finite number")
    r = check_r(r)
    p_up, p_lo, p_in = np.zeros(k), np.zeros(k), np.zeros(k)
    state = _State.origin(theta)
    for j in range(k):
        p_up[j] = state.prob_above(up[j], inf[j])
        # a lower boundary at or above the upper one stops every remaining path
        p_lo[j] = state.prob_below(min(lo[j], up[j]), inf[j])
        if il[j] < iu[j]:
            p_in[j] = state.prob_between(max(il[j], lo[j]), min(iu[j], up[j]), inf[j])
        if j + 1 < k:
            state = state.advance(
                continuation_intervals(lo[j], up[j], il[j], iu[j]), inf[j], r,
                inf[j + 1])
    return Crossing(p_up, p_lo, p_in)


def check_r(r: int) -> int:
    if int(r) != r or not 4 <= r <= 200:
        raise ValueError(f"r: got {r!r}; allowed is an integer in [4, 200]")
    return int(r)
