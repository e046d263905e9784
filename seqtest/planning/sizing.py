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
- rate: ``lambda`` per unit of exposure (Poisson counts), so sizes are exposures;
- ratio: the delta-method variance of the ratio from a pilot's per-unit moments,
  ``(s_x^2 - 2 R s_xy + R^2 s_y^2) / mu_y^2`` (Deng, Knoblich and Lu 2018), the
  treatment's scaled by ``(R_t / R_c)^2`` (it multiplies the numerators);
- adjusted: ``sd^2 (1 - rho^2)`` with ``rho`` the expected correlation of the metric
  with its pre-period covariate (Deng, Xu, Kohavi and Walker 2013);
- count: ``sd^2`` of the per-unit counts, or ``m + m^2 / k`` for a negative
  binomial shape ``k`` at each arm's mean.

A margin (a null value ``d0`` other than 0) measures the design effect from it:
``delta = (m_t - m_c) - d0`` (or ``log(m_t / m_c) - log(1 + d0)``), and binary and rate
metrics take the score test's variances restricted to the margin
(:func:`seqtest.core.score.design_variances` with ``null=d0``; Farrington and Manning
1990).

The result is exact for the normal approximation the plans rest on; the
fixed-sample formula ``2 (z_{1-a/2} + z_{1-b})^2 sigma^2 / delta^2`` is the
one-look case (standard textbook formula; e.g. Jennison and Turnbull 2000, ch. 3).

References
----------
.. [1] Jennison, C. and Turnbull, B. W. (2000). Group Sequential Methods with
       Applications to Clinical Trials, chapter 3.
.. [2] Farrington, C. P. and Manning, G. (1990). Test statistics and sample size
       formulae for comparative binomial trials with null hypothesis of non-zero risk
       difference or non-unity relative risk. Statistics in Medicine 9, 1447-1454.
.. [3] Chow, S.-C., Shao, J. and Wang, H. (2008). Sample Size Calculations in
       Clinical Research, 2nd ed., sections 3.2 and 4.2 (non-inferiority).
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np

from seqtest.core import checks, score
from seqtest.core.vocabulary import BETTER, HYPOTHESES, METRIC_KINDS

if TYPE_CHECKING:
    from seqtest.planning.design import Plan

__all__ = ["SampleSize", "sample_size", "max_sizes", "check_metric", "delta_and_unit",
           "METRIC_KINDS", "null_and_sign", "power_at", "DESCRIPTION_FIELDS"]

_COMMON = {"kind", "mde", "relative", "allocation", "scale", "margin", "better",
           "hypothesis"}
_ALLOWED = {
    "binary": _COMMON | {"baseline"},
    "continuous": _COMMON | {"baseline", "sd", "sd_treatment"},
    "rate": _COMMON | {"baseline"},
    "ratio": _COMMON | {"numerator_mean", "denominator_mean", "numerator_sd",
                        "denominator_sd", "covariance"},
    "adjusted": _COMMON | {"baseline", "sd", "sd_treatment", "correlation"},
    "count": _COMMON | {"baseline", "sd", "sd_treatment", "dispersion"},
}
assert tuple(_ALLOWED) == METRIC_KINDS
#: Every field a metric description may have (some kinds take only some of them).
DESCRIPTION_FIELDS: frozenset[str] = frozenset().union(*_ALLOWED.values())


def _num(name: str, v: Any, lo: float = -math.inf, hi: float = math.inf,
         open_lo: bool = True, what: str = "") -> float:
    return checks.number(f"metric.{name}", v, lo=lo, hi=hi, lo_open=open_lo,
                         allowed=what or None)


