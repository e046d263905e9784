"""Per-tail type I error of the current statistics, recorded before the score test.

Runs ``seqtest.simulate.simulate`` (the library's own simulator, so the unpooled
Wald z of ``seqtest.metrics.effect``) on the cells where issue 9 found one tail
leaking, and writes ``simulations/report/per-tail-before.json`` with the upper-tail
(treatment better) and lower-tail (control better) rejection rates and their 95%
Clopper-Pearson intervals.

Cells (100,000 replicates each, seed fixed per cell, one worker):

- binary, 2% baseline, 5-look one-sided O'Brien-Fleming-type (alpha 0.025, power
  0.9, design effect +0.6 points), planned traffic, allocation 1:4, 1:2 and 4:1
  (control:treatment; about 8k vs 33k users at 1:4);
- the same plans two-sided (alpha 0.05, 0.025 per tail);
- binary, relative scale, 4.5% baseline, equal arms, two-sided 0.05, 5-look
  O'Brien-Fleming-type powered at 0.8 for a 10% lift, random day-to-day traffic
  (cv 0.4 over 21 days), and the same plan on planned traffic.

For the relative-scale plan on planned traffic the script also re-decides the
very same simulated experiments with the statistic that monitoring
(``seqtest.monitor.analyze``) uses on the relative scale, the log ratio
``log(1 + r)`` with standard error ``se / (1 + r)``: the simulator computes z on
the ratio itself, ``r / se``, so the two disagree (see the JSON's ``note``).

Usage: ``python simulations/per_tail_before.py [--reps 100000] [--out FILE]``.
"""

from __future__ import annotations

import argparse
import json
import platform
import time
from pathlib import Path

import numpy as np

import seqtest
from seqtest import metrics
from seqtest.monitor import bounds_at, decide
from seqtest.scenarios import scenario_from_dict
from seqtest.simulate import clopper_pearson, simulate

HERE = Path(__file__).resolve().parent
OUT = HERE / "report" / "per-tail-before.json"


def _tails(k_up: int, k_down: int, reps: int, alpha: float, sides: int) -> dict:
    lo_u, hi_u = clopper_pearson(k_up, reps)
    lo_d, hi_d = clopper_pearson(k_down, reps)
    per_tail = alpha / sides
    return {
        "promised_per_tail": per_tail,
        "upper": {"rejections": k_up, "rate": k_up / reps, "ci95": [lo_u, hi_u],
                  "above_promise": lo_u > per_tail},
        "lower": {"rejections": k_down, "rate": k_down / reps, "ci95": [lo_d, hi_d],
                  "above_promise": lo_d > per_tail},
        "total": (k_up + k_down) / reps,
    }


def _plan(sides: int, allocation: float) -> seqtest.Plan:
    return seqtest.design(
        alpha=0.025 * sides, sides=sides, power=0.9, looks=5,
        efficacy=seqtest.spending.obrien_fleming(),
        metric={"kind": "binary", "baseline": 0.02, "mde": 0.006, "allocation": allocation})


def _relative_plan() -> seqtest.Plan:
    return seqtest.design(
        alpha=0.05, sides=2, power=0.8, looks=5, efficacy=seqtest.spending.obrien_fleming(),
        metric={"kind": "binary", "baseline": 0.045, "mde": 0.10, "relative": True,
                "scale": "relative", "allocation": 1.0})


