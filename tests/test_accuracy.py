"""Accuracy of the recursive integration where it is hardest: close looks, many
looks, irregular spacing.

The figures checked are the ones stated in the docstring of seqtest.boundaries
(exit probabilities to 1e-7 absolute per look; boundaries to 1e-6 on the z scale
below 5, 5e-6 from 5 to 8), against two references that share no code with it:

- EXACT3 (up to three looks): exit probabilities by one-dimensional adaptive
  quadrature (scipy.integrate.quad) of closed-form conditional probabilities of the
  score ``S_k = Z_k sqrt(I_k)``, a Brownian motion with drift observed at
  ``I_1 < I_2 < I_3`` (Jennison and Turnbull 2000, section 3.1). Given ``S_2 = s``,
  ``S_1`` is normal with mean ``s I_1 / I_2`` and variance ``I_1 (I_2 - I_1) / I_2``
  (the Brownian bridge), and ``S_3 - S_2`` is independent of the past, so
  ``P(exit at look 3)`` is a single integral over ``s``. The integrands' sharp parts
  (as wide as the square root of a small increment) are cut out as separate pieces
  so that quad meets its 1e-13 relative tolerance whatever the spacing. The route
  is itself checked against scipy.stats.multivariate_normal below.
- DENSE: a plain recursion written here (Armitage, McPherson and Rowe 1969) on
  uniform grids: Simpson's rule with spacing ``h`` on each continuation interval
  (the boundaries as grid points), ``h`` a sixteenth of the narrowest kernel in
  the plan, within 10 sd of the mean. Its error falls 16-fold per halving of ``h``
  (Simpson's rule; checked below), so the change from ``2h`` to ``h`` is 15 times
  its error at ``h``; every use checks that this estimate is a tenth of the
  tolerance or less.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, optimize, special, stats

import seqtest
from seqtest.core import spending
from seqtest.core.boundaries import spending_bounds
from seqtest.core.recursion import crossing_probabilities
from seqtest.core.region import Region
from seqtest.monitoring import inference
from seqtest.planning.design import parse_boundary

# The stated accuracy (module docstring of seqtest.boundaries).
PROB_ACC = 1e-7       # exit probability at one look, absolute
Z_ACC = 1e-6          # boundary on the z scale, |z| < 5
Z_ACC_FAR = 5e-6      # boundary on the z scale, 5 <= |z| < 8


# ---------------------------------------------------------------------------
# EXACT3: one-dimensional quadrature of Brownian-bridge probabilities
# ---------------------------------------------------------------------------

def _pieces(lo: float, hi: float, sharp: list[tuple[float, float]]) -> list[tuple[float, float]]:
    """``[lo, hi]`` cut at ``c +- k w`` (k = 0, 1, 3, 10, 30) for each sharp point
    ``(c, w)``, so that each piece is smooth on its own scale."""
    cuts = {lo, hi}
    for c, w in sharp:
        for k in (0.0, 1.0, 3.0, 10.0, 30.0):
            for x in (c - k * w, c + k * w):
                if lo < x < hi:
                    cuts.add(x)
    xs = sorted(cuts)
    return list(zip(xs[:-1], xs[1:], strict=True))


def _quad(f, pieces) -> float:
    return sum(integrate.quad(f, a, b, epsabs=1e-17, epsrel=1e-13, limit=400)[0]
               for a, b in pieces)


def _npdf(x: float, mean: float, var: float) -> float:
    return math.exp(-0.5 * (x - mean) ** 2 / var) / math.sqrt(2 * math.pi * var)


def exact3_exits(u, info, theta: float, sides: int) -> tuple[np.ndarray, np.ndarray]:
    """Per-look first-exit probabilities above ``u_k`` and (two-sided) below
    ``-u_k`` for up to three looks, by EXACT3 (see the module docstring)."""
    info = np.asarray(info, float)
    k = info.size
    assert k <= 3
    c = [float(u[j]) * math.sqrt(info[j]) for j in range(k)]  # bounds on the S scale
    up, lo = np.zeros(k), np.zeros(k)
    up[0] = special.ndtr(theta * math.sqrt(info[0]) - u[0])
    if sides == 2:
        lo[0] = special.ndtr(-u[0] - theta * math.sqrt(info[0]))

    def region(j: int) -> tuple[float, float]:
        if sides == 2:
            return -c[j], c[j]
        return theta * info[j] - 14 * math.sqrt(info[j]), c[j]

    if k >= 2:
        d2 = info[1] - info[0]
        a, b = region(0)
        sharp = [(c[1] - theta * d2, math.sqrt(d2)), (-c[1] - theta * d2, math.sqrt(d2))]
        pcs = _pieces(a, b, sharp)
        up[1] = _quad(lambda s: _npdf(s, theta * info[0], info[0])
                      * special.ndtr((s + theta * d2 - c[1]) / math.sqrt(d2)), pcs)
        if sides == 2:
            lo[1] = _quad(lambda s: _npdf(s, theta * info[0], info[0])
                          * special.ndtr((-c[1] - s - theta * d2) / math.sqrt(d2)), pcs)
    if k == 3:
        d2, d3 = info[1] - info[0], info[2] - info[1]
        vb = info[0] * d2 / info[1]  # bridge variance of S_1 given S_2
        a0, b0 = region(0)

        def bridge(s: float) -> float:
            m = s * info[0] / info[1]
            x, y = (a0 - m) / math.sqrt(vb), (b0 - m) / math.sqrt(vb)
            return special.ndtr(-x) - special.ndtr(-y) if x > 0 else \
                special.ndtr(y) - special.ndtr(x)

        a, b = region(1)
        wb = math.sqrt(vb) * info[1] / info[0]
        sharp = [(b0 * info[1] / info[0], wb), (a0 * info[1] / info[0], wb),
                 (c[2] - theta * d3, math.sqrt(d3)), (-c[2] - theta * d3, math.sqrt(d3))]
        pcs = _pieces(a, b, sharp)
        up[2] = _quad(lambda s: _npdf(s, theta * info[1], info[1]) * bridge(s)
                      * special.ndtr((s + theta * d3 - c[2]) / math.sqrt(d3)), pcs)
        if sides == 2:
            lo[2] = _quad(lambda s: _npdf(s, theta * info[1], info[1]) * bridge(s)
                          * special.ndtr((-c[2] - s - theta * d3) / math.sqrt(d3)), pcs)
    return up, lo


def exact3_bounds(info, cum_alpha, sides: int) -> np.ndarray:
    """Error-spending boundaries (Lan and DeMets 1983) solved on EXACT3's exits."""
    inc = np.diff(np.concatenate(([0.0], cum_alpha))) * sides
    u = np.empty(len(info))
    for j in range(len(info)):
        def spent(x: float, j: int = j) -> float:
            trial = np.append(u[:j], x)
            up, lo = exact3_exits(trial, info[: j + 1], 0.0, sides)
            return up[j] + lo[j] - inc[j]
        u[j] = optimize.brentq(spent, 0.5, 12.0, xtol=1e-13, rtol=1e-15)
    return u


