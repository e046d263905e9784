"""Validation grid: does every shipped design hold its type I error?

Runs a grid of simulation cells through :func:`seqtest.simulation.engine.simulate` (the same
decision code as monitoring) and writes a markdown report with PNG figures:

    python simulations/validate.py --grid reduced --out /tmp/validation
    python simulations/validate.py --grid full --out simulations/report --workers 2 \
        --budget-minutes 180
    python simulations/validate.py --grid full --out /tmp/full --scheduler tcp://host:8786

The chunks of all cells run in this process, on ``--workers`` local processes or, with
``--scheduler``, as tasks on a Dask cluster (``--scheduler local`` starts a local one);
the numbers are the same bit for bit whatever the backend and the number of workers.

Grids
-----
``full``
    Every efficacy family (five spending functions and four classical shapes plus a
    user table) x K in {2, 5, 10} x one- and two-sided x the four data models
    (binary, normal, log-normal revenue, counts) with traffic as planned; futility
    variants (non-binding ignored, non-binding obeyed, binding); uneven looks and
    unplanned extra looks; random day-to-day traffic for every family at K = 5
    (two-sided), for two families at every K and both sides, and for every data
    model; the mixture SPRT for every data model, both sides, fixed and random
    traffic; the naive baseline at K = 2 ... 50 against the published
    repeated-test error rates; and stress cases reported as findings. Every cell
    has 100,000 replicates (``--reps``).
``reduced``
    What CI runs (through ``tests/test_simulate.py``), 100,000 replicates per cell
    unless said: every family at K = 5 on binary data, both sides; Pocock-type
    spending at K = 2 and 10; the naive baseline at K = 2, 5, 10 on normal data
    (its cells are also O'Brien-Fleming-type plans at those K); revenue and counts
    at K = 5; the three futility variants; uneven and extra looks; the mixture
    SPRT on fixed traffic and, with 20,000 replicates, on random traffic; random
    traffic for a group-sequential plan (the exact screen of
    :mod:`seqtest.simulation.screen` spares most replicates their own boundaries); and
    each tail of binary plans with unequal arms (1:2, 1:4, 4:1) at a 2% baseline, one-
    and two-sided, and of the relative scale with equal arms on planned and random
    traffic (the full grid adds a 1% baseline and the relative scale with unequal
    arms); and a few cells of experiments with many arms (see below).

Experiments (many arms, several metrics)
----------------------------------------
Cells whose ids start with ``experiment-`` run experiment plans
(:mod:`seqtest.simulation.experiment`; one-sided alpha 0.025, 5 looks, O'Brien-
Fleming-type spending, normal data unless said): the family-wise error over the
primaries' true nulls under the global null for k = 2, 3, 5, 8 treatments, both
methods, with planned equal looks, unequal planned looks, uneven traffic that runs
over, and five unplanned extra looks; under least favourable configurations (one arm,
or half the arms, better by the mde, the rest null); the power of Bonferroni (no alpha
passed on), the graphical method (Holm-type passing) and the Dunnett-type boundaries
at the same users per arm (k = 2, 3, 5: every arm better, and one arm better); a
guardrail's harm detection against its planned power; and the composed decision's
false wins and false harm stops against the plan's bounds with correlated metrics.
Family-wise error cells are gated like the others (one tail, at alpha). The reduced
grid runs six of them (three at 100,000 replicates, three at 20,000).

Metric kinds and margins
------------------------
Each tail of a ratio metric (clicks per session, users randomised, the delta method),
a metric adjusted for a pre-period covariate (rho 0.7) and over-dispersed counts
analysed with their own variance (negative binomial, variance twice the mean: the
data on which Poisson rates leak), 5-look O'Brien-Fleming-type plans; and one-sided
tests with the true effect at the margin (non-inferiority of a proportion). The full
grid adds one-sided and relative-scale cells, random traffic, mixture plans for the
adjusted metric, the counts at the same maximum as the stress cell that leaks, and
margins on the relative scale, where lower is better and for superiority by a margin.

The rule
--------
A plan promises an error for each direction it can reject in: alpha for the upper
tail of a one-sided plan, alpha / 2 for each tail of a two-sided one. A gated cell
*leaks* when the lower end of the Clopper-Pearson interval of any of its tails, at the
family-wise level, lies above that tail's alpha: with M gated tails, each interval is
two-sided at confidence ``1 - 2 * 0.05 / M`` (Bonferroni), so if every design held
each tail exactly, the chance that any cell is flagged is at most 5% (the total of a
two-sided plan cannot exceed alpha without a tail exceeding alpha / 2, so it needs no
test of its own). The report also shows the plain 95% intervals and marks cells whose
95% lower end of the total or of a tail is above its alpha ("watch"); among M tails at
exactly their alpha about ``0.025 M`` such marks are expected by chance alone.
Limits: with n = 100,000 replicates the rule detects a leak in a tail only when its
true rate exceeds the tail's alpha by about ``z * sqrt(a (1 - a) / n)`` (z = 3.3 to 3.8
after the correction for 100 to 600 tails: 0.0016 to 0.0019 at a = 0.025); smaller
excesses (e.g. from estimated variances or discrete data, which make the type I error
only approximately alpha) pass.
Stress cells are not gated: their verdicts are findings.

Seeds: each cell's seed is the CRC-32 of its id plus ``--seed``, so adding cells
does not change the others and every number in the report can be reproduced (the
power cells of the experiments share one seed per configuration, so the methods are
compared on the same data).
"""

from __future__ import annotations

import argparse
import contextlib
import json
import math
import os
import sys
import time
import zlib
from concurrent.futures import Executor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

import seqtest
from seqtest import spending
from seqtest.mixture import mixture_plan
from seqtest.planning.experiment import experiment_plan
from seqtest.simulation.engine import SimulationResult, clopper_pearson, prepare
from seqtest.simulation.experiment import (
    ExperimentSimulationResult,
    experiment_scenario_from_dict,
    prepare_experiment,
)
from seqtest.simulation.runner import Runner, dask_client
from seqtest.simulation.scenarios import scenario_from_dict

#: Overall type I error of repeated two-sided tests at nominal 0.05 after K equally
#: spaced looks: Armitage, McPherson and Rowe (1969), JRSS A 132, 235-244; Jennison
#: and Turnbull (2000), Table 1.1 (from memory, confirmed by computation).
NAIVE_REFERENCE = {1: 0.050, 2: 0.083, 3: 0.107, 4: 0.126, 5: 0.142, 10: 0.193,
                   20: 0.248, 50: 0.320}

FAMILIES: list[tuple[str, Any]] = [
    ("OF-type", "obrien-fleming-type"),
    ("Pocock-type", "pocock-type"),
    ("HSD(-4)", "hsd:-4"),
    ("HSD(1)", "hsd:1"),
    ("power(3)", "power:3"),
    ("table", spending.from_table([0.25, 0.5, 0.75, 1.0], [0.05, 0.2, 0.5, 1.0])),
    ("classical OF", "obrien-fleming"),
    ("classical Pocock", "pocock"),
    ("Wang-Tsiatis(0.25)", "wang-tsiatis:0.25"),
    ("Haybittle-Peto", "haybittle-peto"),
]

#: data model -> (plan metric, scenario data, size note)
METRICS: dict[str, tuple[dict, dict]] = {
    "binary": ({"kind": "binary", "baseline": 0.10, "mde": 0.02},
               {"kind": "binary", "rate": 0.10}),
    "normal": ({"kind": "continuous", "sd": 1.0, "mde": 0.1},
               {"kind": "normal", "mean": 4.0, "sd": 1.0}),
    # 80% zeros, amounts with mean 50, sd 75: 10 per user, sd 39.05 per user
    "lognormal": ({"kind": "continuous", "sd": 39.05, "mde": 2.5},
                  {"kind": "lognormal", "mean": 50.0, "sd": 75.0, "zero_share": 0.8}),
    "counts": ({"kind": "rate", "baseline": 2.0, "mde": 0.1},
               {"kind": "counts", "rate": 2.0}),
}
#: a smaller revenue plan for the reduced grid (same data, 4x the mde)
REDUCED_LOGNORMAL = {"kind": "continuous", "sd": 39.05, "mde": 5.0}

RANDOM_TRAFFIC = {"mode": "random", "days": 21, "cv": 0.4, "cap": True, "final": "at_max"}


@dataclass
class Cell:
    """One simulation of the grid."""

    id: str
    group: str
    plan: dict              # design(...) keywords, or {"mixture": {...}}
    scenario: dict
    reps: int
    gate: bool = True
    exact: bool = True      # the design's type I error is alpha itself (not below it)
    naive_reference: float | None = None
    labels: dict = field(default_factory=dict)
    seed_key: str | None = None   # cells with the same key draw the same data (paired)


