"""Expected sample size: continuous monitoring by the mixture test vs group-sequential plans.

Same alpha (0.05 two-sided), power target 0.9, true effect = mde. The metric is a
difference of means with sd 1 per user and mde 0.1, so the fixed-sample design
needs n_fixed = 2 (z_0.975 + z_0.9)^2 / 0.1^2 = 2101.6 users per arm.

- Mixture test: simulated (fixed seed), a look after every batch of 100 users per
  arm, tau2 from mixture_plan(mde=0.1). Untruncated it rejects with probability
  -> 1; to meet the power target it is capped at the 90th percentile of its
  stopping time, so it stops with power 0.9 exactly (in the simulation).
- O'Brien-Fleming-type spending with 5 and 20 equally spaced looks:
  seqtest.design(...).characteristics(effect) gives the expected information at
  stopping relative to the fixed design (expected_ratio); the maximum is
  plan.inflation. Cross-checked by simulating the same plans.

Run: python benchmarks/bench_mixture_vs_group.py [--streams 20000] [--seed 1]
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np
from scipy import stats

import seqtest
from seqtest.mixture import always_valid, mixture_plan

ALPHA, POWER, MDE, SD, BATCH = 0.05, 0.9, 0.1, 1.0, 100


def mixture_stopping_batches(rng, streams, batches, effect, tau2, chunk=2000):
    """First rejecting batch per stream (np.inf if none within `batches`)."""
    b = np.arange(1, batches + 1)
    se = SD * np.sqrt(2.0 / (BATCH * b))
    out = []
    for start in range(0, streams, chunk):
        m = min(chunk, streams - start)
        d = rng.standard_normal((m, batches)) * (SD * math.sqrt(2.0 / BATCH)) + effect
        est = np.cumsum(d, axis=1) / b
        first = np.asarray(always_valid(est, se, tau2, alpha=ALPHA, sides=2).first_rejection)
        out.append(np.where(first >= 0, first + 1.0, np.inf))
    return np.concatenate(out)


def group_simulated(plan, rng, streams, effect_units):
    """Simulated expected fraction of max information and power of a group plan."""
    t = plan.info_fractions
    inc = np.diff(np.concatenate(([0.0], t)))
    drift = effect_units * plan.drift
    w = np.cumsum(rng.standard_normal((streams, t.size)) * np.sqrt(inc) + drift * inc, axis=1)
    z = w / np.sqrt(t)
    cross = np.abs(z) >= plan.efficacy_z
    stopped = cross.any(axis=1)
    k = np.where(stopped, np.argmax(cross, axis=1), t.size - 1)
    upper = stopped & (z[np.arange(streams), k] > 0)
    return float(t[k].mean()), float(upper.mean())


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--streams", type=int, default=20_000)
    ap.add_argument("--seed", type=int, default=1)
    args = ap.parse_args()
    rng = np.random.default_rng(args.seed)

    z = stats.norm.isf(ALPHA / 2) + stats.norm.isf(1 - POWER)
    n_fixed = 2 * (z * SD / MDE) ** 2
    batches = int(math.ceil(40 * n_fixed / BATCH))  # horizon: 40 x n_fixed per arm

    print(f"alpha {ALPHA} two-sided, power {POWER}, effect = mde = {MDE}, sd {SD}; "
          f"fixed-sample n = {n_fixed:.1f} per arm")
    print(f"mixture: look every {BATCH} users per arm, {args.streams} streams, "
          f"seed {args.seed}, horizon {batches * BATCH} per arm\n")

    t0 = time.perf_counter()
    plan = mixture_plan(ALPHA, 2, mde=MDE)
    stop = mixture_stopping_batches(rng, args.streams, batches, MDE, plan.tau2)
    n_stop = stop * BATCH
    cap = float(np.quantile(n_stop, POWER, method="inverted_cdf"))
    capped = np.minimum(n_stop, cap)
    power_capped = float(np.mean(n_stop <= cap))
    se_mean = float(np.std(capped, ddof=1) / math.sqrt(capped.size))
    null_stop = mixture_stopping_batches(rng, args.streams, int(cap // BATCH), 0.0, plan.tau2)
    null_reject = float(np.mean(np.isfinite(null_stop)))
    null_mean = float(np.mean(np.minimum(null_stop * BATCH, cap)))
    t_mix = time.perf_counter() - t0

    rows = []
    for looks in (5, 20):
        t1 = time.perf_counter()
        g = seqtest.design(alpha=ALPHA, sides=2, power=POWER, looks=looks,
                           efficacy=seqtest.spending.obrien_fleming())
        alt, null = g.characteristics(1.0), g.characteristics(0.0)
        sim_frac, sim_power = group_simulated(g, rng, args.streams, 1.0)
        rows.append((f"O'Brien-Fleming-type, {looks} looks", alt.expected_ratio,
                     sim_frac * g.inflation, g.inflation, alt.reject, sim_power,
                     null.expected_ratio, time.perf_counter() - t1))

    head = (f"{'plan':38s} {'E[n]/n_fixed':>12s} {'(sim)':>7s} {'max/n_fixed':>11s} "
            f"{'power':>6s} {'(sim)':>6s} {'E[n|H0]/n_fixed':>15s}")
    print(head)
    print("-" * len(head))
    for name, e_alt, e_sim, mx, pw, pw_sim, e_null, _ in rows:
        print(f"{name:38s} {e_alt:12.3f} {e_sim:7.3f} {mx:11.3f} {pw:6.3f} {pw_sim:6.3f} "
              f"{e_null:15.3f}")
    print(f"{'mixture, capped at power 0.9':38s} {capped.mean() / n_fixed:12.3f} "
          f"{'':7s} {cap / n_fixed:11.3f} {power_capped:6.3f} {'':6s} "
          f"{null_mean / n_fixed:15.3f}")
    finite = np.isfinite(n_stop)
    print(f"{'mixture, uncapped':38s} {np.mean(n_stop[finite]) / n_fixed:12.3f} "
          f"{'':7s} {'':>11s} {finite.mean():6.3f}")
    print(f"\nmixture E[n] standard error: {se_mean / n_fixed:.3f} n_fixed; median stop "
          f"{np.median(n_stop) / n_fixed:.3f} n_fixed; tau = {math.sqrt(plan.tau2):.4f} "
          f"({math.sqrt(plan.tau2) / MDE:.3f} mde)")
    print(f"mixture type I error by the cap under the null: {null_reject:.4f} "
          f"(Monte Carlo se {math.sqrt(null_reject * (1 - null_reject) / args.streams):.4f})")

    print("\nmixing variance sensitivity (same batches, power-0.9 cap each):")
    print(f"{'tau2 / rule':>12s} {'E[n]/n_fixed':>12s} {'cap/n_fixed':>11s}")
    for factor in (0.25, 0.5, 1.0, 2.0, 4.0):
        s = mixture_stopping_batches(rng, args.streams // 2, batches, MDE,
                                     plan.tau2 * factor) * BATCH
        c = float(np.quantile(s, POWER, method="inverted_cdf"))
        print(f"{factor:12.2f} {np.mean(np.minimum(s, c)) / n_fixed:12.3f} {c / n_fixed:11.3f}")

    print(f"\nseconds: mixture simulation {t_mix:.2f}; group plans "
          + ", ".join(f"{r[0].split(', ')[1]} {r[-1]:.2f}" for r in rows))


if __name__ == "__main__":
    main()