def _monitor_log_ratio(plan: seqtest.Plan, paths: dict) -> tuple[int, int]:
    """Re-decide kept paths (planned traffic) with monitoring's log-ratio z."""
    ctrl, trt = paths["control"], paths["treatment"]
    eff = metrics.effect("binary", ctrl, trt, scale="relative")
    est = np.asarray(eff.estimate, float)
    se = np.asarray(eff.se, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        w_se = se / (1.0 + est)
        ok = np.isfinite(w_se) & (w_se > 0)
        z = np.where(ok, np.log1p(est) / np.where(ok, w_se, 1.0), 0.0)
    frac = paths["fraction"][0]
    a, b = bounds_at(plan, frac, final=True)
    stop, code = decide(z, a, b, plan.sides)
    z_stop = z[np.arange(z.shape[0]), stop]
    eff_stop = code == 1
    return int(np.sum(eff_stop & (z_stop > 0))), int(np.sum(eff_stop & (z_stop < 0)))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--reps", type=int, default=100_000)
    ap.add_argument("--out", type=Path, default=OUT)
    args = ap.parse_args()
    reps = args.reps
    cells = []
    seed = 9100
    for sides in (1, 2):
        for label, alloc in (("1:4", 4.0), ("1:2", 2.0), ("4:1", 0.25)):
            seed += 1
            plan = _plan(sides, alloc)
            ss = plan.sample_size()
            sc = scenario_from_dict({
                "name": f"binary-2pct-{label.replace(':', 'to')}-{sides}sided",
                "data": {"kind": "binary", "rate": 0.02},
                "allocation": alloc,
                "traffic": {"mode": "fixed"},
                "analysis": {"naive": False},
            })
            t0 = time.process_time()
            res = simulate(plan, sc, reps, seed=seed, workers=1)
            cpu = time.process_time() - t0
            cells.append({
                "cell": f"binary 2% baseline, 5-look O'Brien-Fleming-type, "
                        f"{'one' if sides == 1 else 'two'}-sided, allocation {label}, "
                        "planned traffic",
                "allocation_control_to_treatment": label,
                "sides": sides, "alpha": plan.alpha,
                "n_control": ss.n_control, "n_treatment": ss.n_treatment,
                "reps": reps, "seed": seed, "cpu_seconds": round(cpu, 1),
                "statistic": "simulator: seqtest.metrics.effect z (unpooled Wald)",
                **_tails(res.rejections_upper, res.rejections_lower, reps, plan.alpha, sides),
            })
            print(cells[-1]["cell"], cells[-1]["upper"]["rate"], cells[-1]["lower"]["rate"],
                  f"{cpu:.1f}s", flush=True)
    rel = _relative_plan()
    ss = rel.sample_size()
    for mode in ("random", "fixed"):
        seed += 1
        traffic: dict = {"mode": mode}
        if mode == "random":
            traffic.update({"days": 21, "cv": 0.4, "cap": True, "final": "at_max"})
        sc = scenario_from_dict({
            "name": f"binary-relative-4.5pct-{mode}",
            "data": {"kind": "binary", "rate": 0.045},
            "allocation": 1.0,
            "traffic": traffic,
            "analysis": {"naive": False},
        })
        t0 = time.process_time()
        res = simulate(rel, sc, reps, seed=seed, workers=1, keep_paths=(mode == "fixed"))
        cpu = time.process_time() - t0
        cell = {
            "cell": "binary relative scale, 4.5% baseline, equal arms, two-sided 0.05, "
                    f"5-look O'Brien-Fleming-type, {mode} traffic",
            "allocation_control_to_treatment": "1:1", "sides": 2, "alpha": rel.alpha,
            "n_control": ss.n_control, "n_treatment": ss.n_treatment,
            "reps": reps, "seed": seed, "cpu_seconds": round(cpu, 1),
            "statistic": "simulator: seqtest.metrics.effect z on the ratio, r / se",
            **_tails(res.rejections_upper, res.rejections_lower, reps, rel.alpha, 2),
        }
        if mode == "fixed" and res.paths is not None:
            up, down = _monitor_log_ratio(rel, res.paths)
            cell["same_paths_monitor_statistic"] = {
                "statistic": "monitoring: log(1 + r) / (se / (1 + r))",
                **_tails(up, down, reps, rel.alpha, 2),
            }
        cells.append(cell)
        print(cell["cell"], cell["upper"]["rate"], cell["lower"]["rate"], f"{cpu:.1f}s",
              flush=True)
    out = {
        "what": "per-tail type I error of the current library (before the score test)",
        "library_commit_note": "run on the branch point of wave2-score (current main)",
        "python": platform.python_version(), "numpy": np.__version__,
        "interval": "95% Clopper-Pearson (scipy.stats.binomtest(...).proportion_ci('exact'))",
        "note": ("On the relative scale the simulator decides on z = r / se (the ratio's "
                 "delta-method standard error) while seqtest.monitor.analyze decides on "
                 "log(1 + r) / (se / (1 + r)); the fixed-traffic relative cell shows both "
                 "on the same simulated experiments."),
        "cells": cells,
    }
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(json.dumps(out, indent=2) + "\n")
    print(f"wrote {args.out}")


if __name__ == "__main__":
    main()