def _alpha(sides: int) -> float:
    # two-sided 0.05, one-sided 0.025 (the usual pairing; common practice)
    return 0.05 if sides == 2 else 0.025


def _gs(family: Any, looks: int, sides: int, metric: dict, **extra: Any) -> dict:
    return {"alpha": _alpha(sides), "sides": sides, "power": 0.9, "looks": looks,
            "efficacy": family, "metric": metric, **extra}


def _scenario(name: str, data: dict, traffic: dict | None = None, **extra: Any) -> dict:
    d = {"name": name, "data": dict(data), "traffic": dict(traffic or {"mode": "fixed"})}
    d.update(extra)
    return d


#: The cells whose tails were recorded with the first release's statistics
#: (``simulations/report/per-tail-before.json``), by (allocation, sides, scale, traffic).
TAIL_GROUP = "each tail at its level"


def _tail_cells(full: bool, reps: int, random_reps: int) -> list[tuple]:
    """Binary metrics with unequal arms (1:2, 1:4, 4:1 control to treatment), rare
    outcomes (2%, and 1% in the full grid), one- and two-sided, on the difference and
    the relative scale, and the relative scale with equal arms on random traffic."""
    out: list[tuple] = []
    baselines = (0.02, 0.01) if full else (0.02,)
    scales = ("difference", "relative") if full else ("difference",)
    for base in baselines:
        for scale in scales:
            for alloc, ratio in ((4.0, "1:4"), (2.0, "1:2"), (0.25, "4:1")):
                for sides in (1, 2):
                    rel = scale == "relative"
                    metric = {"kind": "binary", "baseline": base, "allocation": alloc,
                              "mde": 0.3 if rel else 0.3 * base, "relative": rel,
                              "scale": scale}
                    cid = f"tail-binary-{base:g}-{scale}-{ratio}-s{sides}"
                    out.append((cid, TAIL_GROUP, _gs("obrien-fleming-type", 5, sides, metric),
                                _scenario(cid, {"kind": "binary", "rate": base}), reps,
                                {"labels": {"baseline": base, "scale": scale,
                                            "allocation": ratio, "sides": sides,
                                            "traffic": "fixed"}}))
    # relative scale, equal arms, 4.5%, powered 0.8 for a 10% lift
    rel = {"kind": "binary", "baseline": 0.045, "mde": 0.1, "relative": True,
           "scale": "relative"}
    for traffic, n in (("fixed", reps), ("random", random_reps)):
        cid = f"tail-binary-0.045-relative-1:1-s2-{traffic}"
        tr = RANDOM_TRAFFIC if traffic == "random" else {"mode": "fixed"}
        out.append((cid, TAIL_GROUP, {**_gs("obrien-fleming-type", 5, 2, rel), "power": 0.8},
                    _scenario(cid, {"kind": "binary", "rate": 0.045}, tr), n,
                    {"labels": {"baseline": 0.045, "scale": "relative", "allocation": "1:1",
                                "sides": 2, "traffic": traffic}}))
    return out


METRIC_GROUP = "metric kinds and margins"

#: ratio data per user: 1 + Poisson(2) sessions, clicks Poisson(sessions x 0.5 x G),
#: G gamma with shape 2 and mean 1; the plan from its per-user moments (mean clicks
#: 1.5, var 1.5 + 0.25 (11 x 1.5 - 9) = 3.375; sessions 3, var 2; covariance 0.5 x 2)
RATIO_CELL = ({"kind": "ratio", "numerator_mean": 1.5, "denominator_mean": 3.0,
               "numerator_sd": math.sqrt(3.375), "denominator_sd": math.sqrt(2.0),
               "covariance": 1.0, "mde": 0.2, "relative": True},
              {"kind": "ratio", "rate": 0.5, "denominator_mean": 3.0, "dispersion": 2.0})
ADJUSTED_CELL = ({"kind": "adjusted", "sd": 1.0, "correlation": 0.7, "mde": 0.1},
                 {"kind": "pre_period", "mean": 4.0, "sd": 1.0, "correlation": 0.7})
#: the stress cell's over-dispersed counts, analysed with their own variance (a plan
#: with 4x the mde of the rate plan, so users are drawn one by one at a fair cost)
COUNT_CELL = ({"kind": "count", "baseline": 2.0, "dispersion": 2.0, "mde": 0.4},
              {"kind": "counts", "rate": 2.0, "dispersion": 2.0})


def _metric_cells(full: bool, reps: int, random_reps: int) -> list[tuple]:
    """The metric kinds (each tail at its level) and the tests against a margin (the
    true effect at the margin); see the module docstring."""
    out: list[tuple] = []

    def cell(cid: str, plan: dict, data: dict, n: int, *, traffic: dict | None = None,
             effect: dict | None = None, labels: dict, exact: bool = True) -> None:
        extra: dict = {} if effect is None else {"effect": effect}
        out.append((cid, METRIC_GROUP, plan, _scenario(cid, data, traffic, **extra), n,
                    {"labels": labels, "exact": exact}))

    kinds = (("ratio", RATIO_CELL), ("adjusted", ADJUSTED_CELL), ("count", COUNT_CELL))
    for name, (metric, data) in kinds:
        for sides in (2, 1) if full else (2,):
            cell(f"metric-{name}-K5-s{sides}", _gs("obrien-fleming-type", 5, sides, metric),
                 data, reps, labels={"data": name, "K": 5, "sides": sides})
    ni = {"kind": "binary", "baseline": 0.3, "mde": 0.0, "margin": -0.05,
          "hypothesis": "non_inferiority"}
    cell("margin-binary-non-inferiority-K5-s1", _gs("obrien-fleming-type", 5, 1, ni),
         {"kind": "binary", "rate": 0.3}, reps, effect={"difference": -0.05},
         labels={"data": "binary", "case": "non-inferiority at the margin -5 points",
                 "K": 5, "sides": 1})
    if not full:
        return out
    # the relative scale and random traffic for the new kinds
    rel_ratio = {**RATIO_CELL[0], "scale": "relative"}
    cell("metric-ratio-relative-K5-s2", _gs("obrien-fleming-type", 5, 2, rel_ratio),
         RATIO_CELL[1], reps, labels={"data": "ratio", "case": "relative scale", "K": 5,
                                      "sides": 2})
    for name, (metric, data) in kinds:
        cell(f"metric-{name}-random-K5-s2", _gs("obrien-fleming-type", 5, 2, metric), data,
             random_reps, traffic=RANDOM_TRAFFIC,
             labels={"data": name, "traffic": "random", "K": 5, "sides": 2})
    # mixture plans for the adjusted metric (continuous monitoring, 100 looks)
    for sides in (2, 1):
        cell(f"metric-adjusted-mixture-s{sides}",
             {"mixture": {"alpha": _alpha(sides), "sides": sides, "metric": ADJUSTED_CELL[0],
                          "max_n_per_arm": 3_000}},
             ADJUSTED_CELL[1], reps, traffic={"mode": "fixed", "looks": 100}, exact=False,
             labels={"data": "adjusted", "case": "mixture SPRT", "sides": sides,
                     "looks": 100})
    # the same data, users and looks as the stress cell whose Poisson rates leak
    rate_plan = make_plan(_gs("obrien-fleming-type", 5, 2, METRICS["counts"][0]))
    same_max = int(rate_plan.sample_size().total)
    cell("metric-count-same-data-as-stress-K5-s2",
         _gs("obrien-fleming-type", 5, 2, COUNT_CELL[0]), COUNT_CELL[1], reps,
         traffic={"mode": "fixed", "max_total": same_max},
         labels={"data": "count", "case": f"stress cell's data, {same_max:,} users",
                 "K": 5, "sides": 2})
    # margins: relative scale, lower is better, superiority by a margin, other kinds
    margin_cells = [
        ("binary-relative", {"kind": "binary", "baseline": 0.1, "mde": 0.0,
                             "relative": True, "scale": "relative", "margin": -0.1,
                             "hypothesis": "non_inferiority"},
         {"kind": "binary", "rate": 0.1}, {"relative": -0.1}, "relative margin -10%"),
        ("rate-relative", {"kind": "rate", "baseline": 2.0, "mde": 0.0, "relative": True,
                           "scale": "relative", "margin": -0.05,
                           "hypothesis": "non_inferiority"},
         {"kind": "counts", "rate": 2.0}, {"relative": -0.05}, "relative margin -5%"),
        ("continuous-lower", {"kind": "continuous", "sd": 1.0, "mde": 0.0, "margin": 0.1,
                              "better": "lower", "hypothesis": "non_inferiority"},
         {"kind": "normal", "mean": 3.0, "sd": 1.0}, {"difference": 0.1},
         "lower is better, margin +0.1"),
        ("ratio-relative", {**RATIO_CELL[0], "mde": 0.0, "scale": "relative",
                            "margin": -0.1, "hypothesis": "non_inferiority"},
         RATIO_CELL[1], {"relative": -0.1}, "ratio, relative margin -10%"),
        ("binary-superiority", {"kind": "binary", "baseline": 0.1, "mde": 0.03,
                                "margin": 0.01, "hypothesis": "superiority"},
         {"kind": "binary", "rate": 0.1}, {"difference": 0.01},
         "superiority by 1 point, at the margin"),
    ]
    for name, metric, data, effect, case in margin_cells:
        cell(f"margin-{name}-K5-s1", _gs("obrien-fleming-type", 5, 1, metric), data, reps,
             effect=effect, labels={"data": metric["kind"], "case": case, "K": 5,
                                    "sides": 1})
    return out