def check_metric(metric: dict) -> dict:
    """Validate a metric description and return it normalised (plain JSON types).

    Fields of every kind: ``kind`` (see :data:`METRIC_KINDS`); ``mde`` the effect
    the plan is powered for (absolute, or relative to the baseline when ``relative``
    is true); ``allocation`` (treatment users per control user, default 1); ``scale``
    of the analysis: ``difference`` (default) or ``relative``.

    Per kind: ``baseline`` (control rate or mean; required for binary, rate, count and
    relative effects); ``sd`` (continuous, adjusted; count: the sd of the per-unit
    counts) and ``sd_treatment`` (optional); ``correlation`` (adjusted: the expected
    correlation of the metric with its pre-period covariate, in (-1, 1));
    ``dispersion`` (count, instead of ``sd``: the negative binomial shape ``k`` of
    the per-unit counts, variance ``m + m^2 / k``); ``numerator_mean``,
    ``denominator_mean``, ``numerator_sd``, ``denominator_sd``, ``covariance``
    (ratio: a pilot's per-unit moments of the numerator and the denominator; the
    baseline is ``numerator_mean / denominator_mean``).

    A test against a margin (a null value other than zero): ``margin`` is the null
    value of the effect on the plan's scale (difference, or relative lift), ``better``
    says which way of the metric is good (``higher``, the default, or ``lower``), and
    ``hypothesis`` what the test is to show: ``non_inferiority`` (the treatment is not
    worse than the control by more than the margin, so the margin lies on the worse
    side: negative when higher is better) or ``superiority`` (better by more than the
    margin: the margin lies on the better side, or is 0). A non-zero margin needs the
    hypothesis stated, so that a margin on the wrong side is caught; with any of the
    three fields the ``mde`` must lie on the better side of the margin. They are kept
    in the normalised description only when given (plans without them read as
    before).
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
    out["mde"] = _num("mde", metric["mde"], what="a finite number")
    need_base = kind in ("binary", "rate", "count") or rel or scale == "relative"
    if kind == "binary":
        out["baseline"] = _num("baseline", metric.get("baseline"), 0.0, 1.0,
                               what="a rate in (0, 1)")
        if out["baseline"] >= 1:
            raise ValueError(f"metric.baseline: got {metric.get('baseline')!r}; allowed is a "
                             "rate in (0, 1)")
    elif kind == "rate":
        out["baseline"] = _num("baseline", metric.get("baseline"), 0.0,
                               what="a positive rate per unit of exposure")
    elif kind == "ratio":
        _ratio_moments(metric, out)
    elif kind == "count":
        out["baseline"] = _num("baseline", metric.get("baseline"), 0.0,
                               what="a positive mean count per unit")
        _count_spread(metric, out)
    else:
        out["sd"] = _num("sd", metric.get("sd"), 0.0, what="a positive standard deviation")
        if "sd_treatment" in metric and metric["sd_treatment"] is not None:
            out["sd_treatment"] = _num("sd_treatment", metric["sd_treatment"], 0.0,
                                       what="a positive standard deviation")
        if kind == "adjusted":
            if "correlation" not in metric:
                raise ValueError("metric.correlation: missing; give the expected correlation "
                                 "of the metric with its pre-period covariate (e.g. from the "
                                 "weeks before the experiment)")
            out["correlation"] = _num("correlation", metric["correlation"], -1.0, 1.0,
                                      what="a correlation in (-1, 1)")
            if abs(out["correlation"]) >= 1:
                raise ValueError(f"metric.correlation: got {metric['correlation']!r}; "
                                 "allowed is a correlation in (-1, 1) (at 1 the covariate "
                                 "would explain the metric entirely)")
        if need_base:
            out["baseline"] = _num("baseline", metric.get("baseline"),
                                   what="the control mean (non-zero)")
            if out["baseline"] == 0:
                raise ValueError("metric.baseline: got 0; a relative effect needs a "
                                 "non-zero control mean")
        elif "baseline" in metric and metric["baseline"] is not None:
            out["baseline"] = _num("baseline", metric["baseline"])
    _margin(metric, out)
    m_c, m_t = _means(out)
    if kind == "binary" and not 0 < m_t < 1:
        raise ValueError(f"metric.mde: the treatment rate would be {m_t:g}; allowed effects "
                         "keep it inside (0, 1)")
    if kind in ("rate", "count", "ratio") and m_t <= 0:
        raise ValueError(f"metric.mde: the treatment {'rate' if kind == 'rate' else 'mean'} "
                         f"would be {m_t:g}; it must stay positive")
    if out["scale"] == "relative" and (m_c <= 0 or m_t <= 0):
        raise ValueError(f"metric.mde: the control and treatment means would be {m_c:g} and "
                         f"{m_t:g}; a relative effect needs both positive")
    if kind == "count" and "dispersion" in out and _variances(out)[1] <= 0:
        raise ValueError("metric.mde: the treatment mean gives no variance")
    return out


def _ratio_moments(metric: dict, out: dict) -> None:
    """A pilot's per-unit moments of a ratio metric's numerator and denominator."""
    for name in ("numerator_mean", "denominator_mean", "numerator_sd", "denominator_sd",
                 "covariance"):
        if name not in metric:
            raise ValueError(f"metric.{name}: missing; a ratio metric is sized from a "
                             "pilot's per-unit numerator_mean, denominator_mean, "
                             "numerator_sd, denominator_sd and covariance")
    out["numerator_mean"] = _num("numerator_mean", metric["numerator_mean"], 0.0,
                                 what="a positive mean numerator per unit")
    out["denominator_mean"] = _num("denominator_mean", metric["denominator_mean"], 0.0,
                                   what="a positive mean denominator per unit")
    out["numerator_sd"] = _num("numerator_sd", metric["numerator_sd"], 0.0, open_lo=False,
                               what="a standard deviation >= 0")
    out["denominator_sd"] = _num("denominator_sd", metric["denominator_sd"], 0.0,
                                 open_lo=False, what="a standard deviation >= 0")
    cov = _num("covariance", metric["covariance"], what="a finite covariance")
    bound = out["numerator_sd"] * out["denominator_sd"]
    if abs(cov) > bound * (1 + 1e-12):
        raise ValueError(f"metric.covariance: got {cov!r}; allowed is at most numerator_sd x "
                         f"denominator_sd = {bound:g} in absolute value (a correlation "
                         "within [-1, 1])")
    out["covariance"] = cov
    if _ratio_unit_variance(out, out["numerator_mean"] / out["denominator_mean"]) <= 0:
        raise ValueError("metric.numerator_sd: the moments give the ratio no variance "
                         "(numerator exactly proportional to the denominator); check them")


def _count_spread(metric: dict, out: dict) -> None:
    """A count metric's per-unit spread: sd (and sd_treatment) or a dispersion."""
    has_sd = metric.get("sd") is not None
    has_k = metric.get("dispersion") is not None
    if has_sd == has_k:
        raise ValueError("metric.sd, metric.dispersion: give one of them: the sd of the "
                         "per-unit counts (e.g. from a pilot), or the negative binomial "
                         "shape k (variance mean + mean^2 / k)")
    if has_sd:
        out["sd"] = _num("sd", metric["sd"], 0.0, what="a positive standard deviation")
        if metric.get("sd_treatment") is not None:
            out["sd_treatment"] = _num("sd_treatment", metric["sd_treatment"], 0.0,
                                       what="a positive standard deviation")
    else:
        if metric.get("sd_treatment") is not None:
            raise ValueError("metric.sd_treatment: goes with sd, not with dispersion")
        out["dispersion"] = _num("dispersion", metric["dispersion"], 0.0,
                                 what="a positive negative binomial shape")


