"""The mixture sequential probability ratio test (public module).

Plans come from :func:`mixture_plan` (:mod:`seqtest.planning.mixture`); the formulas
(always-valid p-values, confidence sequences, the rejection boundary) are in
:mod:`seqtest.core.normal_mixture`.
"""

from seqtest.core.normal_mixture import (
    MixtureResult,
    always_valid,
    half_width,
    optimal_variance_ratio,
)
from seqtest.core.vocabulary import DECISIONS
from seqtest.monitoring.rules import always_valid_effect
from seqtest.planning.mixture import PLAN_KIND, MixturePlan, mixture_plan

__all__ = ["DECISIONS", "MixturePlan", "MixtureResult", "PLAN_KIND", "always_valid",
           "always_valid_effect", "half_width", "mixture_plan", "optimal_variance_ratio"]
