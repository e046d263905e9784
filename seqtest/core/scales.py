"""The scale a test runs on, and the scale its results are reported on.

An effect on the ``"difference"`` scale (treatment minus control) is tested as it is.
An effect on the ``"relative"`` scale (``r = treatment / control - 1``) is tested on
the log ratio ``log(1 + r)``, with the delta-method standard error ``se / (1 + r)``
(exactly the delta-method standard error of the log ratio); intervals found there are
reported back as ``exp(.) - 1``, which is monotone, so coverage carries over. The
ratio's own delta-method standard error shrinks with the estimate, which makes a
z statistic on the ratio lopsided at small counts; on the log ratio it does not.

Every layer that turns an estimate into a test statistic (monitoring, the mixture
test, the simulator) goes through these functions, so the rule lives here only.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from seqtest.core import checks
from seqtest.core.vocabulary import SCALES

__all__ = ["TEST_SCALE", "from_test_scale", "null_on_test_scale", "to_test_scale"]

#: The name of the scale each effect scale is tested on.
TEST_SCALE = {"difference": "difference", "relative": "log_ratio"}


def to_test_scale(estimate: Any, se: Any, scale: str) -> tuple[np.ndarray, np.ndarray]:
    """Estimate and standard error on the scale the test runs on.

    On the relative scale a look whose estimate is at or below -1 (a treatment mean of
    0), or whose ``se`` is not finite, carries no information: its standard error is
    ``inf`` and its estimate ``nan``.
    """
    checks.choice("scale", scale, SCALES)
    est = np.asarray(estimate, float)
    s = np.asarray(se, float)
    if scale == "difference":
        return est, s
    with np.errstate(divide="ignore", invalid="ignore"):
        ok = (est > -1.0) & np.isfinite(s) & np.isfinite(est)
        t_est = np.where(ok, np.log1p(np.where(ok, est, 0.0)), np.nan)
        t_se = np.where(ok, s / (1.0 + np.where(ok, est, 0.0)), np.inf)
    return t_est, t_se


def from_test_scale(value: Any, scale: str) -> Any:
    """A value (estimate or interval end) on the test scale, back on ``scale``."""
    if scale == "difference":
        return value
    out = np.expm1(np.asarray(value, float))
    return float(out) if np.ndim(out) == 0 else out


def null_on_test_scale(null: Any, scale: str) -> float:
    """The null value of the effect on the test scale (``log(1 + r0)`` when relative)."""
    v = checks.number("null", null)
    if scale == "relative":
        if not v > -1:
            raise checks.fail("null", null, "a relative null above -1")
        return math.log1p(v)
    return v