def _margin(metric: dict, out: dict) -> None:
    """The margin, the better direction and the hypothesis (see :func:`check_metric`)."""
    given = [f for f in ("margin", "better", "hypothesis") if f in metric]
    if not given:
        if out["mde"] == 0:
            raise ValueError("metric.mde: got 0; allowed is a non-zero effect")
        return
    better = metric.get("better", "higher")
    if better not in BETTER:
        raise ValueError(f"metric.better: got {better!r}; allowed are "
                         f"{', '.join(BETTER)} (which way of the metric is good)")
    margin = _num("margin", metric.get("margin", 0.0), what="a finite number")
    if out["scale"] == "relative" and not margin > -1:
        raise ValueError(f"metric.margin: got {margin!r}; a relative margin must be above -1")
    hyp = metric.get("hypothesis")
    if hyp is None:
        if margin != 0:
            raise ValueError(f"metric.hypothesis: missing; a margin ({margin:g}) needs the "
                             "hypothesis: non_inferiority (not worse by more than the "
                             "margin) or superiority (better by more than the margin)")
        hyp = "superiority"
    if hyp not in HYPOTHESES:
        raise ValueError(f"metric.hypothesis: got {hyp!r}; allowed are "
                         f"{', '.join(HYPOTHESES)}")
    sign = 1.0 if better == "higher" else -1.0
    worse = "negative" if sign > 0 else "positive"
    if hyp == "non_inferiority" and not sign * margin < 0:
        raise ValueError(
            f"metric.margin: got {margin!r} for a non_inferiority test where {better} is "
            f"better; allowed is a {worse} margin (how much worse than the control the "
            "treatment may be), e.g. " + ("-0.01" if sign > 0 else "0.01"))
    if hyp == "superiority" and sign * margin < 0:
        better_side = "positive" if sign > 0 else "negative"
        raise ValueError(
            f"metric.margin: got {margin!r} for a superiority test where {better} is "
            f"better; allowed is 0 or a {better_side} margin (how much better the "
            "treatment must be); a margin on the worse side is a non_inferiority test")
    out["margin"] = margin
    out["better"] = better
    out["hypothesis"] = hyp
    m_c, m_t = _means(out)
    if out["scale"] == "relative":
        away = sign * ((m_t / m_c - 1.0) - margin) if m_c != 0 else math.nan
    else:
        away = sign * ((m_t - m_c) - margin)
    if not away > 0:
        side = "above" if sign > 0 else "below"
        raise ValueError(
            f"metric.mde: got {out['mde']!r}, which is not {side} the margin {margin:g} "
            f"({better} is better); the plan is powered for an effect the test can accept, "
            f"so give the effect expected under the alternative, {side} the margin (e.g. 0 "
            "for a non-inferiority test: no true difference)")


