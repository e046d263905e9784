"""Per-arm cumulative totals -> effect estimate, standard error, z and information.

Two arms are compared, ``"control"`` and ``"treatment"``; the effect is always
treatment relative to control. Three kinds of metric are supported, each with its
canonical cumulative totals (see :data:`METRIC_FIELDS`):

``"binary"``
    ``n`` (units observed), ``successes`` (units with the outcome).
``"continuous"``
    ``n``, ``sum`` (sum of the values), ``sum_sq`` (sum of the squared values);
    ``n``, ``mean``, ``sd`` (sample standard deviation with divisor ``n - 1``) are
    accepted as well and converted.
``"rate"``
    ``exposure`` (e.g. user-days), ``events`` (count of events); the rate is
    ``events / exposure``.

The functions here are pure numpy and vectorised: every total may be an array of
any shape (for instance ``(replications, looks)`` in simulation) and the results
have the broadcast shape.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import special

from seqtest.core import checks, score
from seqtest.core.errors import InputError, LookDataError
from seqtest.core.scales import (
    from_test_scale,
    null_on_test_scale,
    test_scale_of,
    to_test_scale,
)
from seqtest.core.vocabulary import ARMS, METRIC_KINDS, SCALES

__all__ = [
    "ARMS",
    "METRIC_FIELDS",
    "METRIC_KINDS",
    "SCALES",
    "Effect",
    "LookDataError",
    "SRMResult",
    "arm_unit_variances",
    "effect",
    "srm_check",
    "unit_variance",
    "validate_looks",
]

#: Canonical cumulative totals for each metric kind.
METRIC_FIELDS: dict[str, tuple[str, ...]] = {
    "binary": ("n", "successes"),
    "continuous": ("n", "sum", "sum_sq"),
    "rate": ("exposure", "events"),
}

#: Alternative totals accepted for a kind (converted to the canonical ones).
ALTERNATIVE_FIELDS: dict[str, tuple[str, ...]] = {
    "continuous": ("n", "mean", "sd"),
}

assert tuple(METRIC_FIELDS) == METRIC_KINDS

# Largest absolute value accepted for any total (counts, sums, sums of squares).
MAX_TOTAL = 1e30

# Totals that are counts of units or events: whole numbers, never negative.
_WHOLE_FIELDS = frozenset({"n", "successes", "events"})
# Totals that can only grow from one look to the next.
_MONOTONE_FIELDS: tuple[str, ...] = ("n", "successes", "exposure", "events")


def _check_kind(kind: object) -> str:
    return str(checks.choice("kind", kind, METRIC_KINDS))


def _check_scale(scale: object) -> str:
    return str(checks.choice("scale", scale, SCALES))


def _fmt(x: float) -> str:
    """Short, readable number for messages (integers without a decimal point)."""
    if float(x).is_integer() and abs(x) < 1e15:
        return str(int(x))
    return f"{x:.6g}"


def _expected_text(kind: str) -> str:
    text = ", ".join(METRIC_FIELDS[kind])
    if kind in ALTERNATIVE_FIELDS:
        text += f" (or {', '.join(ALTERNATIVE_FIELDS[kind])})"
    return text


# ---------------------------------------------------------------------------
# Validation of a sequence of looks
# ---------------------------------------------------------------------------


def _number(value: object, look: int, arm: str, field: str) -> float:
    if isinstance(value, bool | np.bool_) or not isinstance(value, numbers.Real):
        raise LookDataError(f"{value!r} is not a number", look=look, arm=arm, field=field)
    x = float(value)
    if not math.isfinite(x):
        raise LookDataError(f"{x} is not a finite number", look=look, arm=arm, field=field)
    if abs(x) > MAX_TOTAL:
        # Far above any real total (even sums of squared cents), far below where
        # squares and products of totals overflow double floats.
        raise LookDataError(f"{x:g} is larger than {MAX_TOTAL:g} in absolute value, beyond "
                            "any plausible total; check the units", look=look, arm=arm,
                            field=field)
    return x


def _arm_fields(kind: str, totals: Mapping, look: int, arm: str) -> tuple[str, ...]:
    """Which field set (canonical or alternative) an arm's totals use."""
    keys = set(totals)
    canonical = METRIC_FIELDS[kind]
    alternative = ALTERNATIVE_FIELDS.get(kind, ())
    allowed = set(canonical) | set(alternative)
    unknown = sorted(str(k) for k in keys - allowed)
    if unknown:
        raise LookDataError(
            f"unknown field{'s' if len(unknown) > 1 else ''} {', '.join(unknown)}; "
            f"a {kind} metric expects {_expected_text(kind)}",
            look=look,
            arm=arm,
            field=unknown[0],
        )
    only_alt = keys & (set(alternative) - set(canonical))
    only_can = keys & (set(canonical) - set(alternative))
    if only_alt and only_can:
        raise LookDataError(
            f"mixes {', '.join(sorted(only_can))} with {', '.join(sorted(only_alt))}; "
            f"give either {', '.join(canonical)} or {', '.join(alternative)}",
            look=look,
            arm=arm,
        )
    fields = alternative if only_alt else canonical
    missing = [f for f in fields if f not in keys]
    if missing:
        raise LookDataError(
            f"missing field{'s' if len(missing) > 1 else ''} {', '.join(missing)}; "
            f"a {kind} metric expects {_expected_text(kind)}",
            look=look,
            arm=arm,
            field=missing[0],
        )
    return fields


