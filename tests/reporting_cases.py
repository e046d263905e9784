"""Analyses of every kind of decision, for the tests of what results look like.

Invented data (demo only): each case builds looks whose z statistics put the analysis
where the case's name says, under group-sequential plans (two- and one-sided, binding
and non-binding futility, difference and relative scales) and mixture plans. The tests
read the expected numbers from the analysis itself, never from here.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import seqtest

N_MAX = 10_000  # continuous cases: total over both arms; look k has 1000 k per arm


def continuous_looks(zs: list[float], sd: float = 1.0, base: float = 10.0) -> list[dict]:
    """Per-arm (n, mean, sd) looks with 1000 k per arm whose Welch z is exactly ``zs``."""
    out = []
    for k, z in enumerate(zs, start=1):
        n = 1000 * k
        d = z * math.sqrt(2.0 * sd * sd / n)
        out.append({"control": {"n": n, "mean": base, "sd": sd},
                    "treatment": {"n": n, "mean": base + d, "sd": sd}})
    return out


def binary_look(n: int, p_control: float, p_treatment: float,
                n_treatment: int | None = None) -> dict:
    nt = n if n_treatment is None else n_treatment
    return {"control": {"n": n, "successes": round(n * p_control)},
            "treatment": {"n": nt, "successes": round(nt * p_treatment)}}


@dataclass
class Case:
    plan: Any
    looks: list
    options: dict

    def analyze(self) -> Any:
        return seqtest.analyze(self.plan, self.looks, **self.options)


def _two_sided() -> Any:
    return seqtest.design(looks=5, futility="obrien-fleming-type")


def _relative_one_sided() -> Any:
    return seqtest.design(looks=4, sides=1, alpha=0.025,
                          metric={"kind": "binary", "baseline": 0.1, "mde": 0.1,
                                  "relative": True, "scale": "relative"})


def _mixture() -> Any:
    return seqtest.mixture_plan(metric={"kind": "binary", "baseline": 0.08, "mde": 0.012},
                                max_n_per_arm=20_000)


def cases() -> dict[str, Case]:
    """Name -> case; the name says the decision the looks lead to."""
    cont = {"metric": "continuous", "max_n": N_MAX}
    rel = _relative_one_sided()
    n_rel = rel.sample_size().n_control
    return {
        "continue": Case(_two_sided(), continuous_looks([1.0, 1.2]),
                         {**cont, "daily_traffic": 800.0}),
        "stop_efficacy_treatment": Case(_two_sided(), continuous_looks([1.5, 3.7]), cont),
        "stop_efficacy_control": Case(_two_sided(), continuous_looks([-1.0, -3.6]), cont),
        "stop_futility_non_binding": Case(_two_sided(), continuous_looks([0.1, -0.05, 0.02]),
                                          cont),
        "stop_futility_binding": Case(seqtest.design(looks=5, futility="obrien-fleming-type",
                                                     binding=True),
                                      continuous_looks([0.1, -0.05]), cont),
        "complete_not_significant": Case(seqtest.design(looks=5),
                                         continuous_looks([0.5, 0.8, 0.3, 0.9, 1.1]), cont),
        "relative_one_sided_stop": Case(rel, [binary_look(n_rel // 4, 0.1, 0.1),
                                              binary_look(n_rel // 2, 0.1, 0.116)], {}),
        "relative_one_sided_continue": Case(rel, [binary_look(n_rel // 4, 0.1, 0.103)],
                                            {"daily_traffic": 2000.0}),
        "binary_difference_stop": Case(
            seqtest.design(looks=5, futility="obrien-fleming-type",
                           metric={"kind": "binary", "baseline": 0.08, "mde": 0.012}),
            [binary_look(2531, 198 / 2531, 242 / 2506, 2506),
             binary_look(5186, 424 / 5186, 510 / 5157, 5157),
             binary_look(7513, 612 / 7513, 726 / 7512, 7512)], {}),
        "mixture_continue": Case(_mixture(), [binary_look(2000, 0.08, 0.085)], {}),
        "mixture_stop": Case(_mixture(), [binary_look(2000, 0.08, 0.085),
                                          binary_look(8000, 0.08, 0.095)], {}),
        "mixture_complete": Case(_mixture(), [binary_look(2000, 0.08, 0.081),
                                              binary_look(20_000, 0.08, 0.081)], {}),
        "sample_ratio_mismatch": Case(
            _two_sided(), [{"control": {"n": 1000, "mean": 10.0, "sd": 1.0},
                            "treatment": {"n": 1200, "mean": 10.05, "sd": 1.0}}], cont),
        "small_sample": Case(seqtest.design(looks=3), [binary_look(40, 0.05, 0.1)],
                             {"metric": "binary", "max_n": 2000}),
        "rate_past_the_last_interim": Case(
            seqtest.design(looks=3, futility="pocock-type",
                           metric={"kind": "rate", "baseline": 0.5, "mde": 0.1}),
            [{"control": {"exposure": 1000, "events": 500},
              "treatment": {"exposure": 1000, "events": 560}}], {"daily_traffic": 300.0}),
    }


EXPECTED_DECISION = {
    "continue": "continue",
    "stop_efficacy_treatment": "stop_efficacy",
    "stop_efficacy_control": "stop_efficacy",
    "stop_futility_non_binding": "stop_futility",
    "stop_futility_binding": "stop_futility",
    "complete_not_significant": "complete_not_significant",
    "relative_one_sided_stop": "stop_efficacy",
    "relative_one_sided_continue": "continue",
    "binary_difference_stop": "stop_efficacy",
    "mixture_continue": "continue",
    "mixture_stop": "stop_efficacy",
    "mixture_complete": "complete_not_significant",
    "sample_ratio_mismatch": "continue",
    "small_sample": "continue",
    "rate_past_the_last_interim": "continue",
}


#: The cases, built once per import (a module-level constant for parametrized tests).
CASES_BY_NAME = cases()
