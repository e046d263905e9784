"""Does group-sequential sizing keep its power when the decisions use the score test?

For a 5-look O'Brien-Fleming-type plan (Lan-DeMets spending, one-sided 0.025 or
two-sided 0.05, power 0.9) on a binary metric with a 2% baseline and a design effect
of +0.6 points, at allocations (control:treatment) 1:1, 1:4 and 4:1, the maximum
sample is computed three ways:

- ``current``: the library's sizing, ``n_c = (drift / delta)^2 * v1`` with the
  unpooled (alternative) per-unit variance ``v1`` (``seqtest.sizing``);
- ``score``: ``seqtest.score.group_sequential_size``: under the design effect the
  score statistic is ``Y_k / rho`` with ``rho = sqrt(v0 / v1)`` and ``Y`` canonical,
  so the plan's boundaries ``a_k`` act as ``rho * (a_k + gamma_k (a_k^2 - 1) / 6)``
  on ``Y`` (``gamma_k`` the skewness term of the corrected statistic); the drift
  ``D1`` that gives the power on those boundaries fixes ``n_c = v1 (D1 / delta)^2``;
- ``score_closed_form``: the one-line approximation ``D1 = rho (D - z_b) + z_b``
  (``D`` the plan's drift), exact for one look.

Each size is then simulated, 100,000 experiments per cell on planned traffic, with
the skewness-corrected score statistic deciding at the boundaries that monitoring
computes (``seqtest.monitor.bounds_at`` on the observed fractions,
``seqtest.monitor.decide``). The power carries its 95% Clopper-Pearson interval and
the Monte Carlo standard error ``sqrt(p (1 - p) / reps)`` (0.00095 at 0.9).

The script also re-runs, with the corrected score statistic, the null cells of
``per_tail_before.py`` (planned traffic) as a preview of the "after" figures.

Writes ``simulations/report/score-sizing-check.json``. About a minute of CPU.
"""

from __future__ import annotations

import argparse
import json
import math
import time
from pathlib import Path

import numpy as np
from scipy import special  # type: ignore[import-untyped]

import seqtest
from seqtest import score
from seqtest.monitor import bounds_at, decide
from seqtest.simulate import clopper_pearson

HERE = Path(__file__).resolve().parent
OUT = HERE / "report" / "score-sizing-check.json"
BASE, MDE = 0.02, 0.006


def _plan(sides: int, allocation: float, baseline: float = BASE, mde: float = MDE,
          power: float = 0.9, relative: bool = False) -> seqtest.Plan:
    metric = {"kind": "binary", "baseline": baseline, "mde": mde, "allocation": allocation}
    if relative:
        metric.update({"relative": True, "scale": "relative"})
    return seqtest.design(alpha=0.025 * sides, sides=sides, power=power, looks=5,
                          efficacy=seqtest.spending.obrien_fleming(), metric=metric)