def null_and_sign(metric: dict | None) -> tuple[float, float]:
    """``(null, sign)`` of a checked metric description (or None): the null value of the
    effect (the margin, 0 without one) and +1 when higher is better, -1 when lower is.

    Decisions are taken on ``sign * z``: a one-sided plan rejects for an effect on the
    better side of the null, and a two-sided plan's upper tail is the better side."""
    if not metric:
        return 0.0, 1.0
    return float(metric.get("margin", 0.0)), (-1.0 if metric.get("better") == "lower"
                                              else 1.0)


def _means(m: dict) -> tuple[float, float]:
    if m["kind"] == "ratio":
        base = m["numerator_mean"] / m["denominator_mean"]
    else:
        base = m.get("baseline", 0.0)
    m_c = base
    m_t = base * (1.0 + m["mde"]) if m["relative"] else base + m["mde"]
    return m_c, m_t


def _ratio_unit_variance(m: dict, ratio: float) -> float:
    """Per-unit variance of a ratio estimate (times n) at the ratio ``ratio``, by the
    delta method: ``(s_x^2 - 2 R s_xy + R^2 s_y^2) / mu_y^2`` (Deng, Knoblich and Lu
    2018)."""
    sx, sy, cov = m["numerator_sd"], m["denominator_sd"], m["covariance"]
    mu_y = m["denominator_mean"]
    return (sx * sx - 2.0 * ratio * cov + ratio * ratio * sy * sy) / (mu_y * mu_y)


def _variances(m: dict) -> tuple[float, float]:
    """Per-unit variances of each arm's value (its variance times the arm's units) at
    the design means."""
    m_c, m_t = _means(m)
    kind = m["kind"]
    if kind == "binary":
        return m_c * (1 - m_c), m_t * (1 - m_t)
    if kind == "rate":
        return m_c, m_t
    if kind == "ratio":
        # the treatment multiplies each unit's numerator by m_t / m_c: the per-unit
        # coefficient of variation of the residual x - R y is unchanged
        v_c = _ratio_unit_variance(m, m_c)
        return v_c, v_c * (m_t / m_c) ** 2
    if kind == "count" and "dispersion" in m:
        k = m["dispersion"]
        return m_c + m_c * m_c / k, m_t + m_t * m_t / k
    sd = m["sd"]
    v_c, v_t = sd * sd, m.get("sd_treatment", sd) ** 2
    if kind == "adjusted":
        # regression adjustment removes the share rho^2 of the variance (Deng, Xu,
        # Kohavi and Walker 2013)
        keep = 1.0 - m["correlation"] ** 2
        return v_c * keep, v_t * keep
    return v_c, v_t