def _canonical_arm(kind: str, totals: Mapping, look: int, arm: str) -> dict[str, float]:
    """Check one arm at one look and return its canonical totals."""
    fields = _arm_fields(kind, totals, look, arm)
    v = {f: _number(totals[f], look, arm, f) for f in fields}
    for f, x in v.items():
        if f in _WHOLE_FIELDS or f in ("exposure", "sd"):
            if x < 0:
                raise LookDataError(f"{_fmt(x)} is negative", look=look, arm=arm, field=f)
        if f in _WHOLE_FIELDS and not x.is_integer():
            raise LookDataError(
                f"{_fmt(x)} is not a whole number", look=look, arm=arm, field=f
            )
    if kind == "rate":
        if v["exposure"] == 0:
            raise LookDataError(
                "exposure is 0; every arm needs positive exposure at every look",
                look=look,
                arm=arm,
                field="exposure",
            )
        return v
    n = v["n"]
    if n == 0:
        raise LookDataError(
            "n is 0; every arm needs at least one unit at every look",
            look=look,
            arm=arm,
            field="n",
        )
    if kind == "binary":
        if v["successes"] > n:
            raise LookDataError(
                f"{_fmt(v['successes'])} is above n = {_fmt(n)}",
                look=look,
                arm=arm,
                field="successes",
            )
        return v
    # continuous
    if n < 2:
        raise LookDataError(
            "n is 1; a continuous metric needs at least 2 units per arm to estimate "
            "the variance",
            look=look,
            arm=arm,
            field="n",
        )
    if "mean" in v:
        mean, sd = v["mean"], v["sd"]
        total = n * mean
        return {"n": n, "sum": total, "sum_sq": (n - 1.0) * sd * sd + total * mean}
    total, sum_sq = v["sum"], v["sum_sq"]
    floor = total * total / n
    # Allow rounding of the order of the float precision of the larger term.
    if sum_sq < floor - 1e-9 * max(abs(sum_sq), floor, 1.0):
        raise LookDataError(
            f"{_fmt(sum_sq)} is below sum^2 / n = {_fmt(floor)}, which would make "
            "the variance negative",
            look=look,
            arm=arm,
            field="sum_sq",
        )
    return v