def _run(plan: seqtest.Plan, n_c: float, n_t: float, p_c: float, p_t: float, reps: int,
         seed: int, statistic: str = "corrected") -> dict:
    """Simulate on planned traffic; count efficacy stops up and down."""
    t = plan.info_fractions
    nc_k = np.ceil(n_c * t * (1 - 1e-12)).astype(np.int64)
    nt_k = np.ceil(n_t * t * (1 - 1e-12)).astype(np.int64)
    frac = (nc_k + nt_k) / float(nc_k[-1] + nt_k[-1])
    a, b = bounds_at(plan, frac.tolist(), final=True)
    rng = np.random.default_rng(np.random.SeedSequence(seed))
    up = down = 0
    done = 0
    while done < reps:
        m = min(25_000, reps - done)
        xc = rng.binomial(np.diff(nc_k, prepend=0), p_c, size=(m, t.size)).cumsum(axis=1)
        xt = rng.binomial(np.diff(nt_k, prepend=0), p_t, size=(m, t.size)).cumsum(axis=1)
        res = score.binary_difference(xc, nc_k, xt, nt_k)
        if statistic == "corrected":
            z = np.asarray(res.corrected_z)
        elif statistic == "score":
            z = np.asarray(res.z)
        else:  # unpooled Wald, as seqtest.metrics.effect has it (zero-count floor)
            pc = np.clip(xc / nc_k, 0.5 / nc_k, 1 - 0.5 / nc_k)
            pt = np.clip(xt / nt_k, 0.5 / nt_k, 1 - 0.5 / nt_k)
            z = (xt / nt_k - xc / nc_k) / np.sqrt(pc * (1 - pc) / nc_k + pt * (1 - pt) / nt_k)
        stop, code = decide(z, a, b, plan.sides)
        z_stop = z[np.arange(m), stop]
        eff = code == 1
        up += int(np.sum(eff & (z_stop > 0)))
        down += int(np.sum(eff & (z_stop < 0)))
        done += m
    lo_u, hi_u = clopper_pearson(up, reps)
    lo_d, hi_d = clopper_pearson(down, reps)
    rate = up / reps
    return {"n_control": int(nc_k[-1]), "n_treatment": int(nt_k[-1]), "reps": reps,
            "seed": seed, "statistic": statistic,
            "upper": {"rate": rate, "ci95": [lo_u, hi_u],
                      "mc_se": math.sqrt(max(rate * (1 - rate), 1e-12) / reps)},
            "lower": {"rate": down / reps, "ci95": [lo_d, hi_d]}}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--reps", type=int, default=100_000)
    ap.add_argument("--out", type=Path, default=OUT)
    args = ap.parse_args()
    reps = args.reps
    t0 = time.process_time()
    seed = 9300
    power_cells = []
    for sides in (1, 2):
        for label, q in (("1:1", 1.0), ("1:4", 4.0), ("4:1", 0.25)):
            plan = _plan(sides, q)
            ss = plan.sample_size()
            dv = score.design_variances("binary", BASE, BASE + MDE, allocation=q)
            rho = math.sqrt(dv.v0 / dv.v1)
            zb = float(special.ndtri(plan.power))
            sizes = {
                "current": (float(ss.n_control), float(ss.n_treatment)),
                "score": score.group_sequential_size(
                    dv, plan.info_fractions, plan.efficacy_z, sides=sides,
                    power=plan.power, allocation=q, skew=True),
                "score_no_skew_term": score.group_sequential_size(
                    dv, plan.info_fractions, plan.efficacy_z, sides=sides,
                    power=plan.power, allocation=q, skew=False),
            }
            d1 = rho * (plan.drift - zb) + zb
            n_cf = dv.v1 * (d1 / dv.delta) ** 2
            sizes["score_closed_form"] = (n_cf, n_cf * q)
            cell: dict = {"sides": sides, "alpha": plan.alpha, "power_target": plan.power,
                          "allocation_control_to_treatment": label, "baseline": BASE,
                          "design_effect": MDE, "v0": dv.v0, "v1": dv.v1, "rho": rho,
                          "plan_drift": plan.drift, "sizes": {}}
            for name, (n_c, n_t) in sizes.items():
                seed += 1
                r = _run(plan, n_c, n_t, BASE, BASE + MDE, reps, seed)
                r["n_control_unrounded"] = n_c
                cell["sizes"][name] = r
                p = r["upper"]
                print(f"{sides}-sided {label} {name:20s} n_c {r['n_control']:6d} n_t "
                      f"{r['n_treatment']:6d} power {p['rate']:.4f} "
                      f"[{p['ci95'][0]:.4f}, {p['ci95'][1]:.4f}]", flush=True)
            power_cells.append(cell)
    # the null cells of per_tail_before.py, decided by the corrected score statistic
    null_cells = []
    for sides in (1, 2):
        for label, q in (("1:4", 4.0), ("1:2", 2.0), ("4:1", 0.25)):
            plan = _plan(sides, q)
            ss = plan.sample_size()
            row: dict = {"sides": sides, "alpha": plan.alpha,
                         "allocation_control_to_treatment": label,
                   "baseline": BASE, "traffic": "planned"}
            for stat in ("corrected", "score", "wald"):
                seed += 1
                row[stat] = _run(plan, ss.n_control, ss.n_treatment, BASE, BASE, reps, seed,
                                 stat)
            print(f"null {sides}-sided {label}: " + "; ".join(
                f"{s} up {row[s]['upper']['rate']:.4f} down {row[s]['lower']['rate']:.4f}"
                for s in ("corrected", "score", "wald")), flush=True)
            null_cells.append(row)
    rel = _plan(2, 1.0, baseline=0.045, mde=0.10, power=0.8, relative=True)
    ss = rel.sample_size()
    row = {"sides": 2, "alpha": 0.05, "allocation_control_to_treatment": "1:1",
           "baseline": 0.045, "scale": "relative", "traffic": "planned"}
    for stat in ("corrected", "score"):
        seed += 1
        row[stat] = _run(rel, ss.n_control, ss.n_treatment, 0.045, 0.045, reps, seed, stat)
    print(f"null relative 4.5% 1:1: corrected up {row['corrected']['upper']['rate']:.4f} "
          f"down {row['corrected']['lower']['rate']:.4f}", flush=True)
    null_cells.append(row)
    out = {
        "what": "power of score-test sizing, and per-tail null rates with the score test",
        "plan": "5 looks at 0.2..1, O'Brien-Fleming-type spending, power 0.9, no futility",
        "interval": "95% Clopper-Pearson; mc_se = sqrt(p (1 - p) / reps)",
        "power_cells": power_cells,
        "null_cells": null_cells,
        "cpu_seconds": round(time.process_time() - t0, 1),
    }
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps(out, indent=2) + "\n")
    print(f"wrote {args.out} ({out['cpu_seconds']} s CPU)")


if __name__ == "__main__":
    main()