def test_exact3_reference_matches_scipy_multivariate_normal():
    # The EXACT3 route itself against scipy.stats.multivariate_normal (Genz's
    # randomised lattice rule, requested absolute error 1e-8) on the canonical
    # covariance sqrt(I_j / I_k), at the design alternative of a 3-look plan.
    info = np.array([0.3, 0.6, 1.0])
    u = np.array([3.2, 2.5, 2.0])
    theta = 3.0
    up, lo = exact3_exits(u, info, theta, 2)
    cov = np.sqrt(np.minimum.outer(info, info) / np.maximum.outer(info, info))
    mean = theta * np.sqrt(info)
    ref = stats.multivariate_normal.cdf([u[0], u[1], np.inf], mean=mean, cov=cov,
                                        lower_limit=[-u[0], -u[1], u[2]], abseps=1e-8,
                                        releps=0.0, rng=np.random.default_rng(3))
    assert up[2] == pytest.approx(ref, abs=5e-8)
    ref2 = stats.multivariate_normal.cdf([u[0], np.inf], mean=mean[:2], cov=cov[:2, :2],
                                         lower_limit=[-u[0], u[1]])
    assert up[1] == pytest.approx(ref2, abs=1e-10)


# ---------------------------------------------------------------------------
# DENSE: uniform-grid Simpson recursion
# ---------------------------------------------------------------------------

