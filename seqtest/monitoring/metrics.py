"""Per-arm cumulative totals -> effect estimate, standard error, z and information.

Two arms are compared, ``"control"`` and ``"treatment"``; the effect is always
treatment relative to control. Six kinds of metric are supported, each with its
canonical cumulative totals (see :data:`METRIC_FIELDS`):

``"binary"``
    ``n`` (units observed), ``successes`` (units with the outcome).
``"continuous"``
    ``n``, ``sum`` (sum of the values), ``sum_sq`` (sum of the squared values);
    ``n``, ``mean``, ``sd`` (sample standard deviation with divisor ``n - 1``) are
    accepted as well and converted.
``"rate"``
    ``exposure`` (e.g. user-days), ``events`` (count of events); the rate is
    ``events / exposure``, its variance Poisson's. Optional ``events_sq``, the sum of
    the squared per-unit counts when each unit brings one unit of exposure (then
    ``exposure`` counts the units), lets the dispersion be checked
    (:func:`dispersion_check`).
``"ratio"``
    A sum over a sum per randomisation unit (revenue per session when users are
    randomised): ``n`` (units), ``numerator`` and ``denominator`` (their sums over the
    units), ``numerator_sq`` and ``denominator_sq`` (sums of the squared per-unit
    values), ``cross`` (sum of the per-unit products numerator x denominator). The
    metric is ``numerator / denominator``; per-unit denominators are >= 0.
``"adjusted"``
    A continuous metric ``y`` with a pre-period covariate ``x`` per unit (usually the
    same metric before the experiment): ``n``, ``sum``, ``sum_sq`` (of ``y``),
    ``covariate``, ``covariate_sq`` (sums of ``x`` and ``x^2``), ``cross`` (sum of
    ``x y``). The effect is the regression-adjusted difference of means.
``"count"``
    Events per unit with a variance that does not assume Poisson: ``n`` (units),
    ``events`` (their sum), ``events_sq`` (sum of the squared per-unit counts).

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
    "dispersion_check",
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
    "ratio": ("n", "numerator", "denominator", "numerator_sq", "denominator_sq", "cross"),
    "adjusted": ("n", "sum", "sum_sq", "covariate", "covariate_sq", "cross"),
    "count": ("n", "events", "events_sq"),
}

#: Alternative totals accepted for a kind (converted to the canonical ones).
ALTERNATIVE_FIELDS: dict[str, tuple[str, ...]] = {
    "continuous": ("n", "mean", "sd"),
}

#: Totals a kind accepts besides its canonical ones: given for every arm at every look
#: or not at all.
OPTIONAL_FIELDS: dict[str, tuple[str, ...]] = {
    "rate": ("events_sq",),
}

assert tuple(METRIC_FIELDS) == METRIC_KINDS

# Largest absolute value accepted for any total (counts, sums, sums of squares).
MAX_TOTAL = 1e30

# Totals that are counts of units or events: whole numbers, never negative.
_WHOLE_FIELDS = frozenset({"n", "successes", "events", "events_sq"})
# Totals that are never negative (sums of squares, exposure, per-unit denominators).
_NONNEGATIVE_FIELDS = frozenset({"exposure", "sd", "denominator", "numerator_sq",
                                 "denominator_sq", "covariate_sq"})
# Totals that can only grow from one look to the next, per kind (sums of squares of
# the new kinds too: each unit adds a square).
_MONOTONE_FIELDS: dict[str, tuple[str, ...]] = {
    "binary": ("n", "successes"),
    "continuous": ("n",),
    "rate": ("exposure", "events", "events_sq"),
    "ratio": ("n", "denominator", "numerator_sq", "denominator_sq"),
    "adjusted": ("n", "sum_sq", "covariate_sq"),
    "count": ("n", "events", "events_sq"),
}
# Kinds whose z is the unpooled (Welch-type) statistic of two means with their own
# variances: everything but the score-tested binary and rate metrics.
MEAN_KINDS = ("continuous", "ratio", "adjusted", "count")
# Units needed per arm to estimate a per-unit variance.
_MIN_UNITS = {"binary": 1, "continuous": 2, "rate": 0, "ratio": 2, "adjusted": 2, "count": 2}


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
    if kind in OPTIONAL_FIELDS:
        text += f", and optionally {', '.join(OPTIONAL_FIELDS[kind])}"
    return text


def _hint(kind: str, unknown: Sequence[str]) -> str:
    """Which kind the unknown fields belong to, when that is clear."""
    owners = [k for k, f in METRIC_FIELDS.items()
              if k != kind and set(unknown) <= set(f) | set(OPTIONAL_FIELDS.get(k, ()))]
    if not owners:
        return ""
    what = "is a total" if len(unknown) == 1 else "are totals"
    article = "an" if owners[0][0] in "aeiou" else "a"
    return f" ({', '.join(unknown)} {what} of {article} {' or '.join(owners)} metric)"


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
    """Which field set (canonical or alternative, with the optional fields given) an
    arm's totals use."""
    keys = set(totals)
    canonical = METRIC_FIELDS[kind]
    alternative = ALTERNATIVE_FIELDS.get(kind, ())
    optional = OPTIONAL_FIELDS.get(kind, ())
    allowed = set(canonical) | set(alternative) | set(optional)
    unknown = sorted(str(k) for k in keys - allowed)
    if unknown:
        raise LookDataError(
            f"unknown field{'s' if len(unknown) > 1 else ''} {', '.join(unknown)}; "
            f"a {kind} metric expects {_expected_text(kind)}{_hint(kind, unknown)}",
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
    return tuple(fields) + tuple(f for f in optional if f in keys)


def _square_floor(v: Mapping[str, float], total: str, square: str, n: float, look: int,
                  arm: str) -> float:
    """The centred sum of squares ``square - total^2 / n``; refuses a negative one
    beyond rounding (of the order of the float precision of the larger term)."""
    floor = v[total] * v[total] / n
    sq = v[square]
    if sq < floor - 1e-9 * max(abs(sq), floor, 1.0):
        raise LookDataError(
            f"{_fmt(sq)} is below {total}^2 / n = {_fmt(floor)}, which would make the "
            "variance negative; the sums are impossible together",
            look=look, arm=arm, field=square)
    return max(sq - floor, 0.0)


def _check_cross(v: Mapping[str, float], names: tuple[str, str], squares: tuple[float, float],
                 n: float, look: int, arm: str) -> None:
    """The centred cross product must satisfy Cauchy-Schwarz with the centred sums of
    squares (a covariance matrix cannot have a negative variance in any direction)."""
    a, b = names
    cov = v["cross"] - v[a] * v[b] / n
    bound = math.sqrt(squares[0] * squares[1])
    scale = max(abs(v["cross"]), abs(v[a] * v[b] / n), 1.0)
    if abs(cov) > bound + 1e-9 * scale:
        raise LookDataError(
            f"{_fmt(v['cross'])} gives a centred cross product {_fmt(cov)} beyond "
            f"sqrt({a} and {b} centred sums of squares) = {_fmt(bound)}: a correlation "
            "above 1 in absolute value, which makes the variance of a combination "
            "negative; the sums are impossible together",
            look=look, arm=arm, field="cross")


def _canonical_arm(kind: str, totals: Mapping, look: int, arm: str) -> dict[str, float]:
    """Check one arm at one look and return its canonical totals (and the optional ones
    given)."""
    fields = _arm_fields(kind, totals, look, arm)
    v = {f: _number(totals[f], look, arm, f) for f in fields}
    for f, x in v.items():
        if f in _WHOLE_FIELDS or f in _NONNEGATIVE_FIELDS or f == "n":
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
        if "events_sq" in v:
            _check_unit_counts(v, v["exposure"], look, arm, "exposure")
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
    if n < 2:
        raise LookDataError(
            f"n is 1; a {kind} metric needs at least 2 units per arm to estimate "
            "the variance",
            look=look,
            arm=arm,
            field="n",
        )
    if kind == "continuous" and "mean" in v:
        mean, sd = v["mean"], v["sd"]
        total = n * mean
        return {"n": n, "sum": total, "sum_sq": (n - 1.0) * sd * sd + total * mean}
    if kind == "continuous":
        _square_floor(v, "sum", "sum_sq", n, look, arm)
    elif kind == "count":
        _check_unit_counts(v, n, look, arm, "n")
    elif kind == "ratio":
        if v["denominator"] == 0:
            raise LookDataError(
                "denominator is 0; a ratio metric needs a positive denominator total in "
                "every arm at every look", look=look, arm=arm, field="denominator")
        sx = _square_floor(v, "numerator", "numerator_sq", n, look, arm)
        sy = _square_floor(v, "denominator", "denominator_sq", n, look, arm)
        _check_cross(v, ("numerator", "denominator"), (sx, sy), n, look, arm)
    else:  # adjusted
        sy = _square_floor(v, "sum", "sum_sq", n, look, arm)
        sx = _square_floor(v, "covariate", "covariate_sq", n, look, arm)
        _check_cross(v, ("sum", "covariate"), (sy, sx), n, look, arm)
    return v


def _check_unit_counts(v: Mapping[str, float], n: float, look: int, arm: str,
                       size: str) -> None:
    """``events_sq`` of whole per-unit counts: at least ``events`` (``k^2 >= k``) and
    at least ``events^2 / n`` (a variance >= 0); ``n`` whole."""
    if not float(n).is_integer():
        raise LookDataError(
            f"{_fmt(n)} is not a whole number; with events_sq the {size} counts the "
            "units (one unit of exposure each)", look=look, arm=arm, field=size)
    if v["events_sq"] < v["events"]:
        raise LookDataError(
            f"{_fmt(v['events_sq'])} is below events = {_fmt(v['events'])}; whole counts "
            "have squares at least as large, so the sums are impossible together",
            look=look, arm=arm, field="events_sq")
    _square_floor(v, "events", "events_sq", n, look, arm)


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
        fields; values that are not finite numbers; negative counts, exposure,
        denominators or sums of squares; counts that are not whole numbers;
        successes above n; n of 0 (or 1 for a metric with a per-unit variance) or
        exposure of 0; a ratio metric's denominator total of 0; a negative sd; sums
        of squares impossible given the sums (``sum_sq`` below ``sum^2 / n``, a
        cross product beyond Cauchy-Schwarz: a negative variance); ``events_sq``
        below ``events``; an optional total given for one arm or look and not
        another (a covariate or squared counts posted for one arm only); a total
        that can only grow (units, events, exposure, denominators, sums of squares)
        smaller than at the previous look; unknown or missing arms.
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
    optional: tuple[str, ...] | None = None   # the optional totals given, set by look 1
    first_seen = ""
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
            given = tuple(f for f in OPTIONAL_FIELDS.get(kind, ()) if f in values)
            if optional is None:
                optional, first_seen = given, f"{arm} at look {i}"
                for f in given:
                    for a in ARMS:
                        out[a][f] = []
            elif given != optional:
                odd = sorted(set(given) ^ set(optional))
                has = "has" if set(odd) <= set(given) else "lacks"
                raise LookDataError(
                    f"{has} {', '.join(odd)} where {first_seen} "
                    f"{'does not' if has == 'has' else 'does'}; give "
                    f"{', '.join(odd)} for every arm at every look, or not at all",
                    look=i, arm=arm, field=odd[0])
            for f in _MONOTONE_FIELDS[kind]:
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
            for f in (*METRIC_FIELDS[kind], *given):
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
    fields = (*fields, *(f for f in OPTIONAL_FIELDS.get(kind, ()) if f in totals))
    arrays = {f: np.asarray(totals[f], dtype=float) for f in fields}
    size_field = "exposure" if kind == "rate" else "n"
    size = arrays[size_field]
    need = _MIN_UNITS[kind]
    bad = ~(size >= need) if need >= 2 else ~(size > 0)
    if np.any(bad):
        first = size[bad].flat[0] if size.ndim else size
        allowed = f"at least {need}" if need >= 2 else "positive"
        raise InputError(f"{name}.{size_field}: got {_fmt(float(first))}; allowed is {allowed}")
    if kind == "ratio":
        den = arrays["denominator"]
        bad = ~(den > 0)
        if np.any(bad):
            first = den[bad].flat[0] if den.ndim else den
            raise InputError(f"{name}.denominator: got {_fmt(float(first))}; allowed is a "
                             "positive total (a ratio needs a denominator)")
    if "mean" in arrays:
        n = arrays["n"]
        total = n * arrays["mean"]
        arrays = {
            "n": n,
            "sum": total,
            "sum_sq": (n - 1.0) * arrays["sd"] ** 2 + total * arrays["mean"],
        }
    return arrays


def _centred(a: Mapping[str, np.ndarray], total: str, square: str) -> np.ndarray:
    """``square - total^2 / n`` (>= 0: rounding below 0 is clipped)."""
    return np.maximum(a[square] - a[total] * (a[total] / a["n"]), 0.0)


def _means_and_variances(kind: str, c: Mapping[str, np.ndarray], t: Mapping[str, np.ndarray]
                         ) -> tuple[np.ndarray, ...]:
    """``(n_c, m_c, w_c, n_t, m_t, w_t)``: per-arm units, the arm's value (mean, ratio,
    or adjusted mean) and the estimated variance of that value, for the kinds tested
    by the unpooled statistic of two means (:data:`MEAN_KINDS`; binary and rate only
    for the first release's Wald statistics).

    - continuous: the mean, ``w = s^2 / n`` with ``s^2`` the sample variance;
    - count: the same for the per-unit counts (a variance that does not assume
      Poisson: see :func:`effect`);
    - ratio: ``R = sum(x) / sum(y)`` with the delta-method variance (Deng, Knoblich and
      Lu 2018) ``w = (s_xx - 2 R s_xy + R^2 s_yy) / (n mean(y)^2)``, the sample
      variance of the per-unit residuals ``x - R y`` (which sum to 0) over
      ``n mean(y)^2``;
    - adjusted: the regression-adjusted mean ``mean(y) - theta (mean(x) - xbar)`` with
      ``theta`` the within-arm pooled slope of ``y`` on ``x`` and ``xbar`` the mean of
      ``x`` over both arms, ``w = s^2(y - theta x) / n`` (Deng, Xu, Kohavi and Walker
      2013, ``theta`` treated as known).
    """
    if kind == "adjusted":
        cyy = [_centred(a, "sum", "sum_sq") for a in (c, t)]
        cxx = [_centred(a, "covariate", "covariate_sq") for a in (c, t)]
        cxy = [a["cross"] - a["sum"] * (a["covariate"] / a["n"]) for a in (c, t)]
        sxx = cxx[0] + cxx[1]
        # a covariate without variation carries nothing: no adjustment (a centred sum
        # below 1e-10 of the raw one is rounding: the sums cancel to that precision)
        varies = sxx > 1e-10 * (c["covariate_sq"] + t["covariate_sq"])
        with np.errstate(divide="ignore", invalid="ignore"):
            theta = np.where(varies, (cxy[0] + cxy[1]) / np.where(varies, sxx, 1.0), 0.0)
        xbar = (c["covariate"] + t["covariate"]) / (c["n"] + t["n"])
        out: list[np.ndarray] = []
        for a, yy, xx, xy in zip((c, t), cyy, cxx, cxy, strict=True):
            n = a["n"]
            mean = a["sum"] / n - theta * (a["covariate"] / n - xbar)
            resid = np.maximum(yy - 2.0 * theta * xy + theta * theta * xx, 0.0)
            out += [n, mean, resid / (n - 1.0) / n]
        return tuple(out)
    return (*_arm_mean_and_variance(kind, c), *_arm_mean_and_variance(kind, t))


def _arm_mean_and_variance(kind: str, a: Mapping[str, np.ndarray]
                           ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per-arm value and the estimated variance of that value (all kinds but adjusted,
    which pools across arms: see :func:`_means_and_variances`)."""
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
    if kind == "count":
        n = a["n"]
        return n, a["events"] / n, _centred(a, "events", "events_sq") / (n - 1.0) / n
    if kind == "ratio":
        n = a["n"]
        x, y = a["numerator"], a["denominator"]
        ratio = x / y
        # sum of (x_i - R y_i)^2 = Sxx - 2 R Sxy + R^2 Syy (the residuals sum to 0);
        # written with centred sums, which lose fewer digits
        cxx = _centred(a, "numerator", "numerator_sq")
        cyy = _centred(a, "denominator", "denominator_sq")
        cxy = a["cross"] - x * (y / n)
        resid = np.maximum(cxx - 2.0 * ratio * cxy + ratio * ratio * cyy, 0.0)
        mean_y = y / n
        return n, ratio, resid / (n - 1.0) / n / (mean_y * mean_y)
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
    kind : {"binary", "continuous", "rate", "ratio", "adjusted", "count"}
        Metric kind.
    control, treatment : mapping
        Field name -> array-like of cumulative totals (see :data:`METRIC_FIELDS`;
        continuous totals may be ``n, mean, sd``). All arrays broadcast together;
        any shape, e.g. ``(replications, looks)``.
    scale : {"difference", "relative"}
        ``"difference"``: treatment value minus control value. ``"relative"``:
        treatment / control - 1 (for positive-valued metrics).
    null : float
        Null value of the effect on the chosen scale, used for `z` (the margin of a
        non-inferiority or superiority-by-a-margin test; 0 for no effect).

    Returns
    -------
    Effect
        Arrays of the broadcast shape (0-d inputs give numpy floats).

    Notes
    -----
    Binary and rate metrics: the score statistic restricted to the null, with the
    skewness correction (:mod:`seqtest.core.score`).

    The other kinds (:data:`MEAN_KINDS`): each arm's value ``m`` with its own
    estimated variance ``w`` (unpooled, Welch type), ``se**2 = w_t + w_c`` on the
    difference scale and ``z = (estimate - null) / se``, with

    - continuous: ``w = s**2 / n``, ``s**2 = (sum_sq - sum**2 / n) / (n - 1)``;
      ``(mean_t - mean_c) / se`` is exactly Welch's t statistic;
    - count: the same on the per-unit counts, ``s**2 = (events_sq - events**2 / n) /
      (n - 1)``: the robust (sandwich) variance of the mean count, which holds
      whatever the counts' variance (Poisson or over-dispersed: negative binomial,
      zero-inflated, ...), where the Poisson variance of a rate metric is too small
      for over-dispersed counts (Huber 1967; White 1980; for counts Cameron and
      Trivedi 2013, sec. 3.2.3);
    - ratio: ``m = numerator / denominator`` and the delta-method variance of a ratio
      of two means over the same units (Deng, Knoblich and Lu 2018, KDD, eq. for
      ``Var(X_bar / Y_bar)``), ``w = (s_x**2 - 2 R s_xy + R**2 s_y**2) / (n mu_y**2)``
      with sample (co)variances of the per-unit numerators ``x`` and denominators
      ``y``; it accounts for units contributing several denominators (sessions of
      one user are not independent);
    - adjusted: the regression adjustment with a pre-period covariate ``x`` (Deng, Xu,
      Kohavi and Walker 2013, WSDM): ``theta`` is the slope of ``y`` on ``x`` pooled
      within the arms, ``sum_a c_xy,a / sum_a c_xx,a`` (centred sums per arm: the
      treatment's shift of ``y`` does not enter it), each arm's value is
      ``mean(y) - theta (mean(x) - xbar)`` (``xbar`` over both arms, so the
      difference is ``(ybar_t - ybar_c) - theta (xbar_t - xbar_c)``: exactly the
      treatment coefficient of least squares of ``y`` on a treatment indicator and
      ``x``), and ``w = s**2(y - theta x) / n`` per arm (``theta`` taken as known,
      as in the reference; its own uncertainty adds a relative ``O(1/n)``), which is
      ``(1 - rho**2)`` times the unadjusted variance for a correlation ``rho``.

    On the relative scale the standard error comes from the first-order delta
    method for a ratio of independent arm values,
    ``se**2 = w_t / m_c**2 + m_t**2 w_c / m_c**4``, and the test runs on the log ratio
    (:mod:`seqtest.core.scales`).

    Accuracy: these are large-sample approximations with relative error of order
    ``1/n`` in the variance; ``z`` is asymptotically standard normal under the null.
    They are poor when an arm has few successes or events, and the delta method
    is poor when the control value is close to zero relative to its standard
    error (coefficient of variation of the control value above about 0.1).

    Degenerate cases (never silent ``nan`` or ``inf`` in `z`):

    - 0 or ``n`` successes in a binary arm, or 0 events in a rate arm: the
      variance of that arm uses half a success/failure/event instead (zero-count
      floor); the estimate itself is unchanged. Thus ``se > 0`` always for these
      kinds.
    - Zero estimated variance in both arms (continuous, count, ratio, adjusted), or a
      relative effect with a control value of 0: the flag ``degenerate`` is True,
      ``se`` is ``inf``, ``information`` and ``z`` are 0 (no evidence either way),
      and for a zero control value on the relative scale the ``estimate`` is ``nan``.

    References
    ----------
    .. [1] Welch, B. L. (1947). The generalization of "Student's" problem when
       several different population variances are involved. Biometrika 34, 28-35.
    .. [2] Casella, G. and Berger, R. L. (2002). Statistical Inference, 2nd ed.,
       Sec. 5.5.4 (the delta method).
    .. [3] Deng, A., Knoblich, U. and Lu, J. (2018). Applying the delta method in
       metric analytics: a practical guide with novel ideas. KDD 2018, 233-242.
    .. [4] Deng, A., Xu, Y., Kohavi, R. and Walker, T. (2013). Improving the
       sensitivity of online controlled experiments by utilizing pre-experiment
       data. WSDM 2013, 123-132.
    .. [5] White, H. (1980). A heteroskedasticity-consistent covariance matrix
       estimator and a direct test for heteroskedasticity. Econometrica 48, 817-838.
    .. [6] Cameron, A. C. and Trivedi, P. K. (2013). Regression Analysis of Count
       Data, 2nd ed., Cambridge University Press, sec. 3.2.
    """
    kind = _check_kind(kind)
    scale = _check_scale(scale)
    null_value = checks.number("null", null)
    c = _arm_arrays(kind, control, "control")
    t = _arm_arrays(kind, treatment, "treatment")
    if kind in ("binary", "rate"):
        return _score_effect(kind, scale, null_value, c, t)
    n_c, m_c, w_c, n_t, m_t, w_t = np.broadcast_arrays(*_means_and_variances(kind, c, t))
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
    kind = str(checks.choice("kind", kind, tuple(_UNIT_PARAMS)))
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
    kind = str(checks.choice("kind", kind, tuple(_UNIT_PARAMS)))
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
#: units (the other kinds) per arm below which a look is flagged (common practice: the
#: normal approximation of a proportion wants at least about 5 to 10 of each; a mean of
#: skewed values, a ratio or an adjusted mean wants a few dozen units).
SMALL_COUNTS = {"binary": 5, "rate": 5, "continuous": 30, "ratio": 30, "adjusted": 30,
                "count": 30}


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
    kind = _check_kind(kind)
    what = {"binary": "fewer than 5 successes or 5 failures in an arm",
            "rate": "fewer than 5 events in an arm"}.get(
                kind, f"fewer than {SMALL_COUNTS[kind]} units in an arm")
    which = ", ".join(str(k) for k in looks)
    return (f"look{'s' if len(looks) > 1 else ''} {which}: {what}, where the normal "
            "approximation behind the z statistic, the boundaries and the intervals is "
            "poor (common practice asks for at least about 5 to 10 successes and failures, "
            "or events, per arm, and a few dozen units for skewed values); the error rates "
            "and intervals are approximate there. Check the plan at these sizes with "
            "`seqtest simulate`.")


# ---------------------------------------------------------------------------
# Counts that vary more than Poisson
# ---------------------------------------------------------------------------

#: A rate metric's look is flagged when an arm's dispersion index (sample variance of
#: the per-unit counts over their mean) is above this AND the Poisson dispersion test
#: rejects at :data:`DISPERSION_P`. At an index D the Poisson z is too large by
#: ``sqrt(D)``: a nominal two-sided 0.05 test rejects ``2 Phi(-1.96 / sqrt(D))``, 0.062
#: at D = 1.1 (and 0.17 at D = 2), so 1.1 is where the error rate visibly departs.
DISPERSION_LIMIT = 1.1
#: The level of the dispersion test (chi-square with n - 1 degrees of freedom of
#: ``(n - 1) D`` under Poisson counts; Fisher 1950, Cochran 1954); small because the
#: check is repeated at every look and arm.
DISPERSION_P = 0.001


@dataclass(frozen=True)
class DispersionCheck:
    """Result of :func:`dispersion_check` per look (arrays over the looks).

    Attributes
    ----------
    index_control, index_treatment : ndarray
        Dispersion index per arm: sample variance of the per-unit counts over their
        mean (1 for Poisson counts; ``nan`` with no events).
    p_control, p_treatment : ndarray
        Upper-tail p-value of the dispersion test per arm.
    flagged : ndarray of bool
        An arm's index is above :data:`DISPERSION_LIMIT` with its p-value below
        :data:`DISPERSION_P`.
    """

    index_control: np.ndarray
    index_treatment: np.ndarray
    p_control: np.ndarray
    p_treatment: np.ndarray
    flagged: np.ndarray


def dispersion_check(arms: Mapping[str, Mapping[str, np.ndarray]]) -> DispersionCheck | None:
    """Do a rate metric's counts vary more than Poisson? (None without ``events_sq``.)

    ``arms`` is what :func:`validate_looks` returns for a rate metric; ``events_sq`` is
    the sum of the squared per-unit counts, each unit with one unit of exposure, so
    ``exposure`` is the number of units ``n``. Per arm, the index is
    ``D = s^2 / mean`` with ``s^2 = (events_sq - events^2 / n) / (n - 1)``, and the
    Poisson dispersion test refers ``(n - 1) D`` to chi-square with ``n - 1`` degrees
    of freedom (Fisher's index of dispersion; Cochran 1954, Biometrics 10, 417-451),
    upper tail by ``scipy.special.chdtrc``. Units with unequal exposure inflate the
    index even for Poisson counts: use a ratio metric (events over exposure per unit)
    for them.
    """
    if any("events_sq" not in a for a in arms.values()):
        return None
    idx, pv = [], []
    for arm in ARMS:
        a = arms[arm]
        n = np.asarray(a["exposure"], float)
        ev = np.asarray(a["events"], float)
        with np.errstate(divide="ignore", invalid="ignore"):
            var = np.maximum(a["events_sq"] - ev * ev / n, 0.0) / (n - 1.0)
            d = np.where((ev > 0) & (n > 1), var / (ev / n), np.nan)
            df = np.maximum(n - 1.0, 1.0)
            p = np.where(np.isfinite(d), special.chdtrc(df, df * np.nan_to_num(d)), 1.0)
        idx.append(d)
        pv.append(p)
    flagged = np.zeros(np.shape(idx[0]), bool)
    for d, p in zip(idx, pv, strict=True):
        flagged |= (np.nan_to_num(d) > DISPERSION_LIMIT) & (p < DISPERSION_P)
    return DispersionCheck(idx[0], idx[1], pv[0], pv[1], flagged)


def dispersion_message(check: DispersionCheck, looks: Sequence[int]) -> str:
    """The warning for looks flagged by :func:`dispersion_check` (1-based numbers)."""
    j = int(looks[-1]) - 1
    d = max(float(np.nan_to_num(check.index_control[j])),
            float(np.nan_to_num(check.index_treatment[j])))
    leak = 2.0 * float(special.ndtr(-1.959963984540054 / math.sqrt(d)))
    which = ", ".join(str(k) for k in looks)
    return (f"look{'s' if len(looks) > 1 else ''} {which}: the counts vary more than "
            f"Poisson (dispersion index {d:.2f} at look {j + 1}, above "
            f"{DISPERSION_LIMIT:g} with a dispersion test p below {DISPERSION_P:g}); a "
            "rate metric's Poisson variance is then too small, so z is too large and the "
            f"error rates do not hold (a nominal two-sided 0.05 test rejects about "
            f"{leak:.2f} at this index). Post the totals as a count metric (n, events, "
            "events_sq), whose variance does not assume Poisson.")