EXPERIMENT_FWER = "experiments: family-wise error"
EXPERIMENT_POWER = "experiments: power at equal users"
EXPERIMENT_GUARD = "experiments: guardrails and the composed decision"
EXPERIMENT_GROUPS = (EXPERIMENT_FWER, EXPERIMENT_POWER, EXPERIMENT_GUARD)
#: the primary of the experiment cells, and its data
EXP_METRIC = {"name": "y", "kind": "continuous", "sd": 1.0, "mde": 0.1}
EXP_DATA = {"kind": "normal", "mean": 0.0, "sd": 1.0}
#: look patterns: planned equal, planned unequal, uneven traffic running over the
#: maximum, and five unplanned extra looks
EXP_LOOKS = {
    "planned": ({"looks": 5}, {"mode": "fixed"}),
    "unequal": ({"information_fractions": [0.15, 0.4, 0.6, 0.8, 1.0]}, {"mode": "fixed"}),
    "uneven": ({"looks": 5}, {"mode": "uneven", "fractions": [0.1, 0.25, 0.45, 0.85, 1.05]}),
    "extra": ({"looks": 5}, {"mode": "fixed", "extra_looks": [0.1, 0.3, 0.5, 0.7, 0.9]}),
}


def _exp_plan(k: int, method: str, looks: dict, **kw: Any) -> dict:
    spec = {"arms": k + 1, "metrics": EXP_METRIC, "alpha": 0.025, "sides": 1,
            "method": "graphical" if method == "bonferroni" else method, **looks, **kw}
    if method == "bonferroni":      # weighted Bonferroni: no alpha passed on
        spec["transitions"] = [[0.0] * k for _ in range(k)]
    return {"experiment": spec}


def _exp_scenario(name: str, traffic: dict, effects: dict | None = None, **kw: Any
                  ) -> dict:
    return {"name": name, "metrics": [{"name": "y", "data": EXP_DATA,
                                       "effects": effects or {},
                                       "effect_type": "mde_multiple"}],
            "traffic": traffic, **kw}


