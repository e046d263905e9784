"""The interval search of seqtest.core.score.interval: its cost in evaluations of the
statistic, its accuracy against an independent root search, and its extremes.

References used (named beside each check):

- scipy ``optimize.brentq`` on ``arctan(z(theta)) - arctan(+-c)``, with ``z`` the
  module's public statistic (``score_test(...).corrected_z`` or ``.z``) at the null
  ``theta`` (``expm1(theta)`` on the log ratio for the relative scale), bracketed by
  an independent scan of the whole range and solved to ``xtol = 1e-14 * S``: the
  limits must agree within the stated ``1e-12 * S`` (``S`` = max(Wald-type standard
  error, |estimate|), the scale the docstring states).
- The precise property of an inverted test: the interval excludes a null exactly
  when the test at that null rejects.
- Closed forms: with no events at all the plain rate-difference score z at ``d`` is
  ``-sqrt(d E_t)`` (``d > 0``) or ``sqrt(-d E_c)`` (``d < 0``), so the limits are
  ``-c^2 / E_c`` and ``c^2 / E_t`` (algebra on the module's formulas).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import optimize  # type: ignore[import-untyped]

from seqtest.core import score

XTOL = 1e-12         # the stated accuracy, relative to S
REF_XTOL = 1e-14     # the reference's own tolerance, relative to S
LOG_FLOOR = math.log(2.0 ** -52)   # relative lower limits below it are reported as -1
LOG_RANGE = 300.0


# ---------------------------------------------------------------------------
# A seeded random set of looks, from ordinary to extreme
# ---------------------------------------------------------------------------


def _cases(seed: int = 20240611, n: int = 500) -> list[dict]:
    rng = np.random.default_rng(seed)
    out = []
    for _ in range(n):
        kind = str(rng.choice(["binary", "rate"]))
        scale = str(rng.choice(["difference", "relative"]))
        n_c = float(np.exp(rng.uniform(math.log(20), math.log(1e7))))
        n_t = n_c * float(rng.choice([1.0, 4.0, 0.25]))     # balanced and 1:4 arms
        if kind == "binary" or rng.random() < 0.5:
            n_c, n_t = max(1.0, round(n_c)), max(1.0, round(n_t))
        p = float(np.exp(rng.uniform(math.log(1e-6), math.log(0.95))))
        p_t = p * float(rng.uniform(0.7, 1.4))
        if kind == "binary":
            xc = float(rng.binomial(int(n_c), p))
            xt = float(rng.binomial(int(n_t), min(p_t, 1.0)))
        else:
            xc, xt = float(rng.poisson(n_c * p)), float(rng.poisson(n_t * p_t))
        u = rng.random()
        if u < 0.05:
            xc = 0.0
        elif u < 0.10:
            xt = 0.0
        elif u < 0.13:
            xc = xt = 0.0
        elif kind == "binary" and u < 0.16:
            xt = n_t
        elif kind == "binary" and u < 0.18:
            xc = n_c
        elif kind == "binary" and u < 0.20:
            xc, xt = n_c, n_t
        c = math.inf if rng.random() < 0.05 else float(rng.uniform(1.5, 6.0))
        out.append(dict(kind=kind, scale=scale, sides=int(rng.choice([1, 2])),
                        skew=bool(rng.integers(2)), xc=xc, nc=n_c, xt=xt, nt=n_t, c=c,
                        correction=bool(kind == "binary" and rng.random() < 0.2)))
    return out


CASES = _cases()


def _interval(cs: dict, null=None):
    return score.interval(cs["kind"], cs["xc"], cs["nc"], cs["xt"], cs["nt"], cs["c"],
                          scale=cs["scale"], sides=cs["sides"], skew=cs["skew"],
                          correction=cs["correction"], null=null)


def _statistic(cs: dict, null):
    """The public score statistic the decisions use, at the null(s) ``null``."""
    if cs["kind"] == "binary":
        ctrl, trt = {"n": cs["nc"], "successes": cs["xc"]}, {"n": cs["nt"], "successes": cs["xt"]}
    else:
        ctrl = {"exposure": cs["nc"], "events": cs["xc"]}
        trt = {"exposure": cs["nt"], "events": cs["xt"]}
    res = score.score_test(cs["kind"], ctrl, trt, scale=cs["scale"], null=null,
                           correction=cs["correction"])
    return np.asarray(res.corrected_z if cs["skew"] else res.z, float)


def _working(cs: dict):
    """(centre, S, lowest, highest, to_null) on the scale the limits are solved on:
    the effect, or the log ratio; S as the docstring states it (a Wald-type standard
    error with half counts, or the estimate's magnitude)."""
    kind, xc, nc, xt, nt = cs["kind"], cs["xc"], cs["nc"], cs["xt"], cs["nt"]
    if cs["scale"] == "relative":
        ht = (xt + .5) / (nt + .5) if kind == "binary" else (xt + .5) / nt
        hc = (xc + .5) / (nc + .5) if kind == "binary" else (xc + .5) / nc
        est = (math.log(xt / nt) - math.log(xc / nc) if xc > 0 and xt > 0
               else math.log(ht) - math.log(hc))
        step = math.sqrt(1 / (xt + .5) + 1 / (xc + .5))
        return est, max(step, abs(est)), LOG_FLOOR, LOG_RANGE, np.expm1
    est = xt / nt - xc / nc
    if kind == "binary":
        step = math.sqrt((xt + .5) * (nt - xt + .5) / (nt + 1) ** 3
                         + (xc + .5) * (nc - xc + .5) / (nc + 1) ** 3)
        return est, max(step, abs(est)), -1.0, 1.0, (lambda w: w)
    step = math.sqrt((xt + .5) / nt ** 2 + (xc + .5) / nc ** 2)
    return est, max(step, abs(est)), -math.inf, math.inf, (lambda w: w)


def _reference(cs: dict) -> tuple[float, float, float]:
    """Limits on the working scale by an independent search: a scan of the whole
    range (8,000 points, geometric from the centre) finds the first rejecting point
    each side of the centre, brentq refines the sign change to 1e-14 * S. An end
    where the test rejects nowhere before it."""
    est, big_s, lo, hi, to_null = _working(cs)
    c = cs["c"]
    grid = est + big_s * np.sinh(np.linspace(-40.0, 40.0, 8001))
    inner_lo = lo + 1e-15 if math.isfinite(lo) else -1e300
    inner_hi = hi - 1e-15 if math.isfinite(hi) else 1e300
    grid = np.unique(np.clip(np.append(grid, est), inner_lo, inner_hi))
    z = _statistic(cs, to_null(grid))
    out = []
    for target, below in ((c, True), (-c, False)):
        rejects = (z >= c) if below else (z <= -c)
        side = np.flatnonzero(rejects & ((grid < est) if below else (grid > est)))
        if side.size == 0:
            out.append(lo if below else hi)
            continue
        i = side[-1] if below else side[0]
        a, b = (grid[i], grid[i + 1]) if below else (grid[i - 1], grid[i])
        at = math.atan(target)
        out.append(optimize.brentq(
            lambda w, at=at: math.atan(float(_statistic(cs, to_null(w)))) - at, a, b,
            xtol=REF_XTOL * big_s, rtol=4 * np.finfo(float).eps))
    return out[0], out[1], big_s


def _to_working(cs: dict, value: float) -> float:
    if cs["scale"] != "relative":
        return value
    if value == -1.0:
        return -math.inf
    return math.inf if value == math.inf else math.log1p(value)


def _sign_changes(cs: dict, centre: float, width: float, target: float) -> int:
    """Sign changes of z - target on 2,001 points across centre +- width."""
    _, _, lo, hi, to_null = _working(cs)
    w = np.clip(centre + width * np.linspace(-1, 1, 2001), lo + 1e-15, hi - 1e-15)
    z = _statistic(cs, to_null(w))
    rejects = (z >= target) if target > 0 else (z <= target)
    return int(np.count_nonzero(rejects[1:] != rejects[:-1]))


# ---------------------------------------------------------------------------
# Cost: evaluations of the statistic
# ---------------------------------------------------------------------------


@pytest.fixture
def counted(monkeypatch):
    """Counts the vectorised evaluations of the statistic made by score.interval."""
    calls = [0]
    original = score._z_raw

    def counting(*args, **kwargs):
        calls[0] += 1
        return original(*args, **kwargs)

    monkeypatch.setattr(score, "_z_raw", counting)
    return calls


TYPICAL = [  # (kind, x_c, n_c, x_t, n_t): ordinary looks of ordinary experiments
    ("binary", 100, 1000, 110, 1000),
    ("binary", 400, 20000, 1700, 80000),
    ("binary", 31000, 1e6, 30500, 1e6),
    ("rate", 120, 1000.0, 150, 1100.0),
    ("rate", 5200, 3e5, 21500, 1.2e6),
]


@pytest.mark.parametrize("scale", ["difference", "relative"])
def test_a_typical_look_takes_three_evaluations_with_the_null_test(counted, scale):
    # the target was <= 8 (both limits and the test at the null); before the change a
    # look took about 24
    for kind, xc, nc, xt, nt in TYPICAL:
        for c in (1.96, 2.5, 4.3):
            for skew in (True, False):
                counted[0] = 0
                score.interval(kind, xc, nc, xt, nt, c, scale=scale, skew=skew, null=0.0)
                assert counted[0] <= 3, (kind, xc, nc, xt, nt, c, skew, counted[0])


def test_ten_looks_take_as_many_evaluations_as_one(counted):
    rng = np.random.default_rng(3)
    looks = np.arange(1, 11) / 10
    n_c, n_t = looks * 20000, looks * 80000
    xc = rng.binomial(n_c.astype(int), 0.02)
    xt = rng.binomial(n_t.astype(int), 0.022)
    bounds = 2.0 / np.sqrt(looks)                     # an O'Brien-Fleming-like shape
    for kind in ("binary", "rate"):
        for scale in ("difference", "relative"):
            counted[0] = 0
            score.interval(kind, xc, n_c, xt, n_t, bounds, scale=scale, null=0.0)
            assert counted[0] <= 3


def test_extreme_looks_take_at_most_eight_evaluations(counted):
    worst = 0
    for cs in CASES:
        counted[0] = 0
        _interval(cs, null=0.0)
        worst = max(worst, counted[0])
    assert worst <= 8


# ---------------------------------------------------------------------------
# Accuracy against an independent root search
# ---------------------------------------------------------------------------


def test_limits_agree_with_brentq_on_the_public_statistic():
    # scipy brentq (see the module docstring) over the random set: within the stated
    # 1e-12 * S (plus the reference's own 1e-14 * S) of the root, and exactly the end
    # where the test rejects nowhere on that side. Where the computed statistic is
    # itself noisy at the root (more than one sign change of z - c within 1e-6 * S
    # of it: both arms with nearly all successes on the relative scale) the root is
    # not defined to that accuracy; there the limit must lie among the sign changes.
    noisy = checked = 0
    worst = 0.0
    for cs in CASES:
        if math.isinf(cs["c"]):
            continue
        lo, hi = _interval(cs)
        ref_lo, ref_hi, big_s = _reference(cs)
        _, _, end_lo, end_hi, _ = _working(cs)
        limits = [(lo, ref_lo, cs["c"])]
        if cs["sides"] == 2:
            limits.append((hi, ref_hi, -cs["c"]))
        for ours, ref, target in limits:
            w = _to_working(cs, float(ours))
            if ref in (end_lo, end_hi):
                if cs["scale"] == "relative":
                    assert (ours == -1.0) if ref == end_lo else (ours == math.inf), cs
                else:
                    assert w == ref, cs
                continue
            dev = abs(w - ref) / big_s
            if dev > XTOL + REF_XTOL:
                changes = _sign_changes(cs, ref, max(1e-6 * big_s, 2 * abs(w - ref)), target)
                assert changes > 1 and dev < 1e-4, (cs, dev, changes)
                noisy += 1
                continue
            worst = max(worst, dev)
            checked += 1
    assert checked > 500
    assert noisy <= 0.01 * checked
    assert worst <= XTOL + REF_XTOL


def test_one_sided_upper_limit_is_the_end_of_the_range():
    for cs in CASES:
        if cs["sides"] == 1:
            _, hi = _interval(cs)
            assert hi == (1.0 if (cs["kind"], cs["scale"]) == ("binary", "difference")
                          else math.inf)


# ---------------------------------------------------------------------------
# The interval excludes the null exactly when the test rejects
# ---------------------------------------------------------------------------


def _valid_null(cs: dict, value: float) -> float:
    if not math.isfinite(value):
        return 0.0
    if cs["scale"] == "relative":
        return max(value, -1.0 + 1e-12)
    if cs["kind"] == "binary":
        return min(max(value, -1.0 + 1e-12), 1.0 - 1e-12)
    return value


def test_null_is_excluded_exactly_when_the_test_rejects():
    # the precise property of an inverted test, at no effect, at the limits
    # themselves (where rounding decides) and at random nulls
    rng = np.random.default_rng(5)
    for cs in CASES:
        lo, hi = _interval(cs)
        nulls = [0.0, float(rng.uniform(-0.5, 0.5))]
        for limit in (float(lo), float(hi)):
            if math.isfinite(limit) and abs(limit) != 1.0:
                nulls += [limit, float(np.nextafter(limit, math.inf)),
                          float(np.nextafter(limit, -math.inf))]
        for null in (_valid_null(cs, v) for v in nulls):
            lo_n, hi_n = _interval(cs, null=null)
            z = float(_statistic(cs, null))
            reject = (z >= cs["c"]) if cs["sides"] == 1 else (abs(z) >= cs["c"])
            assert (null < lo_n or null > hi_n) == reject, (cs, null, z, lo_n, hi_n)


# ---------------------------------------------------------------------------
# Extremes
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("scale", ["difference", "relative"])
@pytest.mark.parametrize("skew", [True, False])
def test_zero_and_full_arms_and_tiny_and_huge_samples(scale, skew):
    rows = [  # (x_c, n_c, x_t, n_t)
        (0, 50, 0, 50), (0, 50, 7, 200), (9, 40, 0, 160), (50, 50, 200, 200),
        (50, 50, 150, 200), (0, 1, 1, 1), (1, 1, 0, 1), (0, 1, 0, 1), (1, 1, 1, 1),
        (3, 1e9, 1, 1e9), (1e7, 1e9, 1.0003e7, 1e9), (0, 1e9, 0, 1e9), (1e9, 1e9, 1e9, 1e9),
    ]
    for xc, nc, xt, nt in rows:
        for c in (1.5, 2.5, 6.0):
            lo, hi = score.interval("binary", xc, nc, xt, nt, c, scale=scale, skew=skew,
                                    null=0.0)
            assert not (math.isnan(lo) or math.isnan(hi))
            if scale == "difference":
                assert -1.0 <= lo <= hi <= 1.0
            else:
                assert -1.0 <= lo <= hi
            if xt == 0:                   # no treatment successes: no lower bound
                assert lo == -1.0 or scale == "difference"
            if xc == 0 and scale == "relative":
                assert hi == math.inf     # no control successes: no upper bound
            # consistent with the test at no effect (the precise property)
            z = float(_statistic(dict(kind="binary", scale=scale, skew=skew, xc=xc, nc=nc,
                                      xt=xt, nt=nt, correction=False), 0.0))
            assert (0.0 < lo or 0.0 > hi) == (abs(z) >= c)


def test_rate_without_events_has_its_closed_form_limits():
    # -c^2 / E_c and c^2 / E_t (module docstring algebra), from tiny to huge exposure
    ec = np.array([1.0, 10.0, 1e3, 1e6, 1e9])
    et = np.array([4.0, 2.5, 1e3, 4e6, 1e9])
    for c in (1.5, 1.96, 6.0):
        lo, hi = score.interval("rate", 0, ec, 0, et, c, skew=False)
        np.testing.assert_allclose(lo, -c * c / ec, rtol=1e-11)
        np.testing.assert_allclose(hi, c * c / et, rtol=1e-11)


def test_infinite_critical_value_gives_the_whole_range_without_evaluations(counted):
    for kind, scale, ends in (("binary", "difference", (-1.0, 1.0)),
                              ("binary", "relative", (-1.0, math.inf)),
                              ("rate", "difference", (-math.inf, math.inf)),
                              ("rate", "relative", (-1.0, math.inf))):
        counted[0] = 0
        assert score.interval(kind, 10, 100, 20, 100, math.inf, scale=scale) == ends
        assert counted[0] == 0
        # with a null the test is still run once (it cannot reject at c = inf)
        assert score.interval(kind, 10, 100, 20, 100, math.inf, scale=scale,
                              null=0.0) == ends
        # mixed with finite boundaries in one call
        lo, hi = score.interval(kind, 10, 100, 20, 100, [math.inf, 2.0], scale=scale)
        assert (lo[0], hi[0]) == ends and ends[0] < lo[1] < hi[1] < ends[1]


@pytest.mark.parametrize("null", [-0.999999, 0.999999])
def test_null_at_the_end_of_the_range(null):
    # a difference of proportions just inside -1 or 1, and a ratio near 0: the test
    # there rejects (the data are far from it) and the interval excludes it
    for scale in ("difference", "relative"):
        if scale == "relative" and null > 0:
            continue
        lo, hi = score.interval("binary", 30, 100, 40, 100, 2.0, scale=scale, null=null)
        z = float(score.binary_difference(30, 100, 40, 100, null).corrected_z
                  if scale == "difference" else
                  score.binary_relative(30, 100, 40, 100, null).corrected_z)
        assert abs(z) >= 2.0
        assert null < lo or null > hi