DENSE_WINDOW = 10.0  # the sub-density beyond 10 sd of the mean is below 1e-22


class Dense:
    """Sub-density of continuing paths on a uniform Simpson grid (values times
    weights), on the z scale at information ``info``."""

    def __init__(self, z: np.ndarray, g: np.ndarray, info: float, theta: float):
        self.z, self.g, self.info, self.theta = z, g, info, theta

    @classmethod
    def origin(cls, theta: float) -> Dense:
        return cls(np.zeros(1), np.ones(1), 0.0, theta)

    def _args(self, info: float) -> tuple[np.ndarray, float]:
        d = info - self.info
        return self.z * math.sqrt(self.info) + self.theta * d, math.sqrt(d)

    def above(self, u: float, info: float) -> float:
        if u == np.inf:
            return 0.0
        m, s = self._args(info)
        return float(self.g @ special.ndtr((m - u * math.sqrt(info)) / s))

    def below(self, x: float, info: float) -> float:
        if x == -np.inf:
            return 0.0
        m, s = self._args(info)
        return float(self.g @ special.ndtr((x * math.sqrt(info) - m) / s))

    def advance(self, intervals, info: float, h: float) -> Dense:
        m, s = self._args(info)
        q = math.sqrt(info)
        mu = self.theta * q
        zs, ws = [], []
        for lo, hi in intervals:
            lo, hi = max(lo, mu - DENSE_WINDOW), min(hi, mu + DENSE_WINDOW)
            if lo < hi:
                n = max(2, 2 * math.ceil((hi - lo) / (2 * h)))
                zs.append(np.linspace(lo, hi, n + 1))
                w = np.full(n + 1, 2.0)
                w[1::2] = 4.0
                w[[0, -1]] = 1.0
                ws.append(w * (hi - lo) / (3 * n))
        z, w = np.concatenate(zs), np.concatenate(ws)
        dens = np.empty(z.size)
        for i in range(0, z.size, 1024):
            a = np.subtract.outer(z[i:i + 1024] * q, m) / s
            dens[i:i + 1024] = np.exp(-0.5 * a * a) @ self.g
        return Dense(z, w * dens * q / (s * math.sqrt(2 * math.pi)), info, self.theta)


def _continuation(lower: float, upper: float, band: float) -> list[tuple[float, float]]:
    """Continuation region: ``lower < z < upper`` without the band ``|z| < band``."""
    if band > 0:
        return [iv for iv in [(lower, -band), (band, upper)] if iv[0] < iv[1]]
    return [(lower, upper)] if lower < upper else []


def dense_step(info) -> float:
    """A sixteenth of the narrowest kernel sd on the z scale (at most 1/64)."""
    info = np.asarray(info, float)
    d = np.diff(np.concatenate(([0.0], info)))
    widths = [math.sqrt(d[j] / info[j]) for j in range(1, info.size)]
    widths += [math.sqrt(d[j + 1] / info[j]) for j in range(info.size - 1)]
    return min(widths + [0.25]) / 16