def validate_looks(kind: str, looks: Sequence[Mapping]) -> dict[str, dict[str, np.ndarray]]:
    """Check a sequence of looks of cumulative totals and return them as arrays.

    Parameters
    ----------
    kind : {"binary", "continuous", "rate"}
        Metric kind.
    looks : sequence of mappings
        One mapping per look, in time order, ``{"control": {...}, "treatment":
        {...}}``, each arm holding that kind's cumulative totals (see
        :data:`METRIC_FIELDS`; continuous totals may be given as ``n, mean, sd``).

    Returns
    -------
    dict
        ``{arm: {field: array of shape (n_looks,)}}`` with the canonical fields,
        float64.

    Raises
    ------
    ValueError
        If `kind` is unknown.
    LookDataError
        Naming the look, the arm and the field, for: missing, unknown or mixed
        fields; values that are not finite numbers; negative counts or exposure;
        counts that are not whole numbers; successes above n; n of 0 (or 1 for a
        continuous metric) or exposure of 0; a negative sd; sum_sq below sum^2/n
        (a negative variance); a total among n, successes, exposure, events that
        is smaller than at the previous look; unknown or missing arms.
    """
    kind = _check_kind(kind)
    if isinstance(looks, Mapping) or isinstance(looks, str | bytes):
        raise LookDataError("looks must be a list of looks, one mapping per look")
    looks = list(looks)
    if not looks:
        raise LookDataError("looks is empty; give at least one look")
    out: dict[str, dict[str, list[float]]] = {
        a: {f: [] for f in METRIC_FIELDS[kind]} for a in ARMS
    }
    for i, look in enumerate(looks, start=1):
        if not isinstance(look, Mapping):
            raise LookDataError(
                f"expected a mapping with arms 'control' and 'treatment', got "
                f"{type(look).__name__}",
                look=i,
            )
        for name in look:
            if name not in ARMS:
                raise LookDataError(
                    f"unknown arm {name!r}; the arms are 'control' and 'treatment'",
                    look=i,
                    arm=str(name),
                )
        for arm in ARMS:
            if arm not in look:
                raise LookDataError(
                    f"missing; every look needs totals for {arm}", look=i, arm=arm
                )
            totals = look[arm]
            if not isinstance(totals, Mapping):
                raise LookDataError(
                    f"expected a mapping of totals ({_expected_text(kind)}), got "
                    f"{type(totals).__name__}",
                    look=i,
                    arm=arm,
                )
            values = _canonical_arm(kind, totals, i, arm)
            for f in _MONOTONE_FIELDS:
                if f in values and i > 1:
                    prev = out[arm][f][-1]
                    if values[f] < prev:
                        raise LookDataError(
                            f"{_fmt(values[f])} is below {_fmt(prev)} at look {i - 1}; "
                            "totals are cumulative and must not go backwards",
                            look=i,
                            arm=arm,
                            field=f,
                        )
            for f in METRIC_FIELDS[kind]:
                out[arm][f].append(values[f])
    return {
        a: {f: np.asarray(vals, dtype=float) for f, vals in fields.items()}
        for a, fields in out.items()
    }


# ---------------------------------------------------------------------------
# Effect estimate
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class Effect:
    """Treatment-versus-control effect at one or many looks.

    Attributes
    ----------
    kind : str
        The metric kind.
    estimate : ndarray or float
        Treatment minus control (``scale="difference"``) or treatment / control - 1
        (``scale="relative"``).
    se : ndarray or float
        Standard error of `estimate` (restricted to the null for binary and rate
        metrics, see :func:`effect`); ``inf`` where `degenerate`.
    test_scale : str
        The scale the test runs on (:func:`seqtest.core.scales.test_scale_of`).
    test_estimate, test_se : ndarray or float
        The estimate and its standard error on the test scale: the same as `estimate`
        and `se` except on the log ratio (continuous metrics on the relative scale).
    z : ndarray or float
        The test statistic, compared with the boundaries: for binary and rate metrics
        the skewness-corrected score statistic, which is ``(test_estimate - null) /
        test_se`` corrected by `skewness` (:func:`seqtest.core.score.corrected_z`);
        for continuous metrics Welch's ``(test_estimate - null) / test_se``. 0 where
        `degenerate`.
    skewness : ndarray or float
        Skewness of the score contrast under the null (0 for continuous metrics).
    log_ratio_estimate, log_ratio_se : ndarray, float or None
        On the relative scale: the log of the ratio and its standard error, for tests
        that run on the log ratio (the mixture test): the delta method for continuous
        metrics; for binary and rate metrics the standard error for which the log ratio
        over it is the score statistic (:func:`seqtest.core.score.log_ratio`).
    information : ndarray or float
        ``1 / test_se**2`` for continuous metrics, ``1 / V`` (the restricted variance
        of the score contrast) for binary and rate metrics; 0 where `degenerate`.
    n_control, n_treatment : ndarray or float
        Units per arm (the exposure for a rate metric).
    control_value, treatment_value : ndarray or float
        Per-arm mean (binary: proportion; rate: events per unit exposure).
    scale : str
        ``"difference"`` or ``"relative"``.
    degenerate : ndarray or bool
        True where no evidence either way can be computed (see :func:`effect`).
    null : float
        The null value used for `z`, on the effect's scale.
    """

    estimate: np.ndarray | float
    se: np.ndarray | float
    test_estimate: np.ndarray | float
    test_se: np.ndarray | float
    z: np.ndarray | float
    information: np.ndarray | float
    n_control: np.ndarray | float
    n_treatment: np.ndarray | float
    control_value: np.ndarray | float
    treatment_value: np.ndarray | float
    scale: str
    degenerate: np.ndarray | bool = False
    null: float = 0.0
    kind: str = "continuous"
    test_scale: str = "difference"
    skewness: np.ndarray | float = 0.0
    totals: tuple[Mapping[str, np.ndarray], Mapping[str, np.ndarray]] | None = field(
        default=None, repr=False, compare=False)
    log_ratio_estimate: np.ndarray | float | None = None
    log_ratio_se: np.ndarray | float | None = None

    def interval(self, critical: Any, sides: int) -> tuple[np.ndarray, np.ndarray]:
        """The interval ``{theta0 : the test at theta0 does not reach critical}`` at each
        look, on the effect's scale (``critical`` broadcasts with the looks; ``inf``
        gives the whole range).

        Binary and rate metrics: the score test inverted (skewness-corrected;
        :func:`seqtest.core.score.interval`), so the interval excludes the null
        exactly when the test at the null rejects. Continuous metrics:
        ``test_estimate +- critical * test_se`` mapped back from the test scale.
        One-sided (``sides=1``): the lower limit, the upper one is the range's end.
        """
        c = np.asarray(critical, float)
        if self.kind in ("binary", "rate"):
            assert self.totals is not None
            count, size = ("successes", "n") if self.kind == "binary" else ("events",
                                                                            "exposure")
            ctrl, trt = self.totals
            lo, hi = score.interval(self.kind, ctrl[count], ctrl[size], trt[count],
                                    trt[size], c, scale=self.scale, sides=sides,
                                    skew=True, null=self.null)
            return np.asarray(lo, float), np.asarray(hi, float)
        est = np.asarray(self.test_estimate, float)
        se = np.asarray(self.test_se, float)
        with np.errstate(invalid="ignore"):
            lo = est - c * se
            hi = est + c * se if sides == 2 else np.full(np.broadcast(est, c).shape, np.inf)
        return (np.asarray(from_test_scale(lo, self.test_scale), float),
                np.asarray(from_test_scale(hi, self.test_scale), float))


