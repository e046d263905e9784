"""Continuous-monitoring plans for the normal-mixture sequential probability ratio test.

:func:`mixture_plan` chooses the mixing variance; the formulas themselves (always-valid
p-values, confidence sequences, the rejection boundary) are in
:mod:`seqtest.core.normal_mixture`.

References
----------
.. [1] Johari, R., Koomen, P., Pekelis, L. and Walsh, D. (2022). Always valid
       inference: continuous monitoring of A/B tests. Operations Research 70(3),
       1806-1821.
"""

from __future__ import annotations

import copy
import math
import numbers
from dataclasses import dataclass, field
from typing import Any

from seqtest.core import checks
from seqtest.core.normal_mixture import (
    _check_alpha,
    _check_positive,
    _check_sides,
    optimal_variance_ratio,
)
from seqtest.core.version import __version__
from seqtest.core.vocabulary import SCALES
from seqtest.planning import sizing

__all__ = ["MixturePlan", "PLAN_KIND", "mixture_plan"]

PLAN_KIND = "mixture"

_TAU2_RULES = ("mde", "max_n", "given")


def _real(name: str, value: Any) -> float:
    return checks.number(name, value)


@dataclass(frozen=True)
class MixturePlan:
    """A continuous-monitoring plan; build it with :func:`mixture_plan`.

    Attributes
    ----------
    alpha : float
        Type I error under continuous monitoring.
    sides : int
        2: two-sided; 1: one-sided, rejecting only for treatment better
        (effect above the null).
    tau2 : float
        Mixing variance ``tau**2`` on the effect's scale (of the log ratio for a
        relative plan).
    mde : float or None
        Minimum detectable effect the mixing variance was tuned to.
    max_n_per_arm : int or None
        Planned cap: the experiment is complete at the first look where an arm
        reaches it.
    unit_variance : float or None
        ``V * n`` with ``n`` the size of the larger arm (variance of the estimate
        with one unit in that arm), used with `max_n_per_arm` to tune `tau2`.
    metric : dict or None
        Metric description (see :func:`seqtest.planning.sizing.check_metric`).
    scale : str
        ``"difference"`` or ``"relative"``.
    tau2_rule : str
        How `tau2` was chosen: ``"mde"``, ``"max_n"`` or ``"given"``.
    """

    alpha: float
    sides: int
    tau2: float
    mde: float | None = None
    max_n_per_arm: int | None = None
    metric: dict | None = field(default=None, compare=True)
    scale: str = "difference"
    unit_variance: float | None = None
    tau2_rule: str = "given"
    notes: tuple[str, ...] = field(default=(), repr=False, compare=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "alpha", _check_alpha(self.alpha))
        object.__setattr__(self, "sides", _check_sides(self.sides))
        object.__setattr__(self, "tau2", _check_positive("tau2", self.tau2))
        if self.scale not in SCALES:
            raise ValueError(
                f"scale: got {self.scale!r}; allowed are {', '.join(SCALES)}"
            )
        if self.mde is not None:
            m = _real("mde", self.mde)
            if m == 0:
                raise ValueError("mde: got 0; allowed is a non-zero finite effect")
            if self.scale == "relative" and not m > -1:
                raise ValueError(f"mde: got {self.mde!r}; a relative effect must be above -1")
            if self.sides == 1 and m < 0:
                raise ValueError(
                    f"mde: got {self.mde!r}; a one-sided plan detects a positive effect "
                    "(treatment better), so mde must be > 0"
                )
            object.__setattr__(self, "mde", m)
        if self.max_n_per_arm is not None:
            v = self.max_n_per_arm
            ok = isinstance(v, numbers.Real) and not isinstance(v, bool)
            if not ok or not math.isfinite(float(v)) or float(v) < 1 or not float(v).is_integer():
                raise ValueError(
                    f"max_n_per_arm: got {v!r}; allowed is a whole number >= 1 or None"
                )
            object.__setattr__(self, "max_n_per_arm", int(v))
        if self.unit_variance is not None:
            object.__setattr__(
                self, "unit_variance", _check_positive("unit_variance", self.unit_variance)
            )
        if self.tau2_rule not in _TAU2_RULES:
            raise ValueError(
                f"tau2_rule: got {self.tau2_rule!r}; allowed are {', '.join(_TAU2_RULES)}"
            )
        if self.metric is not None:
            if not isinstance(self.metric, dict):
                raise ValueError(f"metric: got {self.metric!r}; allowed is a mapping or None")
            object.__setattr__(self, "metric", copy.deepcopy(self.metric))

    @property
    def kind(self) -> str:
        return PLAN_KIND

    def summary(self) -> str:
        """The plan in a few plain lines (see :func:`seqtest.reporting.plan_summary`)."""
        from seqtest.reporting.summary import plan_summary
        return plan_summary(self)

    def _repr_html_(self) -> str:
        """The notebook display: the plan's summary and the caution."""
        from seqtest.reporting.html import plan_html
        return plan_html(self)

    def to_dict(self) -> dict:
        """The plan as plain JSON types; :func:`seqtest.plan_from_dict` reads it back."""
        return {
            "kind": PLAN_KIND,
            "version": __version__,
            "inputs": {
                "alpha": self.alpha,
                "sides": self.sides,
                "mde": self.mde,
                "max_n_per_arm": self.max_n_per_arm,
                "unit_variance": self.unit_variance,
                "scale": self.scale,
                "metric": copy.deepcopy(self.metric),
            },
            "computed": {
                "tau2": self.tau2,
                "tau2_rule": self.tau2_rule,
            },
        }