def dense_exits(upper, lower, info, theta, h, band=None):
    """Per-look exits above ``upper``, below ``lower`` and into ``|z| < band``."""
    k = len(info)
    band = np.zeros(k) if band is None else np.asarray(band, float)
    out = np.zeros((3, k))
    st = Dense.origin(theta)
    for j in range(k):
        u, lo, b = upper[j], min(lower[j], upper[j]), min(band[j], upper[j])
        out[0, j] = st.above(u, info[j])
        out[1, j] = st.below(lo, info[j])
        if b > 0:
            out[2, j] = st.below(b, info[j]) - st.below(max(-b, lo), info[j])
        if j + 1 < k:
            st = st.advance(_continuation(lower[j], upper[j], b), info[j], h)
    return out


def dense_bounds(info, cum_alpha, sides: int, h: float, futility=None) -> np.ndarray:
    """Error-spending boundaries solved on the DENSE recursion; ``futility`` as in
    seqtest.core.boundaries.spending_bounds (binding)."""
    k = len(info)
    inc = np.diff(np.concatenate(([0.0], cum_alpha))) * sides
    out = np.empty(k)
    st = Dense.origin(0.0)
    for j in range(k):
        floor = 0.0 if sides == 2 else -20.0
        if futility is not None:
            floor = max(floor, futility[j])

        def spent(x: float, j: int = j, st: Dense = st) -> float:
            p = st.above(x, info[j]) + (st.below(-x, info[j]) if sides == 2 else 0.0)
            return p - inc[j]

        out[j] = floor if spent(floor) <= 0 else optimize.brentq(
            spent, floor, 40.0, xtol=1e-14, rtol=1e-15)
        if j + 1 < k:
            if sides == 1:
                lo = -np.inf if futility is None else futility[j]
                iv = _continuation(lo, out[j], 0.0)
            else:
                b = 0.0 if futility is None else max(futility[j], 0.0)
                iv = _continuation(-out[j], out[j], b)
            st = st.advance(iv, info[j], h)
    return out


def dense_bounds_checked(info, cum_alpha, sides: int) -> np.ndarray:
    """DENSE boundaries at h, with their own error estimated from the change from
    2h (a fifteenth of it, see the module docstring): at most a tenth of Z_ACC."""
    h = dense_step(info)
    fine = dense_bounds(info, cum_alpha, sides, h)
    coarse = dense_bounds(info, cum_alpha, sides, 2 * h)
    ok = np.isfinite(fine) & (fine < 8)
    assert np.max(np.abs(fine - coarse)[ok]) / 15 < 0.1 * Z_ACC
    return fine


@pytest.mark.slow
def test_dense_reference_converges_at_the_simpson_rate():
    # The premise of the error estimate above: halving h divides DENSE's error by
    # about 16. Checked on 50 looks (Pocock-type spending, the longest recursion):
    # the changes from 4h to 2h and from 2h to h shrink by a factor near 16.
    t = np.arange(1, 51) / 50
    cum = spending.pocock()(t, 0.025)
    h = dense_step(t)
    b1, b2, b4 = (dense_bounds(t, cum, 2, m * h) for m in (1, 2, 4))
    ratio = np.max(np.abs(b4 - b2)) / np.max(np.abs(b2 - b1))
    assert 10 < ratio < 25, ratio


def assert_bounds_close(engine: np.ndarray, ref: np.ndarray) -> None:
    """Stated accuracy: 1e-6 below 5 on the z scale, 5e-6 from 5 to 8."""
    near = np.abs(ref) < 5
    far = (np.abs(ref) >= 5) & (np.abs(ref) < 8)
    err = np.abs(engine - ref)
    assert np.all(err[near] <= Z_ACC), (err[near].max(), np.argmax(np.where(near, err, 0)))
    assert np.all(err[far] <= Z_ACC_FAR), err[far].max()


# ---------------------------------------------------------------------------
# Close looks (the case that was short of the stated figure)
# ---------------------------------------------------------------------------