def _arm_arrays(kind: str, totals: Mapping, name: str) -> dict[str, np.ndarray]:
    if not isinstance(totals, Mapping):
        raise checks.fail(name, type(totals).__name__,
                          f"a mapping of totals ({_expected_text(kind)})")
    fields = METRIC_FIELDS[kind]
    if kind in ALTERNATIVE_FIELDS and not all(f in totals for f in fields):
        alt = ALTERNATIVE_FIELDS[kind]
        if all(f in totals for f in alt):
            fields = alt
    missing = [f for f in fields if f not in totals]
    if missing:
        raise InputError(f"{name}: missing {', '.join(missing)}; a {kind} metric expects "
                         f"{_expected_text(kind)}")
    arrays = {f: np.asarray(totals[f], dtype=float) for f in fields}
    size_field = "exposure" if kind == "rate" else "n"
    size = arrays[size_field]
    bad = ~(size >= 2.0) if kind == "continuous" else ~(size > 0)
    if np.any(bad):
        first = size[bad].flat[0] if size.ndim else size
        need = "at least 2" if kind == "continuous" else "positive"
        raise InputError(f"{name}.{size_field}: got {_fmt(float(first))}; allowed is {need}")
    if "mean" in arrays:
        n = arrays["n"]
        total = n * arrays["mean"]
        arrays = {
            "n": n,
            "sum": total,
            "sum_sq": (n - 1.0) * arrays["sd"] ** 2 + total * arrays["mean"],
        }
    return arrays


def _arm_mean_and_variance(kind: str, a: Mapping[str, np.ndarray]):
    """Per-arm mean and the estimated variance of that mean."""
    if kind == "binary":
        n = a["n"]
        mean = a["successes"] / n
        # Zero-count floor: at 0 or n successes the plug-in variance is 0; use half
        # a success (or failure) in the variance only.
        p = np.clip(mean, 0.5 / n, 1.0 - 0.5 / n)
        return n, mean, p * (1.0 - p) / n
    if kind == "continuous":
        n = a["n"]
        mean = a["sum"] / n
        centred = np.maximum(a["sum_sq"] - a["sum"] * mean, 0.0)
        return n, mean, centred / (n - 1.0) / n
    exposure = a["exposure"]
    events = a["events"]
    return exposure, events / exposure, np.maximum(events, 0.5) / (exposure * exposure)