def mixture_plan(
    alpha: float = 0.05,
    sides: int = 2,
    *,
    mde: float | None = None,
    max_n_per_arm: int | None = None,
    unit_variance: float | None = None,
    tau2: float | None = None,
    scale: str | None = None,
    metric: dict | None = None,
) -> MixturePlan:
    """Plan continuous monitoring by the normal-mixture test.

    Parameters
    ----------
    alpha : float
        Type I error under continuous monitoring, in (0, 0.5].
    sides : {1, 2}
        Two-sided, or one-sided for treatment better than control.
    mde : float, optional
        Minimum detectable effect on the analysis scale. Taken from `metric` when
        that is given.
    max_n_per_arm : int, optional
        Planned cap on the larger arm; the experiment is complete there.
    unit_variance : float, optional
        Variance of the estimate times the size ``n`` of the larger arm, so that
        ``se**2 = unit_variance / n``; e.g. ``2 sd**2`` for a difference of means
        with equal arms (see :func:`seqtest.monitoring.metrics.unit_variance`). Derived from
        `metric` when that is given.
    tau2 : float, optional
        Mixing variance; overrides the rule below.
    scale : {"difference", "relative"}, optional
        Analysis scale (default: the metric's, else ``"difference"``).
    metric : dict, optional
        Metric description as for :func:`seqtest.design` (validated by
        :func:`seqtest.planning.sizing.check_metric`); supplies `mde` and `unit_variance`.

    Returns
    -------
    MixturePlan

    Notes
    -----
    Rule for ``tau2`` (unless given). At a look with variance ``V`` the test
    rejects once ``|est| >= c(s) sqrt(V)`` with ``s = tau2 / V`` (see
    :func:`half_width`); ``c`` has a unique minimum ``s*`` that depends on alpha
    only (:func:`optimal_variance_ratio`; two-sided 0.05: ``s* = 8.21``,
    ``c(s*) = 3.03``).

    - With `mde` (rule ``"mde"``): ``tau2 = s* mde**2 / c(s*)**2``. This is the
      mixing variance for which a stream whose estimate sits at ``mde`` crosses
      the boundary earliest (the largest ``V``, i.e. the smallest sample, at which
      ``mde`` is on the boundary is ``V* = mde**2 / c(s*)**2``, reached only with
      ``tau2 = s* V*``). Two-sided 0.05 gives ``tau = 0.944 mde``: the familiar
      choice of a mixing spread about the size of the effect to be detected.
    - Without `mde`, with `max_n_per_arm` and `unit_variance` (rule ``"max_n"``):
      ``tau2 = s* V_max`` with ``V_max = unit_variance / max_n_per_arm``, which
      makes the boundary at the planned maximum sample as small as possible.

    On the relative scale everything is on the log ratio (see
    :func:`always_valid`): the rule uses ``log(1 + mde)`` and `unit_variance` is
    that of the log ratio.

    The benchmark ``benchmarks/bench_mixture_vs_group.py`` prints the expected
    sample size at the mde for multiples of this ``tau2``.

    References
    ----------
    .. [1] Johari, R., Koomen, P., Pekelis, L. and Walsh, D. (2022). Always valid
           inference: continuous monitoring of A/B tests. Operations Research
           70(3), 1806-1821 (choice of the mixing distribution).
    """
    a = _check_alpha(alpha)
    k = _check_sides(sides)
    if scale is not None and scale not in SCALES:
        raise ValueError(f"scale: got {scale!r}; allowed are {', '.join(SCALES)}")
    if metric is not None:
        m = sizing.check_metric(dict(metric))
        if scale is not None and scale != m["scale"]:
            raise ValueError(
                f"scale: got {scale!r} but metric.scale is {m['scale']!r}; give one scale"
            )
        scale = m["scale"]
        delta, unit_control = sizing.delta_and_unit(m)
        if scale == "relative":
            # sizing works on the log ratio, as the test does; the plan keeps the
            # relative effect r with delta = log(1 + r)
            delta = math.expm1(delta)
        if mde is not None and not math.isclose(_real("mde", mde), delta, rel_tol=1e-12):
            raise ValueError(
                f"mde: got {mde!r} but the metric's effect on the {scale} scale is "
                f"{delta:g}; give the effect in one place"
            )
        mde = delta
        if unit_variance is None:
            # sizing's unit is se**2 times n_control (of the log ratio on the
            # relative scale); the cap is on the larger arm
            unit_variance = unit_control * max(1.0, m["allocation"])
        metric = m
    scale = "difference" if scale is None else scale
    if tau2 is not None:
        rule = "given"
        t2 = _check_positive("tau2", tau2)
    elif mde is not None:
        rule = "mde"
        d = _real("mde", mde)
        if d == 0:
            raise ValueError("mde: got 0; allowed is a non-zero finite effect")
        if scale == "relative":
            if not d > -1:
                raise ValueError(f"mde: got {mde!r}; a relative effect must be above -1")
            d = math.log1p(d)
        s_opt, c_opt = optimal_variance_ratio(a, k)
        t2 = s_opt * d * d / (c_opt * c_opt)
    elif max_n_per_arm is not None and unit_variance is not None:
        rule = "max_n"
        s_opt, _ = optimal_variance_ratio(a, k)
        n_cap = _check_positive("max_n_per_arm", max_n_per_arm)
        t2 = s_opt * _check_positive("unit_variance", unit_variance) / n_cap
    else:
        raise ValueError(
            "tau2: cannot be chosen; give mde (or a metric), or max_n_per_arm together "
            "with unit_variance, or tau2 itself"
        )
    return MixturePlan(
        alpha=a,
        sides=k,
        tau2=t2,
        mde=None if mde is None else float(mde),
        max_n_per_arm=max_n_per_arm,
        metric=metric,
        scale=scale,
        unit_variance=None if unit_variance is None else float(unit_variance),
        tau2_rule=rule,
    )
