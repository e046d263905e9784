"""The projection's grid (``seqtest.monitoring.rules.R_AHEAD``).

The planned looks still ahead and the conditional power are carried on a coarser
grid than decisions (r = 12). The claim checked here: the conditional power shown is
within 1e-6 of the same quantity on a fine grid (r = 48: the boundaries ahead solved
on it, and the recursion from the current look on it), over plans with and without
futility, one and two sides, early and late looks. The reference is the library's own
recursion at four times the grid, whose error is below 1e-8 at these spacings (the
recursion's accuracy tests); the tolerance is the one the rules' comment states.
The looks already seen keep the plan's grid: their boundaries are the same numbers
whatever is ahead.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import seqtest
from seqtest.core.boundaries import spending_bounds
from seqtest.monitoring import inference
from seqtest.monitoring.rules import R_AHEAD, GroupSequentialRule


def _looks(n: int, lift: int) -> list[dict]:
    return [{"control": {"n": k, "successes": k // 10},
             "treatment": {"n": k, "successes": k // 10 + lift * k // 1000}}
            for k in range(n, 6 * n, n)]


PLANS = [
    dict(looks=5, metric={"kind": "binary", "baseline": 0.1, "mde": 0.02}),
    dict(looks=4, sides=1, efficacy="pocock-type",
         metric={"kind": "binary", "baseline": 0.1, "mde": 0.02}),
    dict(looks=5, futility="obrien-fleming-type",
         metric={"kind": "binary", "baseline": 0.1, "mde": 0.02}),
]


@pytest.mark.parametrize("design", PLANS)
@pytest.mark.parametrize("upto, lift", [(1, 3), (2, 8), (3, 1), (2, -4)])
def test_conditional_power_on_the_coarse_grid(design: dict, upto: int, lift: int) -> None:
    assert R_AHEAD < 24
    plan = seqtest.design(**design)
    n = int(plan.n_control[0] * 0.9)
    res = seqtest.analyze(plan, _looks(n, lift)[:upto])
    if res.projection is None:
        pytest.skip("stopped: no projection")
    rule = GroupSequentialRule(plan, max_n=float(plan.n_control[-1] + plan.n_treatment[-1]))
    t = np.array([x.information_fraction for x in res.looks])
    future = rule.future_fractions(float(t[-1]))
    t_ext = np.concatenate([t, future])
    cum = rule.cumulative_alpha(t_ext)
    cum[-1] = plan.alpha / plan.sides
    fine = spending_bounds(t_ext, cum, sides=plan.sides, r=48)[t.size:]
    z = rule.sign * res.looks[-1].z
    sign = -1.0 if (plan.sides == 2 and z < 0) else 1.0
    ref_plan = inference.conditional_power(z, t[-1], future, fine, sign * plan.drift,
                                           sides=plan.sides, r=48)
    ref_now = inference.conditional_power(z, t[-1], future, fine, z / math.sqrt(t[-1]),
                                          sides=plan.sides, r=48)
    assert res.projection.conditional_power_planned == pytest.approx(ref_plan, abs=1e-6)
    assert res.projection.conditional_power_current == pytest.approx(ref_now, abs=1e-6)


@pytest.mark.parametrize("z_now, drift, sides", [(0.13, 42.0, 2), (2.5, 8.0, 1), (-3.0, -9.0, 2),
                                                 (0.5, 3.2, 2)])
def test_conditional_power_stops_only_when_nothing_is_left(monkeypatch: pytest.MonkeyPatch,
                                                           z_now: float, drift: float,
                                                           sides: int) -> None:
    """Once fewer than 1e-12 of the paths go on, later looks are not integrated: the
    answer is within 1e-12 of integrating every look (forced here)."""
    future = np.array([0.2, 0.4, 0.6, 0.8, 1.0])
    bounds = np.array([4.877, 3.357, 2.68, 2.29, 2.031])
    quick = inference.conditional_power(z_now, 0.01, future, bounds, drift, sides=sides)
    monkeypatch.setattr(inference, "_GOING_ON", -1.0)
    every = inference.conditional_power(z_now, 0.01, future, bounds, drift, sides=sides)
    assert abs(quick - every) <= 1e-12