def _experiment_cells(full: bool, reps: int) -> list[tuple]:
    """The experiment cells (see the module docstring)."""
    out: list[tuple] = []
    small = min(reps, 20_000)

    def names(k: int) -> list[str]:
        return ["treatment"] if k == 1 else [f"treatment_{i}" for i in range(1, k + 1)]

    # family-wise error under the global null
    null_cells = ([(k, m, lk) for k in (2, 3, 5, 8) for m in ("graphical", "dunnett")
                   for lk in EXP_LOOKS] if full else
                  [(3, "graphical", "uneven"), (5, "dunnett", "unequal")])
    for k, method, lk in null_cells:
        plan_looks, traffic = EXP_LOOKS[lk]
        cid = f"experiment-null-k{k}-{method}-{lk}"
        out.append((cid, EXPERIMENT_FWER, _exp_plan(k, method, plan_looks),
                    _exp_scenario(cid, traffic), reps,
                    {"labels": {"k": k, "method": method, "looks": lk,
                                "configuration": "global null"}}))
    # least favourable configurations: one arm, or half the arms, better by the mde
    lfc = ([(k, m, c) for k in (2, 3, 5, 8) for m in ("graphical", "dunnett")
            for c in (("one", "half") if k > 2 else ("one",))] if full else
           [(3, "dunnett", "one")])
    for k, method, conf in lfc:
        better = names(k)[: 1 if conf == "one" else k // 2]
        cid = f"experiment-lfc-k{k}-{method}-{conf}"
        out.append((cid, EXPERIMENT_FWER, _exp_plan(k, method, {"looks": 5}),
                    _exp_scenario(cid, {"mode": "fixed"}, {a: 1.0 for a in better}), reps,
                    {"labels": {"k": k, "method": method, "looks": "planned",
                                "configuration": f"{len(better)} better"}}))
    # power at equal users: the Bonferroni plan's users for every method
    for k in ((2, 3, 5) if full else (3,)):
        users = _bonferroni_users(k)
        for conf in (("all", "one") if full else ("all",)):
            better = names(k) if conf == "all" else names(k)[:1]
            for method in (("bonferroni", "graphical", "dunnett") if full
                           else ("bonferroni", "dunnett")):
                cid = f"experiment-power-k{k}-{conf}-{method}"
                out.append((cid, EXPERIMENT_POWER, _exp_plan(k, method, {"looks": 5}),
                            _exp_scenario(cid, {"mode": "fixed", "control_users": users},
                                          {a: 1.0 for a in better}),
                            reps if full else small,
                            {"labels": {"k": k, "method": method, "better": conf,
                                        "users": users},
                             # the methods see the same data: their difference is paired
                             "seed_key": f"experiment-power-k{k}-{conf}"}))
    # a guardrail's harm detection against its planned power; the composed decision
    guard = {"name": "load", "role": "guardrail", "kind": "continuous", "sd": 1.0,
             "mde": 0.08, "margin": 0.02, "better": "lower", "alpha": 0.05,
             "power": 0.8}
    gplan = {"experiment": {"arms": 3, "metrics": [EXP_METRIC, guard], "alpha": 0.025,
                            "sides": 1, "looks": 5}}
    gdata = {"name": "load", "data": {"kind": "normal", "mean": 3.0, "sd": 1.0},
             "effects": {"treatment_1": 1.0}, "effect_type": "mde_multiple"}
    out.append(("experiment-guardrail-power", EXPERIMENT_GUARD, gplan,
                {"name": "guardrail-power", "metrics": [
                    {"name": "y", "data": EXP_DATA}, gdata]},
                reps if full else small,
                {"labels": {"case": "treatment_1 harms load by its mde, 0.08 (0.06 "
                                    "beyond the 0.02 margin); primaries null"}}))
    composed = {"experiment": {
        "arms": ["control", "a", "b", "c"], "alpha": 0.025, "sides": 1, "looks": 4,
        "metrics": [{"name": "orders", "kind": "binary", "baseline": 0.10, "mde": 0.02},
                    {"name": "signup", "kind": "binary", "baseline": 0.30, "mde": 0.03},
                    {"name": "load", "role": "guardrail", "kind": "continuous", "sd": 1.0,
                     "mde": 0.1, "better": "lower", "alpha": 0.02},
                    {"name": "refunds", "role": "guardrail", "kind": "continuous",
                     "sd": 2.0, "mde": 0.2, "better": "lower", "alpha": 0.02}]}}
    cdata = [{"name": "orders", "data": {"kind": "binary", "rate": 0.10}},
             {"name": "signup", "data": {"kind": "binary", "rate": 0.30}},
             {"name": "load", "data": {"kind": "normal", "mean": 1.0, "sd": 1.0}},
             {"name": "refunds", "data": {"kind": "normal", "mean": 4.0, "sd": 2.0}}]
    corr = [["orders", "signup", 0.6], ["load", "refunds", 0.5]]
    variants = [("null", "every metric null, metrics correlated", {})]
    if full:
        variants.append(("harm", "arm a harms load and refunds by their mdes; primaries "
                                 "null", {"load": {"a": 0.1}, "refunds": {"a": 0.2}}))
    for tag, text, eff in variants:
        cid = f"experiment-composed-{tag}"
        ms = [dict(m, effects=eff.get(m["name"], {})) for m in cdata]
        out.append((cid, EXPERIMENT_GUARD, composed,
                    {"name": cid, "metrics": ms, "correlation": corr},
                    reps if full else small, {"labels": {"case": text}}))
    return out


_USERS: dict[int, int] = {}


def _bonferroni_users(k: int) -> int:
    """The control's users of the Bonferroni plan for k arms (each arm power 0.9)."""
    if k not in _USERS:
        plan = make_plan(_exp_plan(k, "bonferroni", {"looks": 5}))
        _USERS[k] = int(plan.max_n("y", plan.control))
    return _USERS[k]


def random_cross_cells(reps: int) -> list[Cell]:
    """The random-traffic cross: every data model x efficacy family x K in {2, 5, 10}
    x one and two sides, on the grid's random day-to-day traffic (cv 0.4)."""
    cells = []
    for kind in METRICS:
        for label, fam in FAMILIES:
            for k in (2, 5, 10):
                for sides in (1, 2):
                    cid = f"random-cross-{kind}-{label}-K{k}-s{sides}"
                    cells.append(Cell(cid, "random-traffic cross",
                                      _gs(fam, k, sides, METRICS[kind][0]),
                                      _scenario(cid, METRICS[kind][1], RANDOM_TRAFFIC),
                                      reps, labels={"family": label, "K": k,
                                                    "sides": sides, "data": kind}))
    return cells


def build_grid(grid: str, reps: int = 100_000, random_reps: int | None = None,
               random_cross: bool = False) -> list[Cell]:
    """The cells of the ``reduced`` or ``full`` grid (see the module docstring), and
    with ``random_cross`` the random-traffic cross (:func:`random_cross_cells`)."""
    if grid not in ("reduced", "full"):
        raise ValueError(f"grid: got {grid!r}; allowed are reduced and full")
    full = grid == "full"
    if random_reps is None:
        random_reps = reps
    cells: list[Cell] = []

    def add(cid: str, group: str, plan: dict, sc: dict, n: int, **kw: Any) -> None:
        cells.append(Cell(cid, group, plan, sc, n, **kw))

    # naive baseline against the published repeated-test rates
    for k in ((2, 3, 4, 5, 10, 20, 50) if full else (2, 5, 10)):
        add(f"naive-K{k}", "naive baseline",
            _gs("obrien-fleming-type", k, 2, METRICS["normal"][0]),
            _scenario(f"naive-K{k}", METRICS["normal"][1]), reps,
            naive_reference=NAIVE_REFERENCE[k], labels={"K": k})

    kinds = list(METRICS) if full else ["binary"]
    ks = (2, 5, 10) if full else (5,)
    for kind in kinds:
        for label, fam in FAMILIES:
            for k in ks:
                for sides in (1, 2):
                    add(f"fixed-{kind}-{label}-K{k}-s{sides}", f"fixed traffic, {kind}",
                        _gs(fam, k, sides, METRICS[kind][0]),
                        _scenario(f"{kind}-{label}-K{k}-s{sides}", METRICS[kind][1]), reps,
                        labels={"family": label, "K": k, "sides": sides, "data": kind})
    if not full:
        # OF-type at K = 2, 5, 10 on normal data is in the naive-baseline cells
        for label, fam in FAMILIES[1:2]:
            for k in (2, 10):
                add(f"fixed-binary-{label}-K{k}-s2", "fixed traffic, binary",
                    _gs(fam, k, 2, METRICS["binary"][0]),
                    _scenario(f"binary-{label}-K{k}-s2", METRICS["binary"][1]), reps,
                    labels={"family": label, "K": k, "sides": 2, "data": "binary"})
        for kind in ("lognormal", "counts"):
            metric = REDUCED_LOGNORMAL if kind == "lognormal" else METRICS[kind][0]
            add(f"fixed-{kind}-OF-type-K5-s2", f"fixed traffic, {kind}",
                _gs("obrien-fleming-type", 5, 2, metric),
                _scenario(f"{kind}-OF-type-K5-s2", METRICS[kind][1]), reps,
                labels={"family": "OF-type", "K": 5, "sides": 2, "data": kind})

    # each tail at its level: unequal arms, rare outcomes, the relative scale
    for cell in _tail_cells(full, reps, random_reps):
        add(*cell[:5], **cell[5])

    # ratio, adjusted and robust count metrics; tests against a margin
    for cell in _metric_cells(full, reps, random_reps):
        add(*cell[:5], **cell[5])

    # futility boundaries
    variants = [("non-binding, ignored", False, "ignore"),
                ("non-binding, obeyed", False, "obey"),
                ("binding, obeyed", True, "obey")]
    for vlabel, binding, rule in variants:
        for k in ks if full else (5,):
            for sides in (1, 2) if full else (2,):
                add(f"futility-{vlabel}-K{k}-s{sides}", "futility boundaries",
                    _gs("obrien-fleming-type", k, sides, METRICS["binary"][0],
                        futility="pocock-type", binding=binding),
                    _scenario(f"futility-{vlabel}-K{k}-s{sides}", METRICS["binary"][1],
                              analysis={"futility": rule}), reps,
                    exact=vlabel != "non-binding, obeyed",
                    labels={"family": "OF-type + Pocock-type beta", "K": k, "sides": sides,
                            "futility": vlabel})

    # looks that were not planned
    for label, fam in FAMILIES[: 2 if full else 1]:
        add(f"uneven-{label}", "unplanned looks",
            _gs(fam, 5, 2, METRICS["binary"][0]),
            _scenario(f"uneven-{label}", METRICS["binary"][1],
                      {"mode": "uneven", "fractions": [0.1, 0.25, 0.45, 0.85, 1.05]}), reps,
            labels={"family": label, "K": 5, "sides": 2, "looks": "uneven, over-running"})
        add(f"extra-{label}", "unplanned looks",
            _gs(fam, 5, 2, METRICS["binary"][0]),
            _scenario(f"extra-{label}", METRICS["binary"][1],
                      {"mode": "fixed", "extra_looks": [0.1, 0.3, 0.5, 0.7, 0.9]}), reps,
            labels={"family": label, "K": 5, "sides": 2, "looks": "5 extra"})

    # the mixture SPRT (continuous monitoring approximated by many looks)
    m_looks = 100 if full else 50
    mix_kinds = list(METRICS) if full else ["binary", "normal"]
    for kind in mix_kinds:
        metric = REDUCED_LOGNORMAL if (kind == "lognormal" and not full) else METRICS[kind][0]
        for sides in (1, 2) if full else (2,):
            for mode in ("fixed", "random"):
                if not full and (kind, mode) not in (("binary", "fixed"), ("normal", "random")):
                    continue
                traffic = ({"mode": "fixed", "looks": m_looks} if mode == "fixed"
                           else {**RANDOM_TRAFFIC, "looks": m_looks})
                cap = 6_000 if kind != "lognormal" else 5_000
                add(f"mixture-{kind}-s{sides}-{mode}", "mixture SPRT",
                    {"mixture": {"alpha": _alpha(sides), "sides": sides, "metric": metric,
                                 "max_n_per_arm": cap}},
                    _scenario(f"mixture-{kind}-s{sides}-{mode}", METRICS[kind][1], traffic),
                    reps if full or mode == "fixed" else min(reps, 20_000), exact=False,
                    labels={"data": kind, "sides": sides, "traffic": mode,
                                  "looks": m_looks})

    # stress cases: findings, not gated
    if full:
        stress = [
            ("stress-normal-tiny", _gs("obrien-fleming-type", 5, 2,
                                       {"kind": "continuous", "sd": 1.0, "mde": 1.0}),
             _scenario("normal-tiny", {"kind": "normal", "mean": 0.0, "sd": 1.0}),
             "22 users per arm at most, 5 at the first look"),
            ("stress-binary-rare", _gs("obrien-fleming-type", 5, 1,
                                       {"kind": "binary", "baseline": 0.01, "mde": 0.01}),
             _scenario("binary-rare", {"kind": "binary", "rate": 0.01}),
             "conversion 1%, first look 635 per arm, one-sided"),
            ("stress-revenue-skewed-1to4", _gs("obrien-fleming-type", 5, 1,
                                               {"kind": "continuous", "sd": 46.0, "mde": 5.0,
                                                "allocation": 4.0}),
             _scenario("revenue-skewed", {"kind": "lognormal", "mean": 50.0, "sd": 200.0,
                                          "zero_share": 0.95}, allocation=4.0),
             "95% zeros, amount sd 4x its mean, 1:4 allocation, one-sided"),
            ("stress-revenue-skewed-1to1", _gs("obrien-fleming-type", 5, 1,
                                               {"kind": "continuous", "sd": 46.0, "mde": 5.0}),
             _scenario("revenue-skewed-even", {"kind": "lognormal", "mean": 50.0,
                                               "sd": 200.0, "zero_share": 0.95}),
             "the same revenue with equal arms, one-sided"),
            ("stress-counts-overdispersed", _gs("obrien-fleming-type", 5, 2,
                                                METRICS["counts"][0]),
             _scenario("counts-overdispersed", {"kind": "counts", "rate": 2.0,
                                                "dispersion": 2.0}),
             "negative binomial counts, variance twice the mean"),
            ("stress-traffic-wild", _gs("obrien-fleming-type", 5, 2, METRICS["binary"][0]),
             _scenario("traffic-wild", METRICS["binary"][1],
                       {**RANDOM_TRAFFIC, "cv": 1.5, "final": "scheduled"}),
             "day-to-day cv 1.5, last look on schedule (under/over-running)"),
        ]
        for cid, plan, sc, note in stress:
            add(cid, "stress cases (findings)", plan, sc,
                random_reps if sc["traffic"]["mode"] == "random" else reps, gate=False,
                labels={"case": note})

    # experiments with many arms and several metrics
    for cell in _experiment_cells(full, reps):
        add(*cell[:5], **cell[5])

    # random day-to-day traffic: one boundary computation per replicate, so last
    if full:
        rnd = [(label, fam, 5, 2, "binary") for label, fam in FAMILIES]
        rnd += [(label, fam, k, s, "binary") for label, fam in FAMILIES[:2]
                for k in (2, 5, 10) for s in (1, 2) if (k, s) != (5, 2)]
        rnd += [("OF-type", "obrien-fleming-type", 5, 2, kind)
                for kind in ("normal", "lognormal", "counts")]
    else:
        rnd = [("OF-type", "obrien-fleming-type", 5, 2, "binary")]
    for label, fam, k, sides, kind in rnd:
        add(f"random-{kind}-{label}-K{k}-s{sides}", "random day-to-day traffic",
            _gs(fam, k, sides, METRICS[kind][0]),
            _scenario(f"random-{kind}-{label}-K{k}-s{sides}", METRICS[kind][1],
                      RANDOM_TRAFFIC), random_reps,
            labels={"family": label, "K": k, "sides": sides, "data": kind})
    if random_cross:
        cells += random_cross_cells(random_reps)
    return cells


# ---------------------------------------------------------------------------
# Running
# ---------------------------------------------------------------------------


_PLANS: dict[str, Any] = {}


def make_plan(spec: dict) -> Any:
    key = json.dumps(spec, sort_keys=True, default=lambda o: o.to_dict())
    if key not in _PLANS:
        if "mixture" in spec:
            _PLANS[key] = mixture_plan(**spec["mixture"])
        elif "experiment" in spec:
            _PLANS[key] = experiment_plan(**spec["experiment"])
        else:
            _PLANS[key] = seqtest.design(**spec)
    return _PLANS[key]


@dataclass
class CellResult:
    cell: Cell
    result: SimulationResult | ExperimentSimulationResult | None
    seconds: float
    error: str | None = None


def run_cells(cells: list[Cell], *, seed: int = 0, workers: int = 1,
              budget_seconds: float | None = None, executor: Executor | None = None,
              client: Any = None, log: Any = None, progress: Any = None
              ) -> list[CellResult]:
    """Run the cells; cells not started when the time budget is spent are returned
    unrun.

    The chunks of all cells go to one runner (this process, ``workers`` local
    processes, an executor, or a Dask ``client``), in cell order, so every worker
    stays busy across cells; each cell's result is the same whatever the backend.
    ``progress(done, total)`` follows the replicates of the whole grid; a cell's
    ``seconds`` run from the start of its first chunk to the end of its last (cells
    overlap when several workers run them).
    """
    preps = []
    for cell in cells:
        plan = make_plan(cell.plan)
        sc = None if "experiment" in cell.plan else scenario_from_dict(cell.scenario)
        cell_seed = (zlib.crc32((cell.seed_key or cell.id).encode()) + seed) % (2**32)
        if "experiment" in cell.plan:
            preps.append(prepare_experiment(
                plan, experiment_scenario_from_dict(cell.scenario), cell.reps,
                seed=cell_seed))
            continue
        preps.append(prepare(plan, sc, cell.reps, seed=cell_seed))
    out: list[CellResult | None] = [None] * len(cells)
    began: dict[int, float] = {}
    moved = [0] * len(cells)
    total = sum(p.reps for p in preps)
    start = time.perf_counter()

    def may_start(b: int) -> bool:
        if budget_seconds is not None and time.perf_counter() - start > budget_seconds:
            return False
        began[b] = time.perf_counter()
        return True

    def finished(b: int, chunks: list) -> None:
        res = preps[b].result(chunks)
        dt = time.perf_counter() - began[b]
        out[b] = CellResult(cells[b], res, dt)
        if log is not None:
            done = sum(r is not None for r in out)
            log(f"[{done}/{len(cells)}] {cells[b].id}: {res.rate:.4f} "
                f"[{res.ci_lower:.4f}, {res.ci_upper:.4f}] alpha {res.alpha:g} "
                f"({dt:.1f} s)")

    def moved_to(b: int, done: int) -> None:
        moved[b] = done
        if progress is not None:
            progress(sum(moved), total)

    runner = Runner(workers=workers, executor=executor, client=client)
    runner.run([p.batch for p in preps], progress=moved_to, done=finished,
               start=may_start)
    return [r if r is not None else CellResult(c, None, 0.0, "not run: time budget spent")
            for c, r in zip(cells, out, strict=True)]


@dataclass
class Assessment:
    """Verdicts of a run under the family-wise rule."""

    gated: int
    confidence: float
    tests: int
    leaks: list[str]
    watch: list[str]
    naive_failures: list[str]
    rows: list[dict]


def _experiment_row(res: ExperimentSimulationResult) -> dict:
    """The numbers of an experiment cell the report shows."""
    def rate(x: Any) -> dict:
        return {"rate": x.rate, "ci95": [x.ci_lower, x.ci_upper], "planned": x.planned}

    return {"true_nulls": res.true_nulls, "any_rejection": rate(res.any_rejection),
            "any_win": rate(res.any_win), "false_win": rate(res.false_win),
            "false_harm": rate(res.false_harm), "any_harm": rate(res.any_harm),
            "hypotheses": {h: rate(x) for h, x in res.hypotheses.items()},
            "guardrails": {g: rate(x) for g, x in res.guardrails.items()},
            "harm_stop": {a: counts.get("stop_harm", 0) / res.reps
                          for a, counts in res.outcomes.items()},
            "method": res.method}


def assess(results: list[CellResult], family_level: float = 0.05) -> Assessment:
    run = [r for r in results if r.result is not None]
    gated = [r for r in run if r.cell.gate and r.result.null]
    # every tail a plan promises an error for is one test: the upper tail of a
    # one-sided plan, both tails of a two-sided one (each at alpha / 2)
    m = max(sum(len(r.result.tails) for r in gated), 1)
    conf = 1.0 - 2.0 * family_level / m
    leaks, watch, naive_fail, rows = [], [], [], []
    for r in run:
        res = r.result
        lo_fw, hi_fw = clopper_pearson(res.rejections, res.reps, conf)
        tails = {}
        for t in res.tails:
            t_lo, t_hi = clopper_pearson(t.rejections, res.reps, conf)
            tails[t.direction] = {"rate": t.rate, "alpha": t.alpha,
                                  "ci95": [t.ci_lower, t.ci_upper],
                                  "ci_family": [t_lo, t_hi], "leak": t_lo > t.alpha}
        tail_leak = any(v["leak"] for v in tails.values())
        leak = bool(r.cell.gate and res.null and tail_leak)
        w = bool(res.null and res.leaks)
        if leak:
            leaks.append(r.cell.id)
        elif w and r.cell.gate:
            watch.append(r.cell.id)
        nref = r.cell.naive_reference
        naive_ok = None
        if nref is not None and res.naive is not None:
            # the reference is rounded to 3 decimals: accept overlap of the 99.9%
            # interval with [ref - 0.0005, ref + 0.0005]
            nlo, nhi = clopper_pearson(res.naive.rejections, res.reps, 0.999)
            naive_ok = bool(nlo <= nref + 0.0005 and nhi >= nref - 0.0005)
            if not naive_ok:
                naive_fail.append(r.cell.id)
        rows.append({"id": r.cell.id, "group": r.cell.group, "labels": r.cell.labels,
                     "gate": r.cell.gate, "exact": r.cell.exact, "reps": res.reps,
                     "alpha": res.alpha,
                     "rate": res.rate, "ci95": [res.ci_lower, res.ci_upper],
                     "ci_family": [lo_fw, hi_fw], "leak": leak, "watch": w,
                     "tails": tails,
                     "naive_rate": None if res.naive is None else res.naive.rate,
                     "naive_reference": nref, "naive_ok": naive_ok,
                     "expected_fraction": res.expected_total / res.max_total,
                     "boundary_calls": res.boundary_calls, "seconds": r.seconds,
                     "verdict": res.verdict})
        if isinstance(res, ExperimentSimulationResult):
            rows[-1]["experiment"] = _experiment_row(res)
    return Assessment(len(gated), conf, m, leaks, watch, naive_fail, rows)


# ---------------------------------------------------------------------------
# Report
# ---------------------------------------------------------------------------


def _forest(rows: list[dict], title: str, path: Path) -> None:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    n = len(rows)
    fig = Figure(figsize=(7.5, 1.2 + 0.17 * n), dpi=80)
    FigureCanvasAgg(fig)
    ax = fig.subplots()
    y = np.arange(n)[::-1]
    ratio = np.array([r["rate"] / r["alpha"] for r in rows])
    lo = np.array([r["ci95"][0] / r["alpha"] for r in rows])
    hi = np.array([r["ci95"][1] / r["alpha"] for r in rows])
    colour = ["tab:red" if r["leak"] or (r["watch"] and not r["gate"])
              else ("tab:orange" if r["watch"] else "tab:blue") for r in rows]
    ax.hlines(y, lo, hi, colors=colour, lw=1.5)
    ax.scatter(ratio, y, c=colour, s=12, zorder=3)
    ax.axvline(1.0, color="black", lw=1, ls="--")
    ax.set_yticks(y, [_short(r) for r in rows], fontsize=6)
    ax.set_xlabel("type I error / alpha  (95% Clopper-Pearson)")
    ax.set_title(title, fontsize=10)
    ax.grid(axis="x", alpha=0.3)
    fig.tight_layout()
    fig.savefig(path)


def _short(row: dict) -> str:
    lab = row["labels"]
    parts = [str(lab[k]) for k in ("family", "data", "futility", "looks", "traffic", "case")
             if k in lab]
    if "K" in lab:
        parts.append(f"K={lab['K']}")
    if "sides" in lab:
        parts.append(f"{lab['sides']}-sided")
    return " ".join(parts) if parts else row["id"]


def _naive_plot(rows: list[dict], path: Path) -> None:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(6.0, 3.6), dpi=90)
    FigureCanvasAgg(fig)
    ax = fig.subplots()
    ks = np.array([r["labels"]["K"] for r in rows])
    naive = np.array([r["naive_rate"] for r in rows])
    ref = np.array([r["naive_reference"] for r in rows])
    plan = np.array([r["rate"] for r in rows])
    ax.plot(ks, ref, "s", mfc="none", color="black", ms=9,
            label="published repeated-test rate")
    ax.plot(ks, naive, "o-", color="tab:red", label="naive: |z| > 1.96 at every look")
    ax.plot(ks, plan, "o-", color="tab:blue", label="O'Brien-Fleming-type plan")
    ax.axhline(0.05, color="grey", ls="--", lw=1)
    ax.set_xscale("log")
    ax.set_xticks(ks, [str(k) for k in ks])
    ax.set_xticks([], minor=True)
    ax.set_xlabel("number of equally spaced looks K")
    ax.set_ylabel("type I error (two-sided)")
    ax.set_title("Peeking without a plan, and with one", fontsize=10)
    ax.legend(fontsize=8, frameon=False)
    ax.grid(alpha=0.3)
    fig.tight_layout()
    fig.savefig(path)


