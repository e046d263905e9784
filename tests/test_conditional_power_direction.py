"""Conditional power under the planned effect takes the direction the plan tests.

Outside references:

- the conditional joint distribution of the later z statistics given the current
  one (independent increments of the score; Jennison and Turnbull 2000, section
  3.1): given ``S(t_now) = s``, ``Z_j`` is normal with mean
  ``(s + drift (t_j - t_now)) / sqrt(t_j)`` and ``Cov(Z_i, Z_j) =
  (min(t_i, t_j) - t_now) / sqrt(t_i t_j)``, integrated with
  scipy.stats.multivariate_normal (Genz's method, requested error 1e-7);
- a direct Monte Carlo of those later paths, with an exact binomial acceptance
  region computed below;
- Welch's z of hand-made looks of a continuous metric, for ``seqtest.analyze``.

The direction (from the docstring of seqtest.monitoring.rules.Projection): a one-sided plan
tests the positive direction; a two-sided plan tests both, so the planned effect
takes the sign of the current estimate.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

import seqtest
from seqtest.monitoring.rules import GroupSequentialRule

MVN_ABSEPS = 1e-7
PROB_TOL = 5 * MVN_ABSEPS  # plus the engine's 1e-7 per look (seqtest.boundaries)
N_MC = 200_000
# Exact binomial region for a Monte Carlo count: central, Q on each side; 4 such
# checks below, so a false alarm anywhere has chance below 8 Q = 8e-5.
Q = 1e-5


def welch_looks(zs, ns, sd=1.0):
    """Looks of a continuous metric with n per arm whose Welch z is exactly ``zs``."""
    out = []
    for z, n in zip(zs, ns, strict=True):
        d = z * math.sqrt(2.0 * sd * sd / n)
        out.append({"control": {"n": n, "mean": 10.0, "sd": sd},
                    "treatment": {"n": n, "mean": 10.0 + d, "sd": sd}})
    return out


def future_of(plan, an):
    """Later looks' fractions and boundaries as analyze uses them (the planned looks
    beyond the current one, boundaries by error spending on all the fractions)."""
    t_seen = [x.information_fraction for x in an.looks]
    t_now = t_seen[-1]
    tf = plan.info_fractions[plan.info_fractions > t_now + 0.01]
    a_all, _ = GroupSequentialRule(plan).boundaries(t_seen + tf.tolist(), final=True)
    return t_now, tf, a_all[len(t_seen):]


def cp_mvn(z_now, t_now, tf, af, drift, sides) -> float:
    """1 - P(every later Z_j inside its boundaries | Z(t_now) = z_now), by
    scipy.stats.multivariate_normal on the conditional distribution."""
    s = z_now * math.sqrt(t_now)
    mean = (s + drift * (tf - t_now)) / np.sqrt(tf)
    cov = (np.minimum.outer(tf, tf) - t_now) / np.sqrt(np.outer(tf, tf))
    lower = -af if sides == 2 else np.full(tf.size, -np.inf)
    dist = stats.multivariate_normal(mean, cov, seed=17, abseps=MVN_ABSEPS, releps=0.0,
                                     maxpts=1_000_000 * tf.size)
    return 1.0 - float(dist.cdf(af, lower_limit=lower))


def cp_monte_carlo(z_now, t_now, tf, af, drift, sides, seed) -> int:
    """Number of N_MC simulated continuations that cross a later boundary."""
    rng = np.random.default_rng(seed)
    inc = np.diff(np.concatenate(([t_now], tf)))
    s = z_now * math.sqrt(t_now) + np.cumsum(
        rng.standard_normal((N_MC, tf.size)) * np.sqrt(inc) + drift * inc, axis=1)
    z = s / np.sqrt(tf)
    cross = (np.abs(z) >= af) if sides == 2 else (z >= af)
    return int(cross.any(axis=1).sum())


def binomial_region(p: float) -> tuple[float, float]:
    return (stats.binom.ppf(Q, N_MC, p) / N_MC, stats.binom.isf(Q, N_MC, p) / N_MC)


def plan_and_analysis(sides: int, z_seen):
    plan = seqtest.design(alpha=0.05 if sides == 2 else 0.025, sides=sides, power=0.9,
                          looks=5)
    max_n = 10_000
    ns = [1000, 2250]                     # per arm: fractions 0.2 and 0.45
    an = seqtest.analyze(plan, welch_looks(z_seen, ns), metric="continuous", max_n=max_n)
    assert an.decision == "continue"
    return plan, an


@pytest.mark.parametrize("z_seen", [[-0.4, -1.3], [0.4, 1.3]], ids=["negative", "positive"])
def test_two_sided_planned_effect_follows_the_estimate(z_seen):
    # Two-sided plan: the planned effect takes the sign of the current estimate.
    # References: scipy's MVN on the conditional distribution, and Monte Carlo.
    plan, an = plan_and_analysis(2, z_seen)
    t_now, tf, af = future_of(plan, an)
    z_now = an.looks[-1].z
    drift = math.copysign(plan.drift, z_now)
    cp = an.projection.conditional_power_planned
    assert cp == pytest.approx(cp_mvn(z_now, t_now, tf, af, drift, 2), abs=PROB_TOL)
    lo, hi = binomial_region(cp)
    hits = cp_monte_carlo(z_now, t_now, tf, af, drift, 2, seed=41 + (z_now > 0))
    assert lo <= hits / N_MC <= hi, (hits / N_MC, lo, hi)
    # sensitivity: the other direction gives a clearly different chance
    assert abs(cp - cp_mvn(z_now, t_now, tf, af, -drift, 2)) > 0.1


def test_two_sided_is_symmetric_in_the_sign_of_the_data():
    # Symmetric boundaries and the planned effect following the estimate: the
    # chance for an estimate is that for its mirror image (common practice: a
    # two-sided test treats both directions alike).
    _, neg = plan_and_analysis(2, [-0.4, -1.3])
    _, pos = plan_and_analysis(2, [0.4, 1.3])
    assert neg.projection.conditional_power_planned == pytest.approx(
        pos.projection.conditional_power_planned, abs=1e-12)
    assert neg.projection.conditional_power_current == pytest.approx(
        pos.projection.conditional_power_current, abs=1e-12)


@pytest.mark.parametrize("z_seen", [[-0.4, -1.3], [0.4, 1.3]], ids=["negative", "positive"])
def test_one_sided_planned_effect_is_the_planned_direction(z_seen):
    # One-sided plan: the positive (planned) direction whatever the data say.
    # References: scipy's MVN on the conditional distribution, and Monte Carlo.
    plan, an = plan_and_analysis(1, z_seen)
    t_now, tf, af = future_of(plan, an)
    z_now = an.looks[-1].z
    cp = an.projection.conditional_power_planned
    assert cp == pytest.approx(cp_mvn(z_now, t_now, tf, af, plan.drift, 1), abs=PROB_TOL)
    lo, hi = binomial_region(cp)
    hits = cp_monte_carlo(z_now, t_now, tf, af, plan.drift, 1, seed=43 + (z_now > 0))
    assert lo <= hits / N_MC <= hi, (hits / N_MC, lo, hi)