GAPS = [1e-2, 1e-3, 1e-4, 1e-6, 1e-9, 1e-13]


@pytest.mark.parametrize("family", ["obrien_fleming", "pocock"])
@pytest.mark.parametrize("gap", GAPS, ids=[f"gap{g:g}" for g in GAPS])
def test_close_looks_boundaries_vs_exact3(gap, family):
    # Looks at 0.5, 0.5 + gap and 1, two-sided, 0.025 per tail; reference EXACT3.
    t = np.array([0.5, 0.5 + gap, 1.0])
    f = spending.obrien_fleming() if family == "obrien_fleming" else spending.pocock()
    cum = f(t, 0.025)
    ref = exact3_bounds(t, cum, 2)
    engine = spending_bounds(t, cum, sides=2)
    assert np.max(np.abs(engine - ref)) <= Z_ACC, engine - ref


@pytest.mark.parametrize("gap", [1e-4, 1e-6, 1e-9], ids=["gap1e-4", "gap1e-6", "gap1e-9"])
def test_close_looks_power_of_the_solved_design_vs_exact3(gap):
    # The case (gap 1e-4): the solved design's real power was 0.8994 with
    # drift 3.2434. Reference EXACT3: the power of the plan's boundaries at the
    # plan's drift is the target to the stated accuracy (three looks, 1e-7 each),
    # and the drift solved on EXACT3 itself agrees.
    t = [0.5, 0.5 + gap, 1.0]
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, info_fractions=t)
    up, _ = exact3_exits(plan.efficacy_z, plan.info_fractions, plan.drift, 2)
    assert abs(up.sum() - 0.9) <= 3 * PROB_ACC, up.sum()
    ref_drift = optimize.brentq(
        lambda d: exact3_exits(plan.efficacy_z, plan.info_fractions, d, 2)[0].sum() - 0.9,
        2.5, 4.0, xtol=1e-12)
    # dP/d(drift) is about 0.17 here, so 3e-7 in power is 2e-6 in drift
    assert plan.drift == pytest.approx(ref_drift, abs=1e-5)


def test_close_looks_exit_probabilities_vs_exact3():
    # Crossing probabilities for given boundaries across a tiny increment, under
    # the null and two alternatives, one- and two-sided; reference EXACT3.
    for gap in (1e-3, 1e-5, 1e-8):
        t = np.array([0.4, 0.4 + gap, 1.0])
        u = np.array([2.9, 2.95, 2.0])
        for sides in (1, 2):
            for theta in (0.0, 1.5, -2.0):
                up, lo = exact3_exits(u, t, theta, sides)
                cr = crossing_probabilities(u, -u if sides == 2 else None, t, theta)
                assert np.max(np.abs(cr.upper - up)) <= PROB_ACC, (gap, sides, theta)
                assert np.max(np.abs(cr.lower - lo)) <= PROB_ACC, (gap, sides, theta)


def exact_cp_two_looks(z_now, t_now, tf, af, drift, sides) -> float:
    """Conditional power with two later looks, by one-dimensional quadrature (the
    EXACT3 route): 1 - integral over the score at the first later look, inside its
    boundaries, of its normal density given ``Z(t_now) = z_now`` times the chance
    that the second look is inside its boundaries."""
    s = z_now * math.sqrt(t_now)
    v1 = tf[0] - t_now
    m1 = s + drift * v1
    c1, c2 = af[0] * math.sqrt(tf[0]), af[1] * math.sqrt(tf[1])
    d2 = tf[1] - tf[0]

    def inside(x: float) -> float:
        m2 = x + drift * d2
        p = special.ndtr((c2 - m2) / math.sqrt(d2))
        return p - special.ndtr((-c2 - m2) / math.sqrt(d2)) if sides == 2 else p

    a = max(-c1 if sides == 2 else -np.inf, m1 - 40 * math.sqrt(v1))
    b = min(c1, m1 + 40 * math.sqrt(v1))
    if not a < b:
        return 1.0
    pcs = _pieces(a, b, [(m1, math.sqrt(v1))])
    return 1.0 - _quad(lambda x: _npdf(x, m1, v1) * inside(x), pcs)