def _standardised_plot(rows: list[dict], path: Path) -> None:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from scipy import stats

    z = np.array([(r["rate"] - r["alpha"]) / math.sqrt(r["alpha"] * (1 - r["alpha"])
                                                       / r["reps"]) for r in rows])
    fig = Figure(figsize=(6.0, 3.4), dpi=90)
    FigureCanvasAgg(fig)
    ax = fig.subplots()
    outside = int(np.sum(np.abs(z) > 5))
    ax.hist(np.clip(z, -5, 5), bins=np.linspace(-5, 5, 41), density=True,
            color="tab:blue", alpha=0.7,
            label=f"{len(z)} cells whose design spends exactly alpha"
                  + (f" ({outside} beyond +-5, drawn at the edge)" if outside else ""))
    x = np.linspace(-4.5, 4.5, 200)
    ax.plot(x, stats.norm.pdf(x), color="black", lw=1, label="N(0, 1): every design exact")
    ax.set_xlabel("(type I error - alpha) / Monte Carlo s.e. at alpha")
    ax.set_ylabel("density")
    ax.set_title("Exact designs at a glance (right of 0: above alpha)", fontsize=10)
    ax.set_xlim(-5.2, 5.2)
    ax.set_ylim(0, max(0.6, ax.get_ylim()[1] * 1.3))
    ax.legend(fontsize=8, frameon=False, loc="upper left")
    fig.tight_layout()
    fig.savefig(path)