def _scalar(x: np.ndarray):
    return x[()] if isinstance(x, np.ndarray) and x.ndim == 0 else x


def effect(
    kind: str,
    control: Mapping,
    treatment: Mapping,
    *,
    scale: str = "difference",
    null: float = 0.0,
) -> Effect:
    """Effect of treatment over control from cumulative per-arm totals.

    Parameters
    ----------
    kind : {"binary", "continuous", "rate"}
        Metric kind.
    control, treatment : mapping
        Field name -> array-like of cumulative totals (see :data:`METRIC_FIELDS`;
        continuous totals may be ``n, mean, sd``). All arrays broadcast together;
        any shape, e.g. ``(replications, looks)``.
    scale : {"difference", "relative"}
        ``"difference"``: treatment mean minus control mean. ``"relative"``:
        treatment mean / control mean - 1 (for positive-valued metrics).
    null : float
        Null value of the effect on the chosen scale, used for `z`.

    Returns
    -------
    Effect
        Arrays of the broadcast shape (0-d inputs give numpy floats).

    Notes
    -----
    Variance estimator: unpooled, each arm's mean with its own plug-in variance
    (Wald / Welch), so ``se**2 = w_t + w_c`` on the difference scale with

    - binary: ``w = p (1 - p) / n``, ``p = successes / n``;
    - continuous: ``w = s**2 / n``, ``s**2 = (sum_sq - sum**2 / n) / (n - 1)``;
      ``(mean_t - mean_c) / se`` is exactly Welch's t statistic;
    - rate: ``w = events / exposure**2`` (Poisson count, variance equal to its mean).

    On the relative scale the standard error comes from the first-order delta
    method for a ratio of independent means,
    ``se**2 = w_t / m_c**2 + m_t**2 w_c / m_c**4``.

    Accuracy: these are large-sample approximations with relative error of order
    ``1/n`` in the variance; ``z`` is asymptotically standard normal under the null.
    They are poor when an arm has few successes or events, and the delta method
    is poor when the control mean is close to zero relative to its standard
    error (coefficient of variation of the control mean above about 0.1).

    Degenerate cases (never silent ``nan`` or ``inf`` in `z`):

    - 0 or ``n`` successes in a binary arm, or 0 events in a rate arm: the
      variance of that arm uses half a success/failure/event instead (zero-count
      floor); the estimate itself is unchanged. Thus ``se > 0`` always for these
      kinds.
    - A continuous metric with zero sample variance in both arms, or a relative
      effect with a control mean of 0: the flag ``degenerate`` is True, ``se`` is
      ``inf``, ``information`` and ``z`` are 0 (no evidence either way), and for a
      zero control mean on the relative scale the ``estimate`` is ``nan``.

    References
    ----------
    .. [1] Welch, B. L. (1947). The generalization of "Student's" problem when
       several different population variances are involved. Biometrika 34, 28-35.
    .. [2] Agresti, A. (2013). Categorical Data Analysis, 3rd ed., Wiley,
       Sec. 3.1 (Wald interval for a difference of proportions).
    .. [3] Casella, G. and Berger, R. L. (2002). Statistical Inference, 2nd ed.,
       Sec. 5.5.4 (the delta method).
    """
    kind = _check_kind(kind)
    scale = _check_scale(scale)
    null_value = checks.number("null", null)
    c = _arm_arrays(kind, control, "control")
    t = _arm_arrays(kind, treatment, "treatment")
    if kind in ("binary", "rate"):
        return _score_effect(kind, scale, null_value, c, t)
    n_c, m_c, w_c = _arm_mean_and_variance(kind, c)
    n_t, m_t, w_t = _arm_mean_and_variance(kind, t)
    n_c, m_c, w_c, n_t, m_t, w_t = np.broadcast_arrays(n_c, m_c, w_c, n_t, m_t, w_t)
    test_scale = test_scale_of(kind, scale)
    with np.errstate(divide="ignore", invalid="ignore"):
        if scale == "difference":
            est = m_t - m_c
            var = w_t + w_c
        else:
            inv = 1.0 / m_c
            ratio = m_t * inv
            est = ratio - 1.0
            var = (w_t + ratio * ratio * w_c) * (inv * inv)
        degenerate = ~(var > 0) | ~np.isfinite(var) | ~np.isfinite(est)
        est = np.where(np.isfinite(est), est, np.nan)
        se = np.where(degenerate, np.inf, np.sqrt(var))
        t_est, t_se = to_test_scale(est, se, test_scale)
        t_null = null_on_test_scale(null_value, test_scale)
        degenerate = degenerate | ~np.isfinite(t_se) | ~(t_se > 0)
        t_se = np.where(degenerate, np.inf, t_se)
        z = np.where(degenerate, 0.0, (t_est - t_null) / t_se)
        information = np.where(degenerate, 0.0, 1.0 / np.square(t_se))
    return Effect(
        estimate=_scalar(est),
        se=_scalar(se),
        test_estimate=_scalar(np.asarray(t_est, float)),
        test_se=_scalar(np.asarray(t_se, float)),
        z=_scalar(z),
        information=_scalar(information),
        n_control=_scalar(np.array(n_c, dtype=float)),
        n_treatment=_scalar(np.array(n_t, dtype=float)),
        control_value=_scalar(np.array(m_c, dtype=float)),
        treatment_value=_scalar(np.array(m_t, dtype=float)),
        scale=scale,
        degenerate=_scalar(degenerate),
        null=null_value,
        kind=kind,
        test_scale=test_scale,
        skewness=0.0,
        totals=(c, t),
        log_ratio_estimate=None if scale == "difference" else _scalar(np.asarray(t_est)),
        log_ratio_se=None if scale == "difference" else _scalar(np.asarray(t_se)),
    )


