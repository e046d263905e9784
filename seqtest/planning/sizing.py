"""Sample sizes: from a plan's maximum information to users per arm.

For two arms with per-unit variances ``v_c``, ``v_t`` and allocation ratio
``q = n_t / n_c``, the difference of means has variance ``v_c / n_c + v_t / n_t``,
so information ``I`` needs ``n_c = I (v_c + v_t / q)``. A relative effect
(``m_t / m_c - 1``) is tested on the log ratio ``log(m_t / m_c)``, whose variance by
the delta method is ``v_c / (n_c m_c^2) + v_t / (n_t m_t^2)``; its design effect is
``log(1 + r)``.

Per-unit variances, evaluated at the design alternative (unpooled, matching the
information ``1 / se^2`` that monitoring uses):

- binary: ``p (1 - p)`` per user;
- continuous: ``sd^2`` per user (``sd_treatment`` may differ from ``sd``);
- rate: ``lambda`` per unit of exposure (Poisson counts), so sizes are exposures.

The result is exact for the normal approximation the plans rest on; the
fixed-sample formula ``2 (z_{1-a/2} + z_{1-b})^2 sigma^2 / delta^2`` is the
one-look case (standard textbook formula; e.g. Jennison and Turnbull 2000, ch. 3).

References
----------
.. [1] Jennison, C. and Turnbull, B. W. (2000). Group Sequential Methods with
       Applications to Clinical Trials, chapter 3.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from seqtest.core import checks, score

if TYPE_CHECKING:
    from seqtest.planning.design import Plan

__all__ = ["SampleSize", "sample_size", "max_sizes", "check_metric", "delta_and_unit",
           "METRIC_KINDS"]

METRIC_KINDS = ("binary", "continuous", "rate")
_ALLOWED = {
    "binary": {"kind", "baseline", "mde", "relative", "allocation", "scale"},
    "continuous": {"kind", "baseline", "sd", "sd_treatment", "mde", "relative",
                   "allocation", "scale"},
    "rate": {"kind", "baseline", "mde", "relative", "allocation", "scale"},
}


def _num(name: str, v: Any, lo: float = -math.inf, hi: float = math.inf,
         open_lo: bool = True, what: str = "") -> float:
    return checks.number(f"metric.{name}", v, lo=lo, hi=hi, lo_open=open_lo,
                         allowed=what or None)


def check_metric(metric: dict) -> dict:
    """Validate a metric description and return it normalised (plain JSON types).

    Fields: ``kind`` (binary, continuous, rate); ``mde`` the minimum detectable
    effect (absolute, or relative to the baseline when ``relative`` is true);
    ``baseline`` (control rate or mean; required for binary, rate and relative
    effects); ``sd`` (continuous); ``sd_treatment`` (optional); ``allocation``
    (treatment users per control user, default 1); ``scale`` of the analysis:
    ``difference`` (default) or ``relative``.
    """
    if not isinstance(metric, dict):
        raise ValueError(f"metric: got {metric!r}; allowed is a mapping with a 'kind'")
    kind = metric.get("kind")
    if kind not in METRIC_KINDS:
        raise ValueError(f"metric.kind: got {kind!r}; allowed are {', '.join(METRIC_KINDS)}")
    extra = set(metric) - _ALLOWED[kind]
    if extra:
        raise ValueError(f"metric: unknown field(s) {sorted(extra)} for kind {kind}; allowed "
                         f"are {sorted(_ALLOWED[kind])}")
    out: dict = {"kind": kind}
    rel = metric.get("relative", False)
    if not isinstance(rel, bool):
        raise ValueError(f"metric.relative: got {rel!r}; allowed are true and false")
    out["relative"] = rel
    scale = metric.get("scale", "difference")
    if scale not in ("difference", "relative"):
        raise ValueError(f"metric.scale: got {scale!r}; allowed are difference and relative")
    out["scale"] = scale
    out["allocation"] = _num("allocation", metric.get("allocation", 1.0), 0.0, 100.0,
                             what="a ratio in (0, 100]")
    if "mde" not in metric:
        raise ValueError("metric.mde: missing; give the minimum detectable effect")
    out["mde"] = _num("mde", metric["mde"], what="a non-zero finite number")
    if out["mde"] == 0:
        raise ValueError("metric.mde: got 0; allowed is a non-zero effect")
    need_base = kind in ("binary", "rate") or rel or scale == "relative"
    if kind == "binary":
        out["baseline"] = _num("baseline", metric.get("baseline"), 0.0, 1.0,
                               what="a rate in (0, 1)")
        if out["baseline"] >= 1:
            raise ValueError(f"metric.baseline: got {metric.get('baseline')!r}; allowed is a "
                             "rate in (0, 1)")
    elif kind == "rate":
        out["baseline"] = _num("baseline", metric.get("baseline"), 0.0,
                               what="a positive rate per unit of exposure")
    else:
        out["sd"] = _num("sd", metric.get("sd"), 0.0, what="a positive standard deviation")
        if "sd_treatment" in metric and metric["sd_treatment"] is not None:
            out["sd_treatment"] = _num("sd_treatment", metric["sd_treatment"], 0.0,
                                       what="a positive standard deviation")
        if need_base:
            out["baseline"] = _num("baseline", metric.get("baseline"),
                                   what="the control mean (non-zero)")
            if out["baseline"] == 0:
                raise ValueError("metric.baseline: got 0; a relative effect needs a "
                                 "non-zero control mean")
        elif "baseline" in metric and metric["baseline"] is not None:
            out["baseline"] = _num("baseline", metric["baseline"])
    m_c, m_t = _means(out)
    if kind == "binary" and not 0 < m_t < 1:
        raise ValueError(f"metric.mde: the treatment rate would be {m_t:g}; allowed effects "
                         "keep it inside (0, 1)")
    if kind == "rate" and m_t <= 0:
        raise ValueError(f"metric.mde: the treatment rate would be {m_t:g}; it must stay "
                         "positive")
    return out


def _means(m: dict) -> tuple[float, float]:
    base = m.get("baseline", 0.0)
    m_c = base
    m_t = base * (1.0 + m["mde"]) if m["relative"] else base + m["mde"]
    return m_c, m_t


def _variances(m: dict) -> tuple[float, float]:
    m_c, m_t = _means(m)
    if m["kind"] == "binary":
        return m_c * (1 - m_c), m_t * (1 - m_t)
    if m["kind"] == "rate":
        return m_c, m_t
    sd = m["sd"]
    return sd * sd, m.get("sd_treatment", sd) ** 2


def delta_and_unit(m: dict) -> tuple[float, float]:
    """Design effect on the analysis scale and control users per unit of information,
    for a metric already checked by :func:`check_metric`."""
    m_c, m_t = _means(m)
    v_c, v_t = _variances(m)
    q = m["allocation"]
    if m["scale"] == "relative":
        # relative effects are tested on the log ratio (see seqtest.core.scales), whose
        # delta-method variance is v_c / (n_c m_c^2) + v_t / (n_t m_t^2)
        delta = math.log(m_t / m_c)
        unit = v_c / (m_c * m_c) + v_t / (q * m_t * m_t)
    else:
        delta = m_t - m_c if m["kind"] != "continuous" or m["relative"] else m["mde"]
        unit = v_c + v_t / q
    return delta, unit


@dataclass(frozen=True)
class SampleSize:
    """Users (or exposure units, for rates) per arm.

    Attributes
    ----------
    n_control, n_treatment : int
        Maximum per arm, rounded up.
    per_look_control, per_look_treatment : ndarray
        Cumulative per-arm sizes at each planned look (rounded up).
    fixed_control, fixed_treatment : int
        The fixed-sample design with the same alpha and power.
    expected_null, expected_alternative : float
        Expected total (both arms) at stopping under the null and the design effect.
    delta : float
        Design effect on the scale the test runs on (``log(1 + r)`` for a relative
        effect).
    max_information : float
        The maximum information, in the units of the z statistic's information (see
        :func:`max_control`).
    """

    n_control: int
    n_treatment: int
    per_look_control: np.ndarray
    per_look_treatment: np.ndarray
    fixed_control: int
    fixed_treatment: int
    expected_null: float
    expected_alternative: float
    delta: float
    max_information: float

    @property
    def total(self) -> int:
        return self.n_control + self.n_treatment


def _up(x: np.ndarray | float) -> np.ndarray:
    # a relative tolerance keeps an exact 63.0000000001 from rounding up to 64
    return np.ceil(np.asarray(x) * (1 - 1e-12)).astype(int)


def max_control(plan: Plan, m: dict) -> tuple[float, float, float, float]:
    """``(n_c, n_c_fixed, delta, I_max)`` for a metric already checked: maximum and
    fixed-sample control users (not rounded), the design effect on the test scale and
    the maximum information in the units of :attr:`Effect.information
    <seqtest.monitoring.metrics.Effect>`.

    Binary and rate metrics are tested by the score statistic restricted to the null
    (:mod:`seqtest.core.score`): its variance under the null (``v0``) and under the
    design effect (``v1``) differ, so the maximum is ``n_c = v1 (D1 / delta)^2`` with
    the drift ``D1`` at which the plan's boundaries, seen on the alternative's scale
    (``sqrt(v0 / v1)`` times the boundary, with the skewness term), give the planned
    power (Farrington and Manning 1990 for one look); ``I_max = n_c / v0``. Continuous
    metrics: ``n_c = (drift / delta)^2 (v_c + v_t / q)`` and ``I_max = (drift /
    delta)^2``.
    """
    q = m["allocation"]
    if m["kind"] in ("binary", "rate"):
        fut = None if plan.futility_z is None else tuple(plan.futility_z.tolist())
        return _score_sizes(m["kind"], m["scale"], *_means(m), q,
                            tuple(plan.info_fractions.tolist()),
                            tuple(plan.efficacy_z.tolist()), fut, plan.sides, plan.alpha,
                            plan.power, plan.r)
    delta, unit = delta_and_unit(m)
    i_max = plan.max_information(delta)
    return i_max * unit, (plan.fixed_drift / delta) ** 2 * unit, delta, i_max


@functools.lru_cache(maxsize=256)
def _score_sizes(kind: str, scale: str, m_c: float, m_t: float, q: float,
                 t: tuple[float, ...], a: tuple[float, ...], b: tuple[float, ...] | None,
                 sides: int, alpha: float, power: float, r: int
                 ) -> tuple[float, float, float, float]:
    """:func:`max_control` for binary and rate metrics (cached: a plan is sized once
    per process, however often its sample size is asked for)."""
    dv = score.design_variances(kind, m_c, m_t, allocation=q, scale=scale)
    n_c, _ = score.group_sequential_size(dv, t, a, sides=sides, power=power, allocation=q,
                                         r=r, futility_z=b)
    n_fixed, _ = score.fixed_sample_size(dv, alpha=alpha, power=power, sides=sides,
                                         allocation=q)
    return n_c, n_fixed, dv.delta, n_c / dv.v0


def max_sizes(plan: Plan, **metric: Any) -> tuple[int, int]:
    """Maximum users (exposure) per arm, control and treatment, rounded up; the cheap
    part of :func:`sample_size` (no expected sizes)."""
    if plan.n_control is not None and plan.metric == check_metric(dict(metric)):
        return int(plan.n_control[-1]), int(plan.n_treatment[-1])  # type: ignore[index]
    m = check_metric(dict(metric))
    n_c = max_control(plan, m)[0]
    return int(_up(n_c)), int(_up(n_c * m["allocation"]))


def sample_size(plan: Plan, **metric: Any) -> SampleSize:
    """Per-arm sample size of ``plan`` for a metric (fields as in :func:`check_metric`).

    Examples
    --------
    >>> import seqtest
    >>> from seqtest.planning.sizing import sample_size
    >>> p = seqtest.design(alpha=0.05, sides=2, power=0.8, looks=1)
    >>> sample_size(p, kind="continuous", sd=1.0, mde=0.5).n_control
    63
    """
    m = check_metric(dict(metric))
    q = m["allocation"]
    n_c, n_fixed, delta, i_max = max_control(plan, m)
    t = plan.info_fractions
    e0 = plan.characteristics(0.0).expected_fraction
    e1 = plan.characteristics(1.0).expected_fraction
    up = _up
    return SampleSize(
        n_control=int(up(n_c)), n_treatment=int(up(n_c * q)),
        per_look_control=up(n_c * t), per_look_treatment=up(n_c * q * t),
        fixed_control=int(up(n_fixed)), fixed_treatment=int(up(n_fixed * q)),
        expected_null=float(e0 * n_c * (1 + q)), expected_alternative=float(e1 * n_c * (1 + q)),
        delta=float(delta), max_information=float(i_max),
    )


def legacy_max_control(plan: Plan, m: dict) -> float:
    """Maximum control users as the first release sized every metric: ``(drift /
    delta)^2 (v_c + v_t / q)`` with unpooled variances at the design effect (binary and
    rate metrics were then tested with the unpooled Wald statistic). Kept so that plan
    documents written by that release measure their information fractions, and so
    decide, as they did."""
    delta, unit = delta_and_unit(m)
    return plan.max_information(delta) * unit


def per_look(n_c: float, allocation: float, info_fractions: np.ndarray
             ) -> tuple[np.ndarray, np.ndarray]:
    """Cumulative users per arm at each planned look, rounded up."""
    t = np.asarray(info_fractions, float)
    return _up(n_c * t), _up(n_c * allocation * t)