def _slug(text: str) -> str:
    return "".join(c if c.isalnum() else "-" for c in text.lower()).strip("-").replace(
        "--", "-")


BEFORE = Path(__file__).resolve().parent / "report" / "per-tail-before.json"


def _before_key(text: str) -> tuple[str, int, str, str]:
    """(allocation, sides, scale, traffic) of a cell of the first release's record."""
    alloc = "1:1" if "equal arms" in text else text.split("allocation ")[1].split(",")[0]
    sides = 1 if "one-sided" in text else 2
    scale = "relative" if "relative" in text else "difference"
    traffic = "random" if "random traffic" in text else "fixed"
    return alloc, sides, scale, traffic


def _tail_section(grows: list[dict]) -> list[str]:
    """The per-tail table, with the first release's rates beside today's."""
    before: dict[tuple[str, int, str, str], dict] = {}
    if BEFORE.exists():
        for c in json.loads(BEFORE.read_text())["cells"]:
            before[_before_key(c["cell"])] = c
    lines = [f"## {TAIL_GROUP}", "",
             "A plan promises alpha for the upper tail of a one-sided test and alpha/2 for "
             "each tail of a two-sided one. Binary metrics with unequal arms (control to "
             "treatment 1:4, 1:2, 4:1), rare outcomes and the relative scale, 5-look "
             "O'Brien-Fleming-type plans; 100,000 experiments a cell. *Before*: the "
             "first release (unpooled Wald statistic; the simulator's z on the ratio for "
             "the relative scale), from `report/per-tail-before.json`; *now*: the "
             "skewness-corrected score statistic, with its 95% Clopper-Pearson interval.",
             "",
             "| cell | per tail | upper before | upper now (95% CI) | lower before | "
             "lower now (95% CI) | verdict |",
             "|---|---|---|---|---|---|---|"]
    for r in grows:
        lab = r["labels"]
        b = before.get((lab["allocation"], lab["sides"], lab["scale"], lab["traffic"]))
        if lab.get("baseline") not in (0.02, 0.045):
            b = None
        tails = r.get("tails", {})
        cells = []
        for d in ("upper", "lower"):
            t = tails.get(d)
            was = "-" if b is None or (d == "lower" and lab["sides"] == 1) \
                else f"{b[d]['rate']:.4f}"
            now = "-" if t is None else (f"{t['rate']:.4f} ({t['ci95'][0]:.4f}-"
                                          f"{t['ci95'][1]:.4f})")
            cells += [was, now]
        alpha_t = r["alpha"] / lab["sides"]
        verdict = "**LEAKS**" if r["leak"] else ("watch" if r["watch"] else "holds")
        name = (f"{lab['baseline']:g} {lab['scale']} {lab['allocation']} "
                f"{'one' if lab['sides'] == 1 else 'two'}-sided {lab['traffic']}")
        lines.append(f"| {name} | {alpha_t:g} | {cells[0]} | {cells[1]} | {cells[2]} | "
                     f"{cells[3]} | {verdict} |")
    return [*lines, ""]


def _ci(x: dict) -> str:
    return f"{x['rate']:.4f} ({x['ci95'][0]:.4f}-{x['ci95'][1]:.4f})"