def _score_effect(kind: str, scale: str, null: float, c: dict[str, np.ndarray],
                  t: dict[str, np.ndarray]) -> Effect:
    """Binary and rate metrics: the skewness-corrected score statistic restricted to
    the null (see :mod:`seqtest.core.score` for the formulas and references)."""
    count, size = ("successes", "n") if kind == "binary" else ("events", "exposure")
    st = score._score(kind, scale, c[count], c[size], t[count], t[size], null, False)
    shape = np.shape(st.z)
    n_c = np.broadcast_to(np.asarray(c[size], float), shape)
    n_t = np.broadcast_to(np.asarray(t[size], float), shape)
    with np.errstate(divide="ignore", invalid="ignore"):
        m_c = np.broadcast_to(np.asarray(c[count], float), shape) / n_c
        m_t = np.broadcast_to(np.asarray(t[count], float), shape) / n_t
    degenerate = np.asarray(st.degenerate, bool)
    log_est = log_se = None
    if scale == "relative":
        log_est, log_se = score.log_ratio(st)
    return Effect(
        estimate=st.estimate,
        se=st.se,
        test_estimate=st.estimate,
        test_se=st.se,
        z=st.corrected_z,
        information=st.information,
        n_control=_scalar(np.array(n_c, dtype=float)),
        n_treatment=_scalar(np.array(n_t, dtype=float)),
        control_value=_scalar(np.array(m_c, dtype=float)),
        treatment_value=_scalar(np.array(m_t, dtype=float)),
        scale=scale,
        degenerate=_scalar(degenerate),
        null=null,
        kind=kind,
        test_scale=test_scale_of(kind, scale),
        skewness=st.skewness,
        totals=(c, t),
        log_ratio_estimate=log_est,
        log_ratio_se=log_se,
    )


# ---------------------------------------------------------------------------
# Per-unit variances for sample size
# ---------------------------------------------------------------------------

_UNIT_PARAMS = {"binary": "p", "continuous": "sd", "rate": "rate"}


