"""The exact screen of random-traffic simulations (seqtest.simulation.screen).

The bounds are checked against the boundaries the rule computes
(GroupSequentialRule.boundaries) over many seeded random fraction patterns, and the
screen's decisions against the stopping rule itself (Region.classify, first_stop) next
to the boundaries; a screened run is compared with an unscreened one bit for bit.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import integrate, special

import seqtest
from seqtest import spending
from seqtest.monitoring.rules import GroupSequentialRule
from seqtest.simulation.engine import _decide_groups, _distinct_rows, _job, simulate
from seqtest.simulation.scenarios import scenario_from_dict
from seqtest.simulation.screen import (
    MARGIN,
    _margins,
    bvn_upper,
    chain_upper,
    settle,
    tail_mass,
)

BINARY = {"kind": "binary", "baseline": 0.10, "mde": 0.02}
RANDOM = {"mode": "random", "days": 21, "cv": 0.4, "cap": True, "final": "at_max"}

# The bounds must hold against the computed boundaries to well within the screen's
# margin at each look (a fifth of it): the margin has to cover the error of the
# computed boundaries, measured against the exact two-look boundary at up to 7e-5
# while consecutive looks keep t_{k-1} / t_k <= 0.95 (margin 5e-4), 1.3e-3 up to 0.99
# (margin 0.01) and 5e-3 beyond (margin 0.05).
TOL_SHARE = 0.2


def _plan(family, sides, looks=5, **kw):
    return seqtest.design(alpha=0.05 if sides == 2 else 0.025, sides=sides, power=0.9,
                          looks=looks, efficacy=family, metric=BINARY, **kw)


FAMILIES = ["obrien-fleming-type", "pocock-type", "hsd:-4", "hsd:1", "power:3",
            spending.from_table([0.25, 0.5, 0.75, 1.0], [0.05, 0.2, 0.5, 1.0]),
            # classical shapes, monitored through their design's cumulative alpha
            "obrien-fleming", "pocock", "wang-tsiatis:0.25", "haybittle-peto"]


def _patterns(rng, count):
    """Random fraction patterns: 1 to 9 looks anywhere in (0, 1], none planned (so
    every look is unplanned), a third of them over-running (last fraction above 1)."""
    out = []
    for _ in range(count):
        k = int(rng.integers(1, 10))
        t = np.sort(rng.uniform(0.02, 1.0, k))
        if np.any(np.diff(t) < 1e-3):
            continue
        u = rng.uniform()
        if u < 1 / 3:
            t[-1] = rng.uniform(1.0, 1.4)       # over-running: the last look is final
        elif u < 2 / 3:
            t[-1] = 1.0
        out.append(t)
    return out


def _cum(rule, t):
    # the rule's cumulative alpha per tail; the last look is declared final
    cum = rule.cumulative_alpha(np.asarray(t, float))
    cum[-1] = rule.plan.alpha / rule.plan.sides  # the final look spends the rest
    return cum


def _bounds(t, cum, sides):
    """Per look: D_v(a + TOL) and D_w(a - TOL) arguments, walking the upper chain."""
    k = t.size
    lower_v, upper_w, rho, s = [], [], [], []
    w = np.inf
    for j in range(k):
        if j == 0:
            lower_v.append(np.inf)
            upper_w.append(np.inf)
            rho.append(0.0)
            s.append(1.0)
        else:
            lower_v.append(float(-special.ndtri(cum[j - 1])))
            upper_w.append(w)
            rho.append(math.sqrt(t[j - 1] / t[j]))
            s.append(math.sqrt((t[j] - t[j - 1]) / t[j]))
        delta = cum[j] - (cum[j - 1] if j else 0.0)
        u = chain_upper(np.array([upper_w[-1]]), np.array([delta]), np.array([rho[-1]]),
                        np.array([s[-1]]), sides)[0]
        w = np.inf if u > 8.5 else u
        upper_w[-1] = (upper_w[-1], u)
    return lower_v, upper_w, rho, s


@pytest.mark.parametrize("sides", [1, 2])
def test_bounds_hold_against_the_rules_boundaries(sides):
    # The proof in seqtest.simulation.screen, checked numerically: at every look of
    # 220 random patterns per side (unplanned looks, over-running, every family),
    # the lower bound (D_v(x) > Delta  =>  x < a_k) and the upper-bound chain
    # (U_k >= a_k) hold against the boundary the rule computes, to a fifth of the
    # screen's margin at that look.
    rng = np.random.default_rng(20240515 + sides)
    plans = [_plan(f, sides) for f in FAMILIES]
    plans.append(_plan("obrien-fleming-type", sides, futility="pocock-type"))  # non-binding
    checked = tight = 0
    for t in _patterns(rng, 220):
        plan = plans[int(rng.integers(len(plans)))]
        rule = GroupSequentialRule(plan)
        a, _ = rule.boundaries(t, final=True)
        cum = _cum(rule, t)
        lower_v, upper, rho, s = _bounds(t, cum, sides)
        tols = TOL_SHARE * _margins(t[None, :], np.ones((1, t.size), bool), MARGIN)[0]
        for j in range(t.size):
            TOL = tols[j]
            if not np.isfinite(a[j]) or a[j] > 7.0:
                continue
            delta = cum[j] - (cum[j - 1] if j else 0.0)
            args = (np.array([rho[j]]), np.array([s[j]]), sides)
            # crude bounds: Q(a) <= c_k and Q(a) >= Delta_k
            assert special.ndtr(-(a[j] + TOL)) <= cum[j]
            assert special.ndtr(-(a[j] - TOL)) >= delta
            # the bathtub lower bound: D_v at a + TOL is not above Delta
            d_low = tail_mass(np.array([min(lower_v[j], 8.5)]), np.array([a[j] + TOL]), *args)
            assert d_low[0] <= delta, (plan.efficacy, t, j)
            # the upper chain
            u = upper[j][1]
            assert u >= a[j] - TOL, (plan.efficacy, t, j, u, a[j])
            checked += 1
            tight += bool(u - a[j] < 0.05)
    assert checked > 600
    assert tight > checked // 2          # the chain is not vacuous: mostly within 0.05


def test_binding_futility_boundaries_fall_below_the_bound():
    # Why the screen is off for binding futility: paths stopped at futility no longer
    # count, so the final efficacy boundary falls below the fixed-sample quantile of
    # the cumulative alpha (1.88 < 1.96 for this plan) and no bound of this kind holds.
    plan = _plan("obrien-fleming-type", 2, futility="pocock-type", binding=True)
    rule = GroupSequentialRule(plan)
    t = np.array([0.2, 0.4, 0.6, 0.8, 1.0])
    a, _ = rule.boundaries(t, final=True)
    crude = -special.ndtri(_cum(rule, t))
    assert a[-1] < crude[-1] - 0.05
    sc = lambda fut: scenario_from_dict({"name": "b", "data": {"kind": "binary", "rate": 0.1},  # noqa: E731
                                         "traffic": RANDOM, "analysis": {"futility": fut}})
    assert _job(plan, sc("obey"), 0, 100, False).screen is False
    nb = _plan("obrien-fleming-type", 2, futility="pocock-type")
    assert _job(nb, sc("obey"), 0, 100, False).screen is False    # futility stops count
    assert _job(nb, sc("ignore"), 0, 100, False).screen is True
    fixed = scenario_from_dict({"name": "f", "data": {"kind": "binary", "rate": 0.1}})
    assert _job(nb, fixed, 0, 100, False).screen is False          # one pattern anyway


def test_bivariate_normal_tail_matches_quadrature():
    # P(X >= h, Y >= k) against scipy.integrate.quad of phi(x) Q((k - rho x) / s) over
    # [h, inf) (its definition), including far tails and correlations near +-1.
    rng = np.random.default_rng(7)
    cases = [(h, k, r) for h, k, r in zip(rng.uniform(0.05, 7.0, 40),
                                           rng.uniform(0.05, 7.0, 40),
                                           rng.uniform(-0.99, 0.99, 40), strict=True)]
    cases += [(2.0, 2.1, 0.999), (6.5, 6.6, 0.95), (0.1, 5.0, -0.9), (3.0, 3.0, 0.0)]
    for h, k, r in cases:
        s = math.sqrt(1 - r * r)
        def integrand(x, k=k, r=r, s=s):
            return math.exp(-0.5 * x * x) / math.sqrt(2 * math.pi) * special.ndtr(-(k - r * x) / s)

        ref, _ = integrate.quad(integrand, h, np.inf, epsabs=1e-17, epsrel=1e-12, limit=200)
        got = bvn_upper(np.array([h]), np.array([k]), np.array([r]), np.array([s]))[0]
        assert abs(got - ref) <= 1e-15 + 1e-9 * ref, (h, k, r, got, ref)


def test_screen_decisions_are_the_rules_near_the_boundaries():
    # Statistics placed around the exact boundaries (from just beyond the margin to on
    # the boundary) at random looks of random patterns: wherever the screen settles a
    # replicate, its stop and decision are those of Region.classify / first_stop with
    # the exact boundaries; and it does settle replicates close to a boundary.
    rng = np.random.default_rng(11)
    offsets = np.array([-0.2, -0.02, -2 * MARGIN, -1.01 * MARGIN, -MARGIN, -1e-7, 0.0,
                        1e-7, MARGIN, 1.01 * MARGIN, 2 * MARGIN, 0.02, 0.2])
    for sides in (1, 2):
        plans = [_plan(f, sides) for f in FAMILIES[:3] + FAMILIES[6:8]]
        rows_t, rows_a, rows_c = [], [], []
        for t in _patterns(rng, 60):
            plan = plans[int(rng.integers(len(plans)))]
            rule = GroupSequentialRule(plan)
            a, _ = rule.boundaries(t, final=True)
            rows_t.append(t)
            rows_a.append(a)
            rows_c.append(_cum(rule, t))
        k = max(t.size for t in rows_t)
        n = len(rows_t) * offsets.size * 3
        frac = np.full((n, k), 2.0)
        cum = np.zeros((n, k))
        a_all = np.full((n, k), np.inf)
        z = np.zeros((n, k))
        valid = np.zeros((n, k), bool)
        end = np.zeros(n, dtype=np.int64)
        i = 0
        for t, a, c in zip(rows_t, rows_a, rows_c, strict=True):
            for off in offsets:
                for _ in range(3):
                    m = t.size
                    frac[i, :m], cum[i, :m], a_all[i, :m] = t, c, a
                    valid[i, :m] = True
                    end[i] = m
                    # below every boundary by a random amount, then one look near it
                    z[i, :m] = rng.uniform(0.0, 1.0, m) * np.minimum(a, 6.0)
                    j = int(rng.integers(m))
                    z[i, j] = min(a[j], 7.0) + off
                    if sides == 2 and rng.uniform() < 0.5:
                        z[i] = -z[i]
                    i += 1
        stat = np.abs(z) if sides == 2 else z
        res = settle(stat, valid, frac, cum, end, sides)
        stop, code = _decide_groups(z, a_all, None, end, sides, False)
        ok = res.settled
        assert np.array_equal(res.stop[ok], stop[ok])
        assert np.array_equal(res.code[ok], code[ok])
        near = np.abs(stat - a_all).min(axis=1) < 0.05
        assert np.count_nonzero(ok & near) > 0.3 * np.count_nonzero(near)


SCREEN_CELLS = [
    # (plan, scenario): two-sided null, one-sided under the design effect with an
    # unplanned look and looks taken on schedule (under- and over-running), a
    # classical plan, and a non-binding futility boundary that is ignored
    (dict(family="obrien-fleming-type", sides=2),
     {"data": {"kind": "binary", "rate": 0.10}, "traffic": RANDOM}),
    (dict(family="pocock-type", sides=1),
     {"data": {"kind": "binary", "rate": 0.10}, "effect": {"mde_multiple": 1.0},
      "traffic": {**RANDOM, "cv": 0.8, "cap": False, "final": "scheduled",
                  "extra_looks": [0.3]}}),
    (dict(family="pocock", sides=2, looks=3),
     {"data": {"kind": "binary", "rate": 0.10}, "traffic": {**RANDOM, "cv": 1.0}}),
    (dict(family="obrien-fleming-type", sides=2, futility="pocock-type"),
     {"data": {"kind": "binary", "rate": 0.10}, "effect": {"mde_multiple": 0.5},
      "traffic": RANDOM, "analysis": {"futility": "ignore"}}),
]


@pytest.mark.parametrize("plan_kw, doc", SCREEN_CELLS)
def test_screened_run_is_the_unscreened_run_bit_for_bit(plan_kw, doc):
    kw = dict(plan_kw)
    plan = _plan(kw.pop("family"), kw.pop("sides"), **kw)
    sc = scenario_from_dict({"name": "screen", **doc})
    on = simulate(plan, sc, 400, seed=8, chunk_size=150, keep_paths=True)
    off = simulate(plan, sc, 400, seed=8, chunk_size=150, keep_paths=True, screen=False)
    d_on, d_off = on.to_dict(), off.to_dict()
    assert off.boundaries_computed == off.boundary_calls
    assert on.boundaries_computed < 0.5 * on.boundary_calls
    d_on.pop("boundaries_computed")
    d_off.pop("boundaries_computed")
    assert json.dumps(d_on) == json.dumps(d_off)
    for key in ("stop", "outcome", "naive_stop"):
        assert np.array_equal(on.paths[key], off.paths[key])


def test_distinct_rows_counts_exactly():
    rng = np.random.default_rng(3)
    key = rng.integers(0, 4, (3_000, 3)).astype(float) / 4.0
    assert _distinct_rows(key) == np.unique(key, axis=0).shape[0]
    assert _distinct_rows(key[:1]) == 1
    distinct = rng.uniform(size=(500, 4))
    assert _distinct_rows(distinct) == 500
    assert _distinct_rows(np.repeat(distinct, 3, axis=0)) == 500