def _experiment_sections(groups: dict[str, list[dict]], out: Path) -> list[str]:
    """The report's sections on experiments (many arms, several metrics)."""
    lines: list[str] = []
    fw = groups.get(EXPERIMENT_FWER, [])
    if fw:
        png = f"{_slug(EXPERIMENT_FWER)}.png"
        _forest(fw, EXPERIMENT_FWER, out / png)
        lines += [f"## {EXPERIMENT_FWER}", "",
                  "Experiment plans (one-sided alpha 0.025, O'Brien-Fleming-type spending, "
                  "5 looks, normal data): the family-wise error is the share of "
                  "experiments rejecting at least one true null hypothesis (all arms, all "
                  "looks). Looks: planned equal, planned unequal (0.15, 0.4, 0.6, 0.8, 1), "
                  "uneven traffic running over (0.1, 0.25, 0.45, 0.85, 1.05 of the "
                  "maximum), and five unplanned extra looks (0.1, 0.3, 0.5, 0.7, 0.9). "
                  "Gated by the grid's rule (one tail, at alpha).", "",
                  f"![{EXPERIMENT_FWER}]({png})", "",
                  "| cell | k | method | looks | configuration | reps | family-wise error "
                  "(95% CI) | verdict |", "|---|---|---|---|---|---|---|---|"]
        for r in fw:
            lab = r["labels"]
            flag = "**LEAKS**" if r["leak"] else ("watch" if r["watch"] else "holds")
            lines.append(f"| {r['id']} | {lab['k']} | {lab['method']} | {lab['looks']} | "
                         f"{lab['configuration']} | {r['reps']:,} | {r['rate']:.4f} "
                         f"({r['ci95'][0]:.4f}-{r['ci95'][1]:.4f}) | {flag} |")
        lines.append("")
    pw = groups.get(EXPERIMENT_POWER, [])
    if pw:
        lines += [f"## {EXPERIMENT_POWER}", "",
                  "Every method at the users per arm of the Bonferroni plan (each arm "
                  "powered 0.9 at the mde alone), the arms better by the mde (all of "
                  "them, or one). *Bonferroni*: weighted Bonferroni without passing alpha "
                  "on; *graphical*: alpha passed on (Holm-type); *Dunnett*: common "
                  "boundaries from the arms' correlation. Power of the first arm, and of "
                  "at least one arm; the gain is Dunnett's over Bonferroni's, on the same "
                  "simulated data (paired), +- the half-width of a 95% interval as if the "
                  "two were independent (1.96 sqrt(p1 q1 / n + p2 q2 / n); pairing only "
                  "makes the true one narrower).", "",
                  "| k | users per arm | arms better | method | family-wise error bound | "
                  "power of one arm (95% CI) | power of at least one (95% CI) | expected "
                  "users / maximum |", "|---|---|---|---|---|---|---|---|"]
        by: dict[tuple, dict[str, dict]] = {}
        for r in pw:
            lab = r["labels"]
            by.setdefault((lab["k"], lab["better"], lab["users"]), {})[lab["method"]] = r
        for (k, better, users), ms in by.items():
            for method, r in ms.items():
                e = r["experiment"]
                first = e["hypotheses"]["treatment_1/y"]
                lines.append(f"| {k} | {users:,} | {better} | {method} | 0.025 | "
                             f"{_ci(first)} | {_ci(e['any_rejection'])} | "
                             f"{r['expected_fraction']:.3f} |")
            if "dunnett" in ms and "bonferroni" in ms:
                n = ms["dunnett"]["reps"]
                d = ms["dunnett"]["experiment"]
                b = ms["bonferroni"]["experiment"]
                gains = []
                for pd, pb in ((d["hypotheses"]["treatment_1/y"]["rate"],
                                b["hypotheses"]["treatment_1/y"]["rate"]),
                               (d["any_rejection"]["rate"], b["any_rejection"]["rate"])):
                    half = 1.96 * math.sqrt((pd * (1 - pd) + pb * (1 - pb)) / n)
                    gains.append(f"{pd - pb:+.4f} +- {half:.4f}")
                lines.append(f"| {k} | {users:,} | {better} | **gain, Dunnett over "
                             f"Bonferroni** | | {gains[0]} | {gains[1]} | |")
        lines.append("")
    gd = groups.get(EXPERIMENT_GUARD, [])
    if gd:
        lines += [f"## {EXPERIMENT_GUARD}", "",
                  "A guardrail's harm test against its planned power, and the composed "
                  "decision: an arm wins only with no guardrail crossed; a *false win* is "
                  "an arm declared better on a primary whose null is true (the plan bounds "
                  "it by alpha), a *false harm stop* an arm stopped by a guardrail it does "
                  "not harm beyond its margin (bounded by k times the sum of the "
                  "guardrails' alphas, Bonferroni). Metrics correlated as the cell says. "
                  "A guardrail's planned power assumes its arm runs on: when another "
                  "guardrail (or a primary) stops the arm first, this one's own crossing "
                  "rate is lower, so the arm's stop for harm by any guardrail is shown "
                  "too.", ""]
        for r in gd:
            e = r["experiment"]
            lines += [f"### {r['id']}", "", f"{r['labels'].get('case', '')}; "
                      f"{r['reps']:,} experiments.", "",
                      "| quantity | simulated (95% CI) | plan |", "|---|---|---|"]
            if e["true_nulls"]:
                lines.append(f"| family-wise error over {len(e['true_nulls'])} true nulls | "
                             f"{r['rate']:.4f} ({r['ci95'][0]:.4f}-{r['ci95'][1]:.4f}) | "
                             f"at most {r['alpha']:g} |")
            fwin = e["false_win"]
            lines.append(f"| false win | {_ci(fwin)} | at most {fwin['planned']:g} |")
            fh = e["false_harm"]
            lines.append(f"| false harm stop (some arm) | {_ci(fh)} | at most "
                         f"{fh['planned']:g} |")
            for g, x in e["guardrails"].items():
                what = "planned power" if x["planned"] is not None and x["planned"] > 0.1 \
                    else "its alpha"
                plan_ = "-" if x["planned"] is None else f"{x['planned']:.4f} ({what})"
                lines.append(f"| harm stop {g} | {_ci(x)} | {plan_} |")
            for arm_, share in e.get("harm_stop", {}).items():
                if share > 0.1:
                    lines.append(f"| arm {arm_} stopped for harm (any guardrail) | "
                                 f"{share:.4f} | - |")
            lines.append("")
    return lines