@pytest.mark.parametrize("gap", [1e-2, 1e-4, 1e-6, 1e-9, 1e-13],
                         ids=["gap1e-2", "gap1e-4", "gap1e-6", "gap1e-9", "gap1e-13"])
def test_conditional_power_with_a_look_just_ahead(gap):
    # Conditional power from z at fraction 0.5 with the next look just ahead (the
    # density there is a bump as narrow as the gap, possibly cut by its boundary)
    # and one at the end; both directions of the data, one and two sides.
    # Reference: one-dimensional quadrature of the conditional probabilities
    # (independent increments of the score; Jennison and Turnbull 2000, 3.1), and
    # where the later z statistics are not nearly collinear, scipy's multivariate
    # normal on their conditional distribution (Genz; exact for two dimensions).
    t_now = 0.5
    tf = np.array([t_now + gap, 1.0])
    af = np.array([3.0, 2.0])
    for z_now, drift, sides in [(1.0, 3.0, 2), (2.9, 3.0, 1), (-1.5, -2.0, 2), (0.2, 0.5, 1)]:
        ref = exact_cp_two_looks(z_now, t_now, tf, af, drift, sides)
        if gap >= 1e-6:
            mean = (z_now * math.sqrt(t_now) + drift * (tf - t_now)) / np.sqrt(tf)
            cov = (np.minimum.outer(tf, tf) - t_now) / np.sqrt(np.outer(tf, tf))
            lower = -af if sides == 2 else np.full(2, -np.inf)
            mvn = 1.0 - float(stats.multivariate_normal.cdf(af, mean=mean, cov=cov,
                                                            lower_limit=lower))
            assert ref == pytest.approx(mvn, abs=1e-9)
        cp = inference.conditional_power(z_now, t_now, tf, af, drift, sides=sides)
        assert cp == pytest.approx(ref, abs=PROB_ACC), (z_now, sides, cp, ref)


@pytest.mark.parametrize("sides", [1, 2])
@pytest.mark.parametrize("frac", [[0.2, 0.5, 0.502, 0.8, 1.0], [0.3, 0.301, 0.302, 0.7, 1.0]],
                         ids=["one-pair-0.002", "three-within-0.002"])
def test_looks_within_0002_vs_dense(frac, sides):
    # Boundaries of O'Brien-Fleming- and Pocock-type spending; reference DENSE.
    t = np.array(frac)
    for f in (spending.obrien_fleming(), spending.pocock()):
        cum = f(t, 0.025)
        assert_bounds_close(spending_bounds(t, cum, sides=sides),
                            dense_bounds_checked(t, cum, sides))


@pytest.mark.slow
def test_gap_1e4_among_several_looks_vs_dense():
    # A gap of 1e-4 early in a 4-look plan, boundaries near 5 (the grid's tail),
    # exits through both tails and the power of the solved design; reference DENSE
    # (its step is a sixteenth of the narrow kernel, 0.0014).
    frac = [0.2, 0.2001, 0.5, 1.0]
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, info_fractions=frac)
    t = plan.info_fractions
    cum = spending.obrien_fleming()(t, 0.025)
    assert_bounds_close(plan.efficacy_z, dense_bounds_checked(t, cum, 2))
    h = dense_step(t)
    ref = dense_exits(plan.efficacy_z, -plan.efficacy_z, t, plan.drift, h)
    cr = crossing_probabilities(plan.efficacy_z, -plan.efficacy_z, t, plan.drift)
    assert np.max(np.abs(cr.upper - ref[0])) <= PROB_ACC
    assert abs(ref[0].sum() - 0.9) <= 4 * PROB_ACC


