"""The scale a test runs on, and the scale its results are reported on.

An effect is reported on the ``"difference"`` scale (treatment minus control) or the
``"relative"`` scale (``r = treatment / control - 1``). The test runs on one of three
*test scales* (:func:`test_scale_of`):

- ``"difference"``: the difference itself;
- ``"relative"``: the ratio itself, for binary and rate metrics, whose score statistic
  restricted to the null is exact on the ratio (:mod:`seqtest.core.score`: the
  standard error is restricted to the null, so it does not shrink with the estimate);
- ``"log_ratio"``: ``log(1 + r)`` with the delta-method standard error ``se / (1 + r)``,
  for continuous metrics and for the mixture test on the relative scale. The ratio's
  own delta-method standard error shrinks with the estimate, which makes a z statistic
  on the ratio lopsided at small counts; on the log ratio it does not. Intervals found
  there are reported back as ``exp(.) - 1``, which is monotone, so coverage carries
  over.

Every layer that turns an estimate into a test statistic (monitoring, the mixture
test, the simulator) goes through these functions, so the rule lives here only.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from seqtest.core import checks
from seqtest.core.vocabulary import METRIC_KINDS, SCALES

__all__ = ["TEST_SCALES", "from_test_scale", "null_on_test_scale", "test_scale_of",
           "to_test_scale"]

TEST_SCALES = ("difference", "relative", "log_ratio")


def test_scale_of(kind: str, scale: str, *, mixture: bool = False) -> str:
    """The scale the test of a ``kind`` metric on the ``scale`` effect scale runs on."""
    checks.choice("kind", kind, METRIC_KINDS)
    checks.choice("scale", scale, SCALES)
    if scale == "difference":
        return "difference"
    return "relative" if kind in ("binary", "rate") and not mixture else "log_ratio"


def to_test_scale(estimate: Any, se: Any, test_scale: str) -> tuple[np.ndarray, np.ndarray]:
    """Estimate and standard error on the test scale (the effect's scale unless
    ``"log_ratio"``).

    On the log ratio a look whose estimate is at or below -1 (a treatment mean of 0),
    or whose ``se`` is not finite, carries no information: its standard error is
    ``inf`` and its estimate ``nan``.
    """
    checks.choice("test_scale", test_scale, TEST_SCALES)
    est = np.asarray(estimate, float)
    s = np.asarray(se, float)
    if test_scale != "log_ratio":
        return est, s
    with np.errstate(divide="ignore", invalid="ignore"):
        ok = (est > -1.0) & np.isfinite(s) & np.isfinite(est)
        t_est = np.where(ok, np.log1p(np.where(ok, est, 0.0)), np.nan)
        t_se = np.where(ok, s / (1.0 + np.where(ok, est, 0.0)), np.inf)
    return t_est, t_se


def from_test_scale(value: Any, test_scale: str) -> Any:
    """A value (estimate or interval end) on the test scale, back on the effect's."""
    if test_scale != "log_ratio":
        return value
    out = np.expm1(np.asarray(value, float))
    return float(out) if np.ndim(out) == 0 else out


def null_on_test_scale(null: Any, test_scale: str) -> float:
    """The null value of the effect on the test scale (``log(1 + r0)`` on the log
    ratio)."""
    v = checks.number("null", null)
    if test_scale == "log_ratio":
        if not v > -1:
            raise checks.fail("null", null, "a relative null above -1")
        return math.log1p(v)
    if test_scale == "relative" and not v > -1:
        raise checks.fail("null", null, "a relative null above -1")
    return v