def write_report(a: Assessment, out: Path, *, grid: str, seed: int, workers: int,
                 seconds: float, not_run: list[str]) -> Path:
    """Write ``report.md``, ``results.json`` and the PNGs to ``out``."""
    out.mkdir(parents=True, exist_ok=True)
    rows = a.rows
    groups: dict[str, list[dict]] = {}
    for r in rows:
        groups.setdefault(r["group"], []).append(r)
    naive_text = ("all within Monte Carlo error" if not a.naive_failures
                  else "MISMATCH: " + ", ".join(a.naive_failures))
    lines = [
        f"# Validation report ({grid} grid)",
        "",
        "Generated by `simulations/validate.py`; every number below can be reproduced "
        f"with `--grid {grid} --seed {seed}` (cell seeds are the CRC-32 of the cell id "
        "plus the seed). Results do not depend on the number of workers.",
        "",
        f"- cells run: {len(rows)} of {len(rows) + len(not_run)}"
        + (f" ({len(not_run)} not run: time budget)" if not_run else ""),
        f"- gated cells (null scenarios of shipped designs): {a.gated}",
        f"- family-wise rule: a gated cell leaks when the lower end of the "
        f"Clopper-Pearson interval of one of its tails (alpha for a one-sided plan, "
        f"alpha/2 for each tail of a two-sided one) at confidence {a.confidence:.6f} "
        f"(= 1 - 2 x 0.05 / {a.tests} gated tails, Bonferroni) is above that tail's "
        "alpha",
        f"- **leaking gated cells: {len(a.leaks)}**"
        + (": " + ", ".join(a.leaks) if a.leaks else ""),
        f"- gated cells with a plain 95% lower end above its alpha (watch; about "
        f"{0.025 * a.tests:.1f} expected by chance if every design were exact): "
        f"{len(a.watch)}" + (": " + ", ".join(a.watch) if a.watch else ""),
        f"- naive baseline against the published repeated-test rates: "
        f"{naive_text}",
        f"- wall time {seconds / 60:.1f} min on {workers} worker(s)",
        "",
        "## What is claimed, and its limits",
        "",
        "The z statistics use estimated variances (for proportions and rates the "
        "skewness-corrected score statistic with its variance restricted to the null; "
        "Welch's statistic for continuous data; the delta method for ratio metrics; "
        "the regression-adjusted mean for adjusted ones; the counts' own variance for "
        "count metrics) and discrete data, so a plan's type I error is approximately "
        "alpha, "
        "exactly so only as the samples grow. The rule above detects an excess over "
        "alpha of about 3 Monte Carlo standard errors (0.0020 at alpha 0.05 and "
        "100,000 replicates, 0.0015 at alpha 0.025); a smaller excess passes. The "
        "Bonferroni correction keeps the chance of flagging any exact design at 5% "
        "but makes each cell's test less sensitive; the plain 95% intervals are shown "
        "as well. Stress cells are outside what a plan's normal approximation "
        "promises and are reported as findings, not gated.",
        "",
        "Monte Carlo bounds: the rejection count of a cell is Binomial(n, p); its exact "
        "interval is the Clopper-Pearson interval, computed by "
        "`scipy.stats.binomtest(k, n).proportion_ci(method=\"exact\")`.",
        "",
        "![all gated cells](standardised.png)",
        "",
    ]
    _standardised_plot([r for r in rows if r["gate"] and r["exact"]] or rows,
                       out / "standardised.png")
    naive_rows = groups.get("naive baseline", [])
    if naive_rows:
        _naive_plot(naive_rows, out / "naive.png")
        lines += ["## The naive baseline", "",
                  "Repeated two-sided tests at nominal 0.05 on normal data, equally spaced "
                  "looks, against Armitage, McPherson and Rowe (1969) / Jennison and "
                  "Turnbull (2000) Table 1.1. Accepted when the 99.9% Clopper-Pearson "
                  "interval overlaps the published value +- 0.0005 (its rounding).", "",
                  "| K | naive rate | published | plan (OF-type) | within MC error |",
                  "|---|---|---|---|---|"]
        for r in naive_rows:
            lines.append(f"| {r['labels']['K']} | {r['naive_rate']:.4f} | "
                         f"{r['naive_reference']:.3f} | {r['rate']:.4f} | "
                         f"{'yes' if r['naive_ok'] else 'NO'} |")
        lines += ["", "![naive baseline](naive.png)", ""]
    if TAIL_GROUP in groups:
        lines += _tail_section(groups[TAIL_GROUP])
    lines += _experiment_sections(groups, out)
    for g, grows in groups.items():
        if g == "naive baseline" or g in EXPERIMENT_GROUPS:
            continue
        png = f"{_slug(g)}.png"
        _forest(grows, g, out / png)
        if g == TAIL_GROUP:  # its table is the per-tail one above
            lines += [f"![{g}]({png})", ""]
            continue
        lines += [f"## {g}", "", f"![{g}]({png})", "",
                  "| cell | reps | alpha | type I error | 95% CI | naive | E[N]/N_max | "
                  "verdict |", "|---|---|---|---|---|---|---|---|"]
        for r in grows:
            flag = ("**LEAKS**" if r["leak"] else ("leaks (finding)" if (not r["gate"])
                                                   and r["watch"] else
                                                   ("watch" if r["watch"] else "holds")))
            nv = "-" if r["naive_rate"] is None else f"{r['naive_rate']:.4f}"
            lines.append(f"| {_short(r)} | {r['reps']:,} | {r['alpha']:g} | "
                         f"{r['rate']:.4f} | {r['ci95'][0]:.4f} - {r['ci95'][1]:.4f} | "
                         f"{nv} | {r['expected_fraction']:.3f} | {flag} |")
        lines.append("")
    if not_run:
        lines += ["## Not run", "", "Cells left when the time budget was spent: "
                  + ", ".join(not_run), ""]
    path = out / "report.md"
    path.write_text("\n".join(lines) + "\n")
    doc = {"grid": grid, "seed": seed, "workers": workers, "seconds": seconds,
           "gated": a.gated, "confidence": a.confidence, "tests": a.tests,
           "leaks": a.leaks,
           "watch": a.watch, "naive_failures": a.naive_failures, "not_run": not_run,
           "cells": rows}
    (out / "results.json").write_text(json.dumps(doc, indent=1, allow_nan=False) + "\n")
    return path


def run(grid: str, out: Path | str, *, reps: int = 100_000, random_reps: int | None = None,
        seed: int = 0, workers: int = 1, budget_seconds: float | None = None,
        log: Any = None, client: Any = None, progress: Any = None,
        only: str | None = None, random_cross: bool = False) -> Assessment:
    """Build, run, assess and report a grid; returns the assessment. With a Dask
    ``client`` the chunks run on its cluster (``workers`` is then ignored); ``only``
    keeps the cells whose id starts with it; ``random_cross`` adds the random-traffic
    cross."""
    cells = build_grid(grid, reps, random_reps, random_cross)
    if only is not None:
        cells = [c for c in cells if c.id.startswith(only)]
    t0 = time.perf_counter()
    results = run_cells(cells, seed=seed, workers=workers, budget_seconds=budget_seconds,
                        log=log, client=client, progress=progress)
    a = assess(results)
    if client is not None:
        workers = Runner(client=client).slots
    write_report(a, Path(out), grid=grid, seed=seed, workers=workers,
                 seconds=time.perf_counter() - t0,
                 not_run=[r.cell.id for r in results if r.result is None])
    return a


def render(out: Path | str) -> Assessment:
    """Write the report again from the ``results.json`` of an earlier run in ``out``."""
    doc = json.loads((Path(out) / "results.json").read_text())
    a = Assessment(doc["gated"], doc["confidence"], doc.get("tests", doc["gated"]),
                   doc["leaks"], doc["watch"],
                   doc["naive_failures"], doc["cells"])
    write_report(a, Path(out), grid=doc["grid"], seed=doc["seed"], workers=doc["workers"],
                 seconds=doc["seconds"], not_run=doc["not_run"])
    return a


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description="Run the validation grid and write a report.")
    p.add_argument("--grid", choices=("reduced", "full"), default="reduced")
    p.add_argument("--out", required=True, help="folder for report.md and the PNGs")
    p.add_argument("--reps", type=int, default=100_000, help="replicates per cell (100000)")
    p.add_argument("--random-reps", type=int, default=None, dest="random_reps",
                   help="replicates per random-traffic group-sequential cell (full: "
                        "--reps; reduced: 1000)")
    p.add_argument("--seed", type=int, default=0)
    p.add_argument("--workers", type=int, default=os.cpu_count() or 1,
                   help="local processes (all cores); with --scheduler local, the size of "
                        "the local cluster")
    p.add_argument("--scheduler", default=None, metavar="ADDRESS",
                   help="run the chunks on the Dask cluster whose scheduler is at ADDRESS "
                        "(tcp://host:8786), or 'local' to start a local cluster of "
                        "--workers processes (needs the dask extra); the numbers do not "
                        "depend on it")
    p.add_argument("--no-progress", action="store_true", dest="no_progress",
                   help="no progress bar on stderr")
    p.add_argument("--budget-minutes", type=float, default=None, dest="budget",
                   help="stop starting new cells after this many minutes")
    p.add_argument("--render-only", action="store_true", dest="render_only",
                   help="write the report again from OUT/results.json, simulating nothing")
    p.add_argument("--cells", default=None, metavar="PREFIX",
                   help="run only the cells whose id starts with PREFIX (e.g. "
                        "experiment-)")
    p.add_argument("--random-cross", action="store_true", dest="random_cross",
                   help="add the random-traffic cross: every data model x efficacy "
                        "family x K = 2, 5, 10 x both sides on random day-to-day traffic "
                        "(240 cells; ids random-cross-...)")
    args = p.parse_args(argv)
    if args.render_only:
        a = render(args.out)
        print(f"{len(a.leaks)} leaking gated cell(s) of {a.gated}; report in "
              f"{Path(args.out) / 'report.md'}")
        return 1 if a.leaks or a.naive_failures else 0
    if args.reps < 1 or (args.random_reps is not None and args.random_reps < 1):
        print("validate: error: --reps and --random-reps must be >= 1", file=sys.stderr)
        return 2

    bar: Any = None

    def log(msg: str) -> None:
        if bar is not None:
            bar.write(msg, file=sys.stderr)
        else:
            print(msg, file=sys.stderr, flush=True)

    def progress(done: int, total: int) -> None:
        nonlocal bar
        if args.no_progress:
            return
        if bar is None:
            from tqdm import tqdm
            bar = tqdm(total=total, unit="exp", unit_scale=True, file=sys.stderr,
                       delay=1.0, mininterval=0.5, desc="grid", leave=False)
        bar.update(done - bar.n)

    budget = None if args.budget is None else args.budget * 60.0
    try:
        with contextlib.ExitStack() as stack:
            client = None
            if args.scheduler is not None:
                try:
                    client = stack.enter_context(dask_client(args.scheduler,
                                                             workers=max(1, args.workers)))
                except ValueError as exc:
                    print(f"validate: error: --{exc}", file=sys.stderr)
                    return 2
            a = run(args.grid, args.out, reps=args.reps, random_reps=args.random_reps,
                    seed=args.seed, workers=max(1, args.workers), budget_seconds=budget,
                    log=log, client=client, progress=progress, only=args.cells,
                    random_cross=args.random_cross)
    finally:
        if bar is not None:
            bar.close()
    print(f"{len(a.leaks)} leaking gated cell(s) of {a.gated}; report in "
          f"{Path(args.out) / 'report.md'}")
    return 1 if a.leaks or a.naive_failures else 0


if __name__ == "__main__":
    sys.exit(main())