# ---------------------------------------------------------------------------
# Many looks and irregular spacing
# ---------------------------------------------------------------------------

@pytest.mark.slow
@pytest.mark.parametrize("family, sides", [("obrien-fleming-type", 2), ("pocock-type", 1),
                                           ("hsd:-4", 2)])
def test_fifty_looks_boundaries_vs_dense(family, sides):
    # 50 equally spaced looks (the most the design allows); boundaries below 8
    # (exit probabilities above about 1e-15); reference DENSE.
    t = np.arange(1, 51) / 50
    f = parse_boundary(family, "efficacy")
    cum = f(t, 0.025)
    assert_bounds_close(spending_bounds(t, cum, sides=sides),
                        dense_bounds_checked(t, cum, sides))


def random_fractions(rng: np.random.Generator) -> np.ndarray:
    """3 to 12 looks with increments spread over three orders of magnitude."""
    k = int(rng.integers(3, 13))
    inc = np.exp(rng.uniform(np.log(0.005), np.log(1.0), k))
    return np.cumsum(inc) / inc.sum()


@pytest.mark.slow
@pytest.mark.parametrize("seed", range(4))
def test_random_spacings_vs_dense(seed):
    # Seeded random spacings; one- and two-sided boundaries for a spending function
    # drawn at random; reference DENSE.
    rng = np.random.default_rng(9000 + seed)
    t = random_fractions(rng)
    f = [spending.obrien_fleming(), spending.pocock(), spending.hwang_shih_decani(-2),
         spending.power_family(3)][seed % 4]
    sides = 1 + seed % 2
    cum = f(t, 0.025 if sides == 2 else 0.05)
    assert_bounds_close(spending_bounds(t, cum, sides=sides),
                        dense_bounds_checked(t, cum, sides))


PLANS = {
    "50-looks-futility": dict(looks=50, futility="obrien-fleming-type"),
    "50-looks-one-sided-binding": dict(alpha=0.025, sides=1, looks=50,
                                       futility="pocock-type", binding=True),
    "close-looks-binding-band": dict(info_fractions=[0.2, 0.5, 0.502, 0.8, 1.0],
                                     futility="pocock-type", binding=True),
    "random-spacing-futility": dict(info_fractions=[0.07, 0.1, 0.35, 0.36, 0.8, 1.0],
                                    futility="obrien-fleming-type", efficacy="pocock-type"),
}


@pytest.mark.slow
@pytest.mark.parametrize("name", list(PLANS))
def test_plan_exit_probabilities_vs_dense(name):
    # Every region's per-look exit probability of a solved plan (efficacy, both
    # tails, futility) under the null and at the design effect, to 1e-7; and the
    # power at the solved drift to 1e-7 per look. Reference DENSE, whose own change
    # from h to 2h is checked to be far below that.
    plan = seqtest.design(**PLANS[name])
    t, a, b = plan.info_fractions, plan.efficacy_z, plan.futility_z
    lower = -a if plan.sides == 2 else np.full(t.size, -np.inf)
    band = None
    if b is not None:
        if plan.sides == 1:
            lower = np.minimum(b, a)
        else:
            band = np.clip(b, 0, a)
    h = dense_step(t)
    for effect in (0.0, 1.0):
        theta = effect * plan.drift
        ref = dense_exits(a, lower, t, theta, h, band)
        coarse = dense_exits(a, lower, t, theta, 2 * h, band)
        assert np.max(np.abs(ref - coarse)) / 15 < 0.1 * PROB_ACC
        cr = Region.of_plan(plan.sides, a, b).crossing(t, theta, plan.r)
        engine = np.vstack([cr.upper, cr.lower, cr.inner])
        assert np.max(np.abs(engine - ref)) <= PROB_ACC, np.max(np.abs(engine - ref))
        if effect == 1.0:
            assert abs(ref[0].sum() - plan.power) <= t.size * PROB_ACC