def unit_variance(kind: str, **params: float) -> np.ndarray | float:
    """Variance of one observation, so that the variance of an arm mean is this / n.

    Parameters
    ----------
    kind : {"binary", "continuous", "rate"}
        Metric kind.
    **params
        Exactly one keyword: ``p`` (binary: success probability in [0, 1]),
        ``sd`` (continuous: standard deviation >= 0) or ``rate`` (rate: events per
        unit exposure >= 0). Array-likes are accepted.

    Returns
    -------
    ndarray or float
        ``p (1 - p)`` (one Bernoulli unit), ``sd**2`` (one unit) or ``rate`` (the
        events in one unit of exposure are Poisson with variance equal to the
        rate). With ``n`` units (or exposure) in an arm, the variance of its mean
        is ``unit_variance / n``; with allocation ``ratio = n_t / n_c`` the
        variance of the difference is ``(v_c + v_t / ratio) / n_c``, so reaching
        information ``I`` needs ``n_c = I * (v_c + v_t / ratio)``.
    """
    kind = _check_kind(kind)
    name = _UNIT_PARAMS[kind]
    if set(params) != {name}:
        raise InputError(f"unit_variance: got the parameters "
                         f"{', '.join(sorted(params)) or 'none'}; a {kind} metric takes "
                         f"exactly the parameter {name!r}")
    value = np.asarray(params[name], dtype=float)
    if kind == "binary":
        ok = (value >= 0) & (value <= 1)
        allowed = "a number in [0, 1]"
    else:
        ok = (value >= 0) & np.isfinite(value)
        allowed = "a finite number >= 0"
    if not np.all(ok):
        bad = value[~ok].flat[0] if value.ndim else value
        raise checks.fail(name, float(bad), allowed)
    if kind == "binary":
        return _scalar(value * (1.0 - value))
    if kind == "continuous":
        return _scalar(value * value)
    return _scalar(value.copy())


def arm_unit_variances(
    kind: str,
    control: float,
    treatment: float,
    *,
    scale: str = "difference",
) -> tuple[float, float]:
    """Per-unit variance contributions of each arm on the effect's scale.

    Parameters
    ----------
    kind : {"binary", "continuous", "rate"}
        Metric kind.
    control, treatment : float
        The per-arm mean that fixes the unit variance on the relative scale and,
        for binary and rate metrics, on both scales: ``p`` (binary), ``rate``
        (rate) or the mean (continuous).
    scale : {"difference", "relative"}
        Effect scale.

    Returns
    -------
    (u_c, u_t) : tuple of float
        Such that ``Var(estimate) = u_c / n_c + u_t / n_t``. On the difference
        scale these are :func:`unit_variance` of each arm (for a continuous metric
        pass the *sd* of each arm instead of the means). On the relative scale,
        by the delta method of :func:`effect`, ``u_t = v_t / m_c**2`` and
        ``u_c = m_t**2 v_c / m_c**4``; for a continuous metric on the relative
        scale pass ``(mean, sd)`` pairs as `control` and `treatment`.
    """
    kind = _check_kind(kind)
    scale = _check_scale(scale)
    name = _UNIT_PARAMS[kind]
    if kind == "continuous":
        if scale == "difference":
            v_c = float(unit_variance(kind, sd=control))
            return v_c, float(unit_variance(kind, sd=treatment))
        try:
            pair_c: Any = control
            pair_t: Any = treatment
            (m_c_in, sd_c), (m_t_in, sd_t) = pair_c, pair_t
        except (TypeError, ValueError):
            raise InputError(
                f"control, treatment: got {control!r} and {treatment!r}; allowed are "
                "(mean, sd) pairs for a continuous metric on the relative scale") from None
        v_c = float(unit_variance(kind, sd=sd_c))
        v_t = float(unit_variance(kind, sd=sd_t))
        m_c, m_t = float(m_c_in), float(m_t_in)
    else:
        v_c = float(unit_variance(kind, **{name: control}))
        v_t = float(unit_variance(kind, **{name: treatment}))
        m_c, m_t = float(control), float(treatment)
        if scale == "difference":
            return v_c, v_t
    if m_c == 0 or not math.isfinite(m_c):
        raise checks.fail("control", m_c, "a non-zero mean on the relative scale")
    return m_t * m_t * v_c / m_c**4, v_t / (m_c * m_c)


# ---------------------------------------------------------------------------
# Sample-ratio mismatch
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class SRMResult:
    """Result of :func:`srm_check`.

    Attributes
    ----------
    statistic : float
        Pearson chi-square statistic (1 degree of freedom).
    p_value : float
        Upper tail probability of the statistic.
    expected_share : float
        Planned share of units in the treatment arm, ``allocation / (1 + allocation)``.
    observed_share : float
        Observed share of units in the treatment arm.
    mismatch : bool
        ``p_value < threshold``.
    message : str
        Plain-language reading of the result.
    """

    statistic: float
    p_value: float
    expected_share: float
    observed_share: float
    mismatch: bool
    message: str


def _count(value: object, name: str) -> int:
    return checks.whole(name, value, lo=0)