def delta_and_unit(m: dict) -> tuple[float, float]:
    """Design effect on the analysis scale, measured from the null and towards the
    better side, and control users per unit of information, for a metric already
    checked by :func:`check_metric`.

    ``delta = sign (effect - null)`` on the test scale: ``(m_t - m_c) - margin`` on the
    difference scale, ``log(m_t / m_c) - log(1 + margin)`` on the relative one (``sign``
    -1 when lower is better, so a plan powered in the better direction has ``delta >
    0``; without a margin and a stated direction the sign is the mde's, as before)."""
    m_c, m_t = _means(m)
    v_c, v_t = _variances(m)
    q = m["allocation"]
    null, sign = null_and_sign(m)
    if m["scale"] == "relative":
        # relative effects are tested on the log ratio (see seqtest.core.scales), whose
        # delta-method variance is v_c / (n_c m_c^2) + v_t / (n_t m_t^2)
        delta = math.log(m_t / m_c) - math.log1p(null)
        unit = v_c / (m_c * m_c) + v_t / (q * m_t * m_t)
    else:
        plain = m["kind"] == "continuous" and not m["relative"]
        delta = (m["mde"] if plain else m_t - m_c) - null
        unit = v_c + v_t / q
    return sign * delta, unit


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
    power (Farrington and Manning 1990 for one look); ``I_max = n_c / v0``; with a
    margin the variances are restricted to it. The other kinds: ``n_c = (drift /
    delta)^2 (v_c + v_t / q)`` and ``I_max = (drift / delta)^2``, ``delta`` measured
    from the margin (:func:`delta_and_unit`).
    """
    q = m["allocation"]
    if m["kind"] in ("binary", "rate"):
        fut = None if plan.futility_z is None else tuple(plan.futility_z.tolist())
        return _score_sizes(m["kind"], m["scale"], *_means(m), q,
                            tuple(plan.info_fractions.tolist()),
                            tuple(plan.efficacy_z.tolist()), fut, plan.sides, plan.alpha,
                            plan.power, plan.r, null_and_sign(m)[0])
    delta, unit = delta_and_unit(m)
    i_max = plan.max_information(delta)
    return i_max * unit, (plan.fixed_drift / delta) ** 2 * unit, delta, i_max


@functools.lru_cache(maxsize=256)
def _score_sizes(kind: str, scale: str, m_c: float, m_t: float, q: float,
                 t: tuple[float, ...], a: tuple[float, ...], b: tuple[float, ...] | None,
                 sides: int, alpha: float, power: float, r: int, null: float = 0.0
                 ) -> tuple[float, float, float, float]:
    """:func:`max_control` for binary and rate metrics (cached: a plan is sized once
    per process, however often its sample size is asked for). A negative design
    effect (a plan where lower is better) is sized as the mirror image
    (:func:`seqtest.core.score.group_sequential_size`)."""
    dv = score.design_variances(kind, m_c, m_t, allocation=q, scale=scale, null=null)
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


def power_at(plan: Plan, m: dict, n_c: float) -> float:
    """Power of ``plan`` (its boundaries, futility obeyed) at the design effect of the
    checked metric ``m`` with ``n_c`` control users (exposure): the inverse of
    :func:`max_control`, measured from the margin as it is.

    Binary and rate metrics (score test): the power ``p`` at which
    :func:`seqtest.core.score.score_drift` gives the drift of ``n_c`` users, solved on
    the probit scale by :func:`seqtest.core.roots.solve` to 1e-10. The other kinds: the
    drift is ``delta sqrt(n_c / unit)`` (:func:`delta_and_unit`) and the power the
    boundary crossing probability at it (accurate to the integration's 1e-7)."""
    from scipy import special

    from seqtest.core.region import Region
    from seqtest.core.roots import NoRoot, solve

    t = np.asarray(plan.info_fractions, float)
    fut = plan.futility_z
    if m["kind"] not in ("binary", "rate"):
        delta, unit = delta_and_unit(m)
        eta = abs(delta) * math.sqrt(n_c / unit)
        pw = float(Region.of_plan(plan.sides, plan.efficacy_z, fut)
                   .crossing(t, eta, plan.r).upper.sum())
        return min(1.0, max(0.0, pw))   # the integration's 1e-7 can overshoot 1
    m_c, m_t = _means(m)
    dv = score.design_variances(m["kind"], m_c, m_t, allocation=m["allocation"],
                                scale=m["scale"], null=null_and_sign(m)[0])
    sign = 1.0 if dv.delta > 0 else -1.0
    rho = math.sqrt(dv.v0 / dv.v1)
    d1 = abs(dv.delta) * math.sqrt(n_c / dv.v1)
    gam = sign * dv.third0 / (dv.v0 ** 1.5 * np.sqrt(n_c * t))

    def g(x: float) -> float:
        try:
            drift = score.score_drift(t, plan.efficacy_z, sides=plan.sides,
                                      power=float(special.ndtr(x)), ratio=rho, skew=gam,
                                      futility_z=fut, r=plan.r)
        except NoRoot:      # a power so low that no positive drift is that small
            drift = 0.0
        return drift - d1

    lo = float(special.ndtri(1e-6))
    if g(lo) >= 0:
        return float(special.ndtr(lo))
    try:
        x = solve(g, float(special.ndtri(plan.power)), step=0.5, lo=lo, hi=8.0,
                  xtol=1e-10, gtol=1e-9)
    except NoRoot:
        return 1.0
    return float(special.ndtr(x))


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
