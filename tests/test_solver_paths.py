"""The shortcuts of the solvers give the answers of the long way.

The drift search of a plan with futility reads the power from the futility
boundary's own recursion, starts each look's search from the boundary predicted by
the drifts tried before, and a two-sided futility band narrower than 1e-6 is solved
from the density at zero; stage-wise inference reads both tails from one recursion.
Each check compares the shortcut with the computation it replaces, or with a
closed form (named beside it).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import special, stats

import seqtest
from seqtest.core import spending
from seqtest.core.boundaries import (
    binding_bounds,
    binding_with_power,
    efficacy_bounds,
    futility_bounds,
    futility_with_power,
)
from seqtest.core.region import Region
from seqtest.core.roots import solve
from seqtest.monitoring import inference

OBF = spending.obrien_fleming()
POC = spending.pocock()


@pytest.mark.parametrize("sides", [1, 2])
@pytest.mark.parametrize("drift", [0.0, 2.1, 3.4])
def test_power_from_the_futility_recursion_is_the_crossing_probability(sides, drift):
    t = np.array([0.15, 0.3, 0.55, 0.8, 1.0])
    a = efficacy_bounds(t, 0.05, sides, OBF)
    b, power = futility_with_power(t, drift, a, sides, 0.1, POC)
    np.testing.assert_array_equal(b, futility_bounds(t, drift, a, sides, 0.1, POC))
    upper = Region.of_plan(sides, a, b).crossing(t, drift).upper.sum()
    assert power == pytest.approx(upper, rel=1e-13, abs=1e-300)


@pytest.mark.parametrize("sides", [1, 2])
def test_power_from_the_binding_recursion_is_the_crossing_probability(sides):
    t = np.linspace(0.2, 1.0, 5)
    a, b, power = binding_with_power(t, 0.05, sides, OBF, POC, 0.1, 3.1)
    a2, b2 = binding_bounds(t, 0.05, sides, OBF, POC, 0.1, 3.1)
    np.testing.assert_array_equal(a, a2)
    np.testing.assert_array_equal(b, b2)
    upper = Region.of_plan(sides, a, b).crossing(t, 3.1).upper.sum()
    assert power == pytest.approx(upper, rel=1e-13)


@pytest.mark.parametrize("binding", [False, True])
def test_warm_starts_find_the_same_boundaries(binding):
    # The searches started from a nearby drift's boundaries and the cold searches
    # find the same roots (to the solvers' 1e-12 on z, well inside 1e-9).
    t = np.linspace(0.1, 1.0, 10)
    a = efficacy_bounds(t, 0.05, 2, OBF)
    if binding:
        cold = binding_with_power(t, 0.05, 2, OBF, POC, 0.1, 3.3)
        near = binding_with_power(t, 0.05, 2, OBF, POC, 0.1, 3.2)
        warm = binding_with_power(t, 0.05, 2, OBF, POC, 0.1, 3.3, start=near[:2])
        for x, y in zip(cold, warm, strict=True):
            np.testing.assert_allclose(x, y, rtol=0, atol=1e-9)
    else:
        cold = futility_with_power(t, 3.3, a, 2, 0.1, POC)
        near = futility_with_power(t, 3.2, a, 2, 0.1, POC)[0]
        warm = futility_with_power(t, 3.3, a, 2, 0.1, POC, start=near)
        np.testing.assert_allclose(cold[0], warm[0], rtol=0, atol=1e-9)
        assert cold[1] == pytest.approx(warm[1], abs=1e-12)


def test_a_very_narrow_futility_band_spends_its_target():
    # Two-sided, 50 looks, O'Brien-Fleming-type beta spending: the first look spends
    # about 4e-31 of beta, so the band is far narrower than 1e-6. At the first look
    # Z_1 ~ N(drift sqrt(t_1), 1), so P(|Z_1| < x) = Phi(x - m) - Phi(-x - m)
    # = 2 x phi(m) (1 + O(x^2)) (closed form, a Taylor expansion).
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=50,
                          futility="obrien-fleming-type")
    t = plan.info_fractions
    target = float(OBF(t[:1], 0.1)[0])
    assert 0 < target < 1e-20
    x = float(plan.futility_z[0])
    m = plan.drift * math.sqrt(t[0])
    assert 2 * x * stats.norm.pdf(m) == pytest.approx(target, rel=1e-12)


@pytest.mark.parametrize("futility,binding,most", [
    (None, False, 4),
    ("obrien-fleming-type", False, 7),
    ("pocock-type", True, 7),
])
def test_the_drift_search_takes_few_power_evaluations(monkeypatch, futility, binding, most):
    # A count, not a time: each power evaluation is one pass of the recursion.
    import seqtest.planning.design as design_module

    calls = []
    original = design_module._solve_drift

    def counting(power_at, target, start, **options):
        def counted(d):
            calls.append(d)
            return power_at(d)
        return original(counted, target, start, **options)

    monkeypatch.setattr(design_module, "_solve_drift", counting)
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=20, futility=futility,
                          binding=binding)
    assert len(calls) <= most, len(calls)
    # and the drift gives the power asked for (the crossing probability at it, with
    # the futility boundary obeyed)
    region = Region.of_plan(2, plan.efficacy_z, plan.futility_z)
    power = region.crossing(plan.info_fractions, plan.drift).upper.sum()
    assert power == pytest.approx(0.9, abs=1e-9)


@pytest.mark.parametrize("z_stop", [2.9, -2.9, 0.4, 1.7])
def test_both_tails_from_one_recursion(z_stop):
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=5,
                          futility="pocock-type", binding=True)
    region = Region.of_plan(2, plan.efficacy_z, plan.futility_z).head(3)
    t = plan.info_fractions[:3]
    up, lo = inference._both_p(0.0, region, t, z_stop, 24)
    assert up == inference._upper_p(0.0, region, t, z_stop, 24)
    assert lo == inference._lower_p(0.0, region, t, z_stop, 24)


def test_solve_follows_the_curvature_of_a_concave_function():
    # g(x) = log(x) - log(7): concave and increasing, from far below the root. The
    # search follows secant and inverse quadratic steps (no forced long steps), so
    # it lands on the root (exactly log 7, closed form) in few evaluations.
    seen = []

    def g(x):
        seen.append(x)
        return math.log(x) - math.log(7.0)

    root = solve(g, 1.0, step=1.0, lo=1e-9, hi=1e9, gtol=1e-14)
    assert root == pytest.approx(7.0, rel=1e-13)
    assert len(seen) <= 9, seen


def test_solve_moves_downhill_to_a_far_root():
    # A root far from the start is reached by growing steps (at most four times
    # the last move), never beyond the limit. probit(Phi(x - 30)) = x - 30.
    seen = []

    def g(x):
        seen.append(x)
        return float(special.ndtri(special.ndtr(x - 30.0))) if x < 36 else x - 30.0

    root = solve(g, 0.0, step=1.0, lo=-100, hi=100, gtol=1e-10)
    assert root == pytest.approx(30.0, abs=1e-9)
    assert max(seen) <= 100