def srm_check(
    n_control: int,
    n_treatment: int,
    allocation: float = 1.0,
    threshold: float = 0.001,
) -> SRMResult:
    """Sample-ratio mismatch check: are the arm counts consistent with the plan?

    Parameters
    ----------
    n_control, n_treatment : int
        Units assigned to each arm so far.
    allocation : float
        Planned treatment:control ratio (1 for an even split).
    threshold : float
        Flag a mismatch when the p-value is below this (0.001 is a common choice
        because the check is repeated at every look; common practice).

    Returns
    -------
    SRMResult

    Notes
    -----
    Pearson's chi-square goodness-of-fit test of the two counts against the
    planned shares ``1 / (1 + allocation)`` and ``allocation / (1 + allocation)``,
    with one degree of freedom; the p-value is the chi-square upper tail (``sf``).
    Accurate when both expected counts are at least about 5.

    References
    ----------
    .. [1] Pearson, K. (1900). On the criterion that a given system of deviations
       ... Philosophical Magazine 50, 157-175.
    """
    nc = _count(n_control, "n_control")
    nt = _count(n_treatment, "n_treatment")
    total = nc + nt
    if total == 0:
        raise InputError("n_control, n_treatment: got 0 and 0; allowed are counts with a "
                         "positive total")
    a = checks.number("allocation", allocation, lo=0.0, lo_open=True)
    thr = checks.probability("threshold", threshold)
    expected_share = a / (1.0 + a)
    e_t = total * expected_share
    e_c = total - e_t
    statistic = (nc - e_c) ** 2 / e_c + (nt - e_t) ** 2 / e_t
    p_value = float(special.chdtrc(1, statistic))  # chi-square(1) survival function
    observed_share = nt / total
    mismatch = p_value < thr
    shares = (
        f"treatment has {observed_share:.2%} of {total:,} units where "
        f"{expected_share:.2%} was planned (chi-square {statistic:.3g}, p = {p_value:.3g})"
    )
    if mismatch:
        message = (
            f"Sample ratio mismatch: {shares}, below the threshold {thr:g}. The units "
            "did not split between the arms as planned, which points to a problem in "
            "assignment, logging or filtering; the arms may not be comparable, so do "
            "not trust the effect estimate or the decision until the cause is found."
        )
    else:
        message = (
            f"No sample ratio mismatch: {shares}, not below the threshold {thr:g}."
        )
    return SRMResult(
        statistic=float(statistic),
        p_value=p_value,
        expected_share=expected_share,
        observed_share=observed_share,
        mismatch=bool(mismatch),
        message=message,
    )


# ---------------------------------------------------------------------------
# Where the normal approximation is poor
# ---------------------------------------------------------------------------

#: Smallest count of successes and of failures (binary), of events (rate), and of
#: units (continuous) per arm below which a look is flagged (common practice: the
#: normal approximation of a proportion wants at least about 5 to 10 of each; a mean of
#: skewed values wants a few dozen units).
SMALL_COUNTS = {"binary": 5, "rate": 5, "continuous": 30}


def small_sample(kind: str, arms: Mapping[str, Mapping[str, np.ndarray]]) -> np.ndarray:
    """Per look, whether an arm is below :data:`SMALL_COUNTS` (see there).

    ``arms`` is what :func:`validate_looks` returns.
    """
    kind = _check_kind(kind)
    limit = SMALL_COUNTS[kind]
    flags = None
    for totals in arms.values():
        if kind == "binary":
            low = np.minimum(totals["successes"], totals["n"] - totals["successes"]) < limit
        elif kind == "rate":
            low = totals["events"] < limit
        else:
            low = totals["n"] < limit
        flags = low if flags is None else flags | low
    assert flags is not None
    return np.asarray(flags, bool)


def small_sample_message(kind: str, looks: Sequence[int]) -> str:
    """The warning for looks flagged by :func:`small_sample` (1-based numbers)."""
    what = {"binary": "fewer than 5 successes or 5 failures in an arm",
            "rate": "fewer than 5 events in an arm",
            "continuous": "fewer than 30 units in an arm"}[_check_kind(kind)]
    which = ", ".join(str(k) for k in looks)
    return (f"look{'s' if len(looks) > 1 else ''} {which}: {what}, where the normal "
            "approximation behind the z statistic, the boundaries and the intervals is "
            "poor (common practice asks for at least about 5 to 10 successes and failures, "
            "or events, per arm, and a few dozen units for skewed values); the error rates "
            "and intervals are approximate there. Check the plan at these sizes with "
            "`seqtest simulate`.")
