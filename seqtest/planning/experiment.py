"""Experiments with one control, 1 to 8 treatment arms and several metrics: the plan.

An experiment compares each treatment arm with the shared control on each of its
metrics. A *comparison* is one treatment against the control on one metric; its
statistics and boundaries are those of a two-arm group-sequential plan
(:class:`~seqtest.planning.design.Plan`), and a one-treatment, one-metric experiment's
comparison plan *is* the two-arm plan :func:`~seqtest.planning.design.design` makes
from the same arguments.

Roles of metrics
----------------
``primary``
    What the experiment hopes to move. Each (arm, primary metric) pair is a
    *hypothesis*: "the arm is no better than the control by more than the margin".
    The family-wise error over all of them (all arms, all primaries, all looks) is
    held at ``alpha`` in the strong sense, by one of two methods:

    ``graphical`` (default)
        Weighted Bonferroni with alpha passed on along a graph (Bretz, Maurer,
        Brannath and Posch 2009; group-sequential form: Maurer and Bretz 2013).
        Hypothesis ``h`` starts with the local level ``alpha * w_h`` (weights equal
        by default) and its own error-spending boundaries at that level; when it is
        rejected its level goes to the others along the graph's transitions (equal
        split by default), whose boundaries are recomputed at the same looks with
        their larger level. Each hypothesis' error at its level is that of a two-arm
        test, so by Bonferroni's inequality over the true nulls the family-wise error
        is at most ``alpha`` (the graph's levels only grow as false nulls are
        rejected: Maurer and Bretz 2013, theorem 1). Several primary metrics are
        hypotheses of the same graph: the error is split across them by the weights.
    ``dunnett``
        One primary metric; common boundaries for all comparisons from the joint
        distribution of the comparisons, which share the control
        (:mod:`seqtest.core.multiarm`: Dunnett 1955; Follmann, Proschan and Geller
        1994; Magirr, Jaki and Whitehead 2012). More power than Bonferroni at the
        same family-wise error; no alpha is passed on.

``guardrail``
    A metric that must not be hurt: each (arm, guardrail) pair has a one-sided harm
    test (harm: the metric moves in its worse direction by more than the margin) at
    the guardrail's own ``alpha`` with its own spending function. This error is not
    part of the primaries' family-wise error: it is the chance of stopping an arm
    for harm it does not do, at most ``alpha_g`` per arm and guardrail, so at most
    ``k * sum(alpha_g)`` that some arm is stopped for harm falsely (Bonferroni;
    :attr:`ExperimentPlan.errors`). An arm wins only with no guardrail crossed.

Which way is good, margins and mde
----------------------------------
Every metric is described as a two-arm plan's
(:func:`seqtest.planning.sizing.check_metric`, whose rules check it): ``better``
(``higher``, the default for a primary, or ``lower``; required for a guardrail),
``margin`` the *signed* null value of the effect (treatment minus control, or relative
lift) on the metric's scale (default 0), and ``mde`` the signed effect the test is
powered for. A primary states its ``hypothesis``: ``superiority`` (default; a margin
0 or on the better side) or ``non_inferiority`` (a margin on the worse side); a
non-zero margin needs it stated, and the mde lies on the better side of the margin.
A guardrail is a one-sided harm test: its ``margin`` is the harm tolerated (0 or on
the worse side of 0), its ``mde`` the harm to detect (on the worse side of the
margin); it takes no ``hypothesis``. Its two-arm plan is that of a superiority test
with the better side flipped (so the same rules check it).

Sizing
------
Users per arm (exposure for rate metrics) are the control's maximum times the
allocations. ``power_for="each"``: the control's maximum is the largest any primary
comparison needs to have the requested power at its mde, tested at its *initial*
level (graphical: alpha passed on later only adds power, so this is a lower bound on
each comparison's power; Dunnett: the comparison's power at the common boundaries,
exact). ``power_for="any"``: the smallest maximum at which at least one arm rejects
with the requested power when every arm has the mde, computed jointly over the arms
(:func:`seqtest.core.multiarm.any_arm_drift`; for the graphical method at the
common initial boundaries of equally weighted hypotheses, which ignores alpha passed
on and so is conservative); with unequal weights, or across several primary metrics
(whose joint law is unknown), the conservative rule "the comparison (or metric) that
needs the fewest users alone has the power" is used. Metrics of the same units
(exposure for rates, users for every other kind) share the maximum; a
guardrail with a ``power`` of its own enters it too, and every comparison's power at
the plan's sizes is reported (``planned_power``).

Every kind of metric of a two-arm plan may be used (binary, continuous, rate, ratio,
adjusted, count). Each comparison's size is that of its two-arm plan
(:func:`~seqtest.planning.sizing.max_control` on the comparison's two-arm metric,
margin included: exactly for continuous-type metrics, the score test's null and
alternative variances at the margin for binary and rate metrics), and its planned
power the inverse (:func:`~seqtest.planning.sizing.power_at`).

References
----------
.. [1] Bretz, F., Maurer, W., Brannath, W. and Posch, M. (2009). A graphical approach
       to sequentially rejective multiple test procedures. Statistics in Medicine 28,
       586-604.
.. [2] Maurer, W. and Bretz, F. (2013). Multiple testing in group sequential trials
       using graphical approaches. Statistics in Biopharmaceutical Research 5,
       311-320.
.. [3] Dunnett, C. W. (1955). JASA 50, 1096-1121.
.. [4] Follmann, D. A., Proschan, M. A. and Geller, N. L. (1994). Biometrics 50,
       325-336.
.. [5] Magirr, D., Jaki, T. and Whitehead, J. (2012). Biometrika 99, 494-501.
"""

from __future__ import annotations

import json
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, Any

import numpy as np
from numpy.typing import ArrayLike
from scipy import special

from seqtest.core import checks
from seqtest.core.boundaries import futility_bounds
from seqtest.core.errors import InputError
from seqtest.core.jsonable import floats_or_none
from seqtest.core.recursion import DEFAULT_R
from seqtest.core.scales import test_scale_of
from seqtest.core.spending import SpendingFunction
from seqtest.core.version import __version__
from seqtest.core.vocabulary import BETTER, EXPERIMENT_KIND
from seqtest.planning.design import (
    Plan,
    _check_fractions,
    _check_r,
    _power,
    _solve_drift,
    design,
    parse_boundary,
)
from seqtest.planning.sizing import (
    DESCRIPTION_FIELDS,
    check_metric,
    delta_and_unit,
    max_control,
    null_and_sign,
    per_look,
    power_at,
)

if TYPE_CHECKING:
    from seqtest.core.multiarm import DunnettBounds

__all__ = [
    "METHODS",
    "MAX_TREATMENTS",
    "POWER_FOR",
    "ROLES",
    "Comparison",
    "ExperimentMetric",
    "ExperimentInputs",
    "ExperimentPlan",
    "default_transitions",
    "design_experiment",
    "experiment_inputs",
    "experiment_plan",
    "graph_update",
    "graph_update_many",
]

ROLES: tuple[str, ...] = ("primary", "guardrail")
METHODS: tuple[str, ...] = ("graphical", "dunnett")
POWER_FOR: tuple[str, ...] = ("each", "any")
#: At most this many treatments (``seqtest.core.multiarm.MAX_ARMS``; that module, and
#: scipy.stats with it, is imported only when Dunnett-type boundaries are computed).
MAX_TREATMENTS = 8
#: Default alpha and spending of a guardrail's one-sided harm test. Pocock-type
#: spending stops early for harm more readily than O'Brien-Fleming-type (common
#: practice for safety monitoring: harm should not wait for the end).
GUARDRAIL_ALPHA = 0.05
GUARDRAIL_SPENDING = "pocock-type"
_NAME_MAX = 64
#: A metric's description fields (its kind's, as check_metric reads them); the
#: allocation is the arms', the margin, better side and hypothesis the metric's own.
_SIZING_FIELDS = DESCRIPTION_FIELDS - {"allocation", "margin", "better", "hypothesis"}
_METRIC_FIELDS = {"name", "role", "better", "margin", "hypothesis", "alpha", "spending",
                  "power", *_SIZING_FIELDS}
_OTHER_SIDE = {"higher": "lower", "lower": "higher"}


# -- the graph of the graphical method ------------------------------------------------

def default_transitions(size: int) -> np.ndarray:
    """Transitions that split a rejected hypothesis' level equally among the others
    (with equal weights this is Holm's procedure)."""
    n = checks.whole("size", size, lo=1)
    if n == 1:
        return np.zeros((1, 1))
    g = np.full((n, n), 1.0 / (n - 1))
    np.fill_diagonal(g, 0.0)
    return g


def graph_update_many(weights: np.ndarray, transitions: np.ndarray, reject: np.ndarray
                      ) -> tuple[np.ndarray, np.ndarray]:
    """Remove one hypothesis from each of many graphs (Bretz et al. 2009, algorithm 1).

    Parameters
    ----------
    weights : ndarray, shape (R, H)
    transitions : ndarray, shape (R, H, H)
    reject : ndarray of int, shape (R,)
        The hypothesis rejected in each graph; ``-1`` leaves that graph unchanged.

    Returns
    -------
    weights, transitions : new arrays. For the rejected ``j``:
    ``w_l += w_j g_jl`` and, for ``l != k`` other than ``j``,
    ``g_lk = (g_lk + g_lj g_jk) / (1 - g_lj g_jl)`` (0 when the denominator is 0);
    ``j``'s weight, row and column become 0.
    """
    w = np.array(weights, float, copy=True)
    g = np.array(transitions, float, copy=True)
    rows = np.flatnonzero(np.asarray(reject) >= 0)
    if rows.size == 0:
        return w, g
    j = np.asarray(reject)[rows]
    h = w.shape[1]
    wj = w[rows, j]
    g_out = g[rows, j, :]            # g_jk
    g_in = g[rows, :, j]             # g_lj
    w_new = w[rows] + wj[:, None] * g_out
    num = g[rows] + g_in[:, :, None] * g_out[:, None, :]
    den = 1.0 - g_in * g_out         # 1 - g_lj g_jl, per l
    with np.errstate(divide="ignore", invalid="ignore"):
        g_new = np.where(den[:, :, None] > 1e-15, num / den[:, :, None], 0.0)
    eye = np.eye(h, dtype=bool)
    g_new[:, eye] = 0.0
    r_idx = np.arange(rows.size)
    w_new[r_idx, j] = 0.0
    g_new[r_idx, j, :] = 0.0
    g_new[r_idx, :, j] = 0.0
    w[rows] = w_new
    g[rows] = g_new
    return w, g


def graph_update(weights: ArrayLike, transitions: ArrayLike, j: int
                 ) -> tuple[np.ndarray, np.ndarray]:
    """:func:`graph_update_many` for one graph: remove hypothesis ``j``."""
    w = np.asarray(weights, float)[None, :]
    g = np.asarray(transitions, float)[None, :, :]
    w2, g2 = graph_update_many(w, g, np.array([int(j)]))
    return w2[0], g2[0]


def _check_graph(weights: Any, transitions: Any, labels: list[str]
                 ) -> tuple[np.ndarray, np.ndarray]:
    n = len(labels)
    if weights is None:
        w = np.full(n, 1.0 / n)
    else:
        if isinstance(weights, Mapping):
            keys = {str(k) for k in weights}
            unknown = sorted(keys - set(labels))
            if unknown:
                raise checks.fail(f"weights[{unknown[0]!r}]", weights[unknown[0]],
                                  f"weights keyed by hypothesis ({', '.join(labels)})")
            vals = [weights.get(lab, 0.0) for lab in labels]
        elif isinstance(weights, (str, bytes)) or not hasattr(weights, "__len__"):
            raise checks.fail("weights", weights, f"{n} numbers, one per hypothesis "
                              f"({', '.join(labels)})")
        else:
            vals = list(weights)
        if len(vals) != n:
            raise checks.fail("weights", weights, f"{n} numbers, one per hypothesis "
                              f"({', '.join(labels)})")
        w = np.array([checks.number(f"weights[{i}]", v, lo=0.0, hi=1.0)
                      for i, v in enumerate(vals)])
        if w.sum() > 1.0 + 1e-12:
            raise checks.fail("weights", w.tolist(), "weights that sum to at most 1")
    if transitions is None:
        g = default_transitions(n)
    else:
        if isinstance(transitions, (str, bytes)) or not hasattr(transitions, "__len__") \
                or len(transitions) != n:
            raise checks.fail("transitions", transitions,
                              f"a {n} x {n} matrix (rows: from, columns: to)")
        rows = []
        for i, row in enumerate(transitions):
            if isinstance(row, (str, bytes)) or not hasattr(row, "__len__") or len(row) != n:
                raise checks.fail(f"transitions[{i}]", row, f"a row of {n} numbers")
            rows.append([checks.number(f"transitions[{i}][{j}]", v, lo=0.0, hi=1.0)
                         for j, v in enumerate(row)])
        g = np.asarray(rows, float)
        for i in range(n):
            if g[i, i] != 0:
                raise checks.fail(f"transitions[{i}][{i}]", g[i, i],
                                  "0 (a hypothesis passes nothing to itself)")
            if g[i].sum() > 1.0 + 1e-12:
                raise checks.fail(f"transitions[{i}]", g[i].tolist(),
                                  "a row that sums to at most 1")
    return w, g


# -- metrics and arms -------------------------------------------------------------------

def _name(where: str, value: Any) -> str:
    if not isinstance(value, str) or not value.strip() or len(value.strip()) > _NAME_MAX:
        raise checks.fail(where, value, f"a non-empty name of at most {_NAME_MAX} "
                          "characters")
    return value.strip()


def _key(name: str) -> str:
    """A name compared without letter case and separators (as the look readers do)."""
    return re.sub(r"[\s.\-_]+", "_", name.strip().lower()).strip("_")


@dataclass(frozen=True)
class ExperimentMetric:
    """A metric of an experiment, in the two-arm convention of
    :func:`seqtest.planning.sizing.check_metric`.

    Attributes
    ----------
    name : str
    role : {"primary", "guardrail"}
    better : {"higher", "lower"}
        Which way of the metric is good.
    margin : float
        The null value of the effect (treatment minus control, or relative lift) on
        the metric's scale. Primary: as a two-arm plan's (0: superiority; on the worse
        side of 0: non-inferiority; on the better side: superiority by more than it).
        Guardrail: the harm tolerated, 0 or on the worse side of 0; harm is a move
        towards worse beyond it.
    hypothesis : {"superiority", "non_inferiority"} or None
        What a primary's test is to show; None for a guardrail (a one-sided harm
        test).
    description : dict
        Kind, baseline, ``mde`` (signed: the effect the test is powered for, on the
        better side of the margin for a primary, on the worse side for a guardrail:
        the harm to detect), sd, ... (the sizing fields of the kind; no allocation).
    alpha, spending, power : guardrails only
        The harm test's one-sided alpha, spending function, and (optional) the power
        it must have at its mde, which then enters the sizing.
    """

    name: str
    role: str
    better: str
    margin: float
    hypothesis: str | None
    description: dict
    alpha: float | None = None
    spending: SpendingFunction | None = None
    power: float | None = None

    @property
    def kind(self) -> str:
        return str(self.description["kind"])

    @property
    def scale(self) -> str:
        return str(self.description["scale"])

    @property
    def test_scale(self) -> str:
        return test_scale_of(self.kind, self.scale)

    @property
    def orientation(self) -> float:
        """+1 or -1: the z statistic of the metric's test is this times the effect's
        (treatment minus control, against the margin) z, so that larger is better for
        a primary and more harmful for a guardrail: the ``sign`` of the comparison's
        two-arm metric (:func:`seqtest.planning.sizing.null_and_sign`)."""
        tested = self.better if self.role == "primary" else _OTHER_SIDE[self.better]
        return null_and_sign({"better": tested})[1]

    @property
    def null(self) -> float:
        """The null value of the effect on the metric's scale: the margin."""
        return self.margin

    @property
    def units(self) -> str:
        """``"exposure"`` (rate) or ``"users"`` (every other kind): metrics of the same
        units share the plan's maximum sizes."""
        return "exposure" if self.kind == "rate" else "users"

    def comparison_metric(self, allocation: float) -> dict:
        """The two-arm metric description of a comparison with this allocation.

        A primary's is the metric's own (``margin``, ``better`` and ``hypothesis``
        written only when one differs from superiority over 0 with higher better, so
        that the plain case is exactly the two-arm plan of the same description). A
        guardrail's is its harm test as a two-arm test: the better side is the
        metric's worse one, the margin the harm tolerated, the hypothesis superiority
        (harm beyond the margin)."""
        d = {k: v for k, v in self.description.items() if k in _SIZING_FIELDS}
        d["allocation"] = float(allocation)
        if self.role == "guardrail":
            d.update(better=_OTHER_SIDE[self.better], margin=self.margin,
                     hypothesis="superiority")
        elif (self.better, self.margin, self.hypothesis) != ("higher", 0.0, "superiority"):
            d.update(better=self.better, margin=self.margin, hypothesis=self.hypothesis)
        return check_metric(d)

    def to_dict(self) -> dict:
        out: dict[str, Any] = {"name": self.name, "role": self.role,
                               "better": self.better, "margin": self.margin}
        if self.role == "primary":
            out["hypothesis"] = self.hypothesis
        out.update({k: v for k, v in self.description.items() if k in _SIZING_FIELDS})
        if self.role == "guardrail":
            assert self.spending is not None
            out["alpha"] = self.alpha
            out["spending"] = self.spending.to_dict()
            out["power"] = self.power
        return out


def _checked_metric(where: str, name: str, d: dict, role: str, better: str) -> dict:
    """:func:`check_metric` of a metric's two-arm description, its messages naming
    the experiment's metric (``metrics[i].field (name)``); a guardrail's margin and
    mde, checked as its harm test's (the better side flipped), are explained as a
    guardrail's."""
    try:
        return check_metric(d)
    except (InputError, ValueError) as exc:
        text = str(exc)
        field_, _, rest = text.partition(": ")
        field_ = field_.removeprefix("metric").lstrip(".")
        worse = "lower" if better == "higher" else "higher"
        if role == "guardrail" and field_ == "margin" and "superiority" in rest:
            rest = (f"got {d['margin']!r}; allowed for a guardrail where {better} is "
                    f"better is 0 or a {'negative' if better == 'higher' else 'positive'} "
                    "number: the harm tolerated (a move towards worse by up to it is not "
                    "harm)")
        elif role == "guardrail" and field_ == "mde" and "margin" in rest:
            rest = (f"got {d['mde']!r}; allowed for a guardrail where {better} is better "
                    f"is the harm to detect, {worse} than the margin {d['margin']:g} (a "
                    f"{'negative' if better == 'higher' else 'positive'} effect beyond "
                    "it)")
        where_field = f"{where}.{field_}" if field_ else where
        raise InputError(f"{where_field} ({name}): {rest}") from None


def _metric(i: int, spec: Any, single: bool) -> ExperimentMetric:
    where = f"metrics[{i}]"
    if isinstance(spec, Mapping) and "direction" in spec:
        who = f" ({spec['name']})" if isinstance(spec.get("name"), str) else ""
        raise checks.fail(f"{where}.direction{who}", spec["direction"],
                          "left out: say which way of the metric is good with better "
                          "(higher or lower), and give mde and margin signed on the "
                          "metric's scale (treatment minus control)")
    d = checks.mapping(where, spec, allowed_keys=_METRIC_FIELDS)
    name = _name(f"{where}.name", d["name"]) if "name" in d else (
        str(d.get("kind", "metric")) if single else None)
    if name is None:
        raise checks.fail(f"{where}.name", None, "a name for each metric of an experiment "
                          "with several metrics")

    def at(field_: str) -> str:
        return f"{where}.{field_} ({name})"

    role = str(checks.choice(at("role"), d.get("role", "primary"), ROLES))
    if d.get("better") is None:
        if role == "guardrail":
            raise checks.fail(at("better"), None,
                              f"higher or lower: which way of the guardrail {name!r} is "
                              "good (harm is a move the other way)")
        better = "higher"
    else:
        better = str(checks.choice(at("better"), d["better"], BETTER))
    margin = checks.number(at("margin"), d.get("margin", 0.0),
                           allowed="a number on the metric's scale (the null value of "
                                   "the effect, treatment minus control)")
    if "mde" not in d:
        raise checks.fail(at("mde"), None,
                          "the effect to detect, treatment minus control on the metric's "
                          "scale (signed: on the better side of the margin for a primary, "
                          "the harm beyond the margin for a guardrail)")
    sizing = {k: d[k] for k in _SIZING_FIELDS if k in d and d[k] is not None}
    hypothesis: str | None
    if role == "guardrail":
        if d.get("hypothesis") is not None:
            raise checks.fail(at("hypothesis"), d["hypothesis"],
                              "left out for a guardrail (its test is one-sided, for harm "
                              "beyond its margin)")
        norm = _checked_metric(where, name, {**sizing, "better": _OTHER_SIDE[better],
                                             "margin": margin,
                                             "hypothesis": "superiority"}, role, better)
        hypothesis = None
    else:
        full = {**sizing, "better": better, "margin": margin}
        if d.get("hypothesis") is not None:
            full["hypothesis"] = d["hypothesis"]
        norm = _checked_metric(where, name, full, role, better)
        hypothesis = str(norm["hypothesis"])
    desc = {k: v for k, v in norm.items() if k in _SIZING_FIELDS}
    alpha = spend = power = None
    if role == "guardrail":
        alpha = checks.number(at("alpha"), d.get("alpha", GUARDRAIL_ALPHA), lo=0.0,
                              hi=0.5, lo_open=True,
                              allowed="a one-sided alpha in (0, 0.5] for the harm test")
        fn = parse_boundary(d.get("spending") or GUARDRAIL_SPENDING, at("spending"))
        if not isinstance(fn, SpendingFunction):
            raise checks.fail(at("spending"), d.get("spending"),
                              "a spending function (a guardrail spends its own alpha)")
        spend = fn
        if d.get("power") is not None:
            power = checks.number(at("power"), d["power"], lo=alpha, hi=1.0,
                                  lo_open=True, hi_open=True,
                                  allowed=f"a power above the guardrail's alpha {alpha:g} "
                                          "and below 1")
    else:
        for key in ("alpha", "spending", "power"):
            if d.get(key) is not None:
                raise checks.fail(at(key), d[key], "left out for a primary metric "
                                  "(its error and power are the experiment's)")
    return ExperimentMetric(name, role, better, margin, hypothesis, desc, alpha, spend,
                            power)


def _arms(arms: Any) -> tuple[str, ...]:
    if isinstance(arms, (int, np.integer)) and not isinstance(arms, bool):
        n = checks.whole("arms", arms, lo=2, hi=MAX_TREATMENTS + 1,
                         allowed=f"2 to {MAX_TREATMENTS + 1} arms (the control and 1 to "
                                 f"{MAX_TREATMENTS} treatments)")
        if n == 2:
            return ("control", "treatment")
        return ("control", *(f"treatment_{i}" for i in range(1, n)))
    if isinstance(arms, (str, bytes)) or not isinstance(arms, Sequence):
        raise checks.fail("arms", arms, "a number of arms (2 to 9) or their names, the "
                          "control first")
    names = [_name(f"arms[{i}]", a) for i, a in enumerate(arms)]
    if not 2 <= len(names) <= MAX_TREATMENTS + 1:
        raise checks.fail("arms", names, f"2 to {MAX_TREATMENTS + 1} arms (the control "
                          f"and 1 to {MAX_TREATMENTS} treatments)")
    seen: dict[str, str] = {}
    for a in names:
        if _key(a) in seen:
            raise checks.fail("arms", names, f"distinct names ({seen[_key(a)]!r} and {a!r} "
                              "differ only in letter case or separators)")
        seen[_key(a)] = a
    return tuple(names)


def _allocations(allocations: Any, treatments: tuple[str, ...]) -> tuple[float, ...]:
    allowed = "a ratio in (0, 100] (treatment users per control user)"
    if allocations is None:
        return tuple(1.0 for _ in treatments)
    if isinstance(allocations, Mapping):
        unknown = [str(k) for k in allocations if k not in treatments]
        if unknown:
            raise checks.fail(f"allocations[{unknown[0]!r}]", allocations[unknown[0]],
                              f"allocations keyed by treatment ({', '.join(treatments)})")
        vals = [allocations.get(t, 1.0) for t in treatments]
        where = [f"allocations[{t!r}]" for t in treatments]
    elif isinstance(allocations, (int, float, np.integer, np.floating)) \
            and not isinstance(allocations, bool):
        vals = [allocations] * len(treatments)
        where = ["allocations"] * len(treatments)
    else:
        if isinstance(allocations, (str, bytes)) or not hasattr(allocations, "__len__") \
                or len(allocations) != len(treatments):
            raise checks.fail("allocations", allocations,
                              f"one ratio per treatment ({len(treatments)}), a single "
                              "ratio for all, or a mapping by treatment")
        vals = list(allocations)
        where = [f"allocations[{t!r}]" for t in treatments]
    return tuple(checks.number(w, v, lo=0.0, hi=100.0, lo_open=True, allowed=allowed)
                 for w, v in zip(where, vals, strict=True))


# -- comparisons --------------------------------------------------------------------------

@dataclass(frozen=True)
class Comparison:
    """One treatment arm against the control on one metric.

    Attributes
    ----------
    arm, metric, role : str
    allocation : float
        The arm's users per control user.
    level : float
        The local alpha the comparison starts with: ``alpha * w`` (graphical), the
        family's alpha (Dunnett: the boundaries are common), or the guardrail's.
    plan : Plan
        The comparison's two-arm plan: boundaries at ``level`` on the planned looks,
        drift, futility, and its own sample size for its metric.
    planned_power : float or None
        Its power at the mde with the experiment's sizes, at ``level`` (no alpha
        passed on; futility obeyed); None for a hypothesis that starts at level 0.
    hypothesis : int
        Index among the primary hypotheses (-1 for a guardrail).
    """

    arm: str
    metric: str
    role: str
    allocation: float
    level: float
    plan: Plan
    planned_power: float | None
    hypothesis: int = -1

    @property
    def label(self) -> str:
        return f"{self.arm}/{self.metric}"


@dataclass(frozen=True)
class ExperimentPlan:
    """A plan for an experiment with one control, 1 to 8 treatments and several
    metrics; build it with :func:`experiment_plan` (see the module docstring).

    Attributes
    ----------
    arms : tuple of str
        The control first, then the treatments.
    allocations : tuple of float
        Users per control user of each treatment.
    metrics : tuple of ExperimentMetric
    alpha, sides, power : float, int, float
        The primaries' family-wise error (two-sided: alpha / 2 per tail), and the
        power asked for.
    info_fractions : ndarray
        Planned information fractions, common to all comparisons.
    efficacy, futility, binding
        The primaries' spending (or boundary) and futility spending.
    method : {"graphical", "dunnett"}
    weights, transitions : ndarray
        The graph (graphical method; one hypothesis per primary metric and arm, in
        the order of :attr:`hypotheses`).
    power_for : {"each", "any"}
    comparisons : tuple of Comparison
        The primaries' comparisons (hypothesis order), then the guardrails'.
    sizes : dict
        ``{metric: {arm: cumulative users (exposure) per planned look}}``, rounded up.
    dunnett : DunnettBounds or None
        The common boundaries with their Monte Carlo standard errors (dunnett).
    """

    arms: tuple[str, ...]
    allocations: tuple[float, ...]
    metrics: tuple[ExperimentMetric, ...]
    alpha: float
    sides: int
    power: float
    info_fractions: np.ndarray
    efficacy: Any
    futility: SpendingFunction | None
    binding: bool
    method: str
    weights: np.ndarray
    transitions: np.ndarray
    power_for: str
    r: int
    comparisons: tuple[Comparison, ...]
    sizes: dict[str, dict[str, np.ndarray]]
    dunnett: DunnettBounds | None = None
    notes: tuple[str, ...] = field(default=(), repr=False)

    kind = EXPERIMENT_KIND

    # -- names and parts -------------------------------------------------------------
    @property
    def control(self) -> str:
        return self.arms[0]

    @property
    def treatments(self) -> tuple[str, ...]:
        return self.arms[1:]

    @property
    def looks(self) -> int:
        return int(self.info_fractions.size)

    @property
    def information_fractions(self) -> np.ndarray:
        return self.info_fractions

    @property
    def primaries(self) -> tuple[Comparison, ...]:
        return tuple(c for c in self.comparisons if c.role == "primary")

    @property
    def guardrails(self) -> tuple[Comparison, ...]:
        return tuple(c for c in self.comparisons if c.role == "guardrail")

    @property
    def hypotheses(self) -> list[str]:
        """``arm/metric`` of each primary hypothesis, in the graph's order."""
        return [c.label for c in self.primaries]

    def metric_by_name(self, name: str) -> ExperimentMetric:
        for m in self.metrics:
            if m.name == name:
                return m
        raise checks.fail("metric", name, "one of " + ", ".join(m.name for m in self.metrics))

    def comparison(self, arm: str, metric: str) -> Comparison:
        for c in self.comparisons:
            if c.arm == arm and c.metric == metric:
                return c
        raise checks.fail("comparison", f"{arm}/{metric}", "an arm/metric of the plan")

    def allocation(self, arm: str) -> float:
        """Users per control user (1 for the control)."""
        return 1.0 if arm == self.control else self.allocations[self.treatments.index(arm)]

    def max_n(self, metric: str, arm: str) -> float:
        """The planned maximum of an arm on a metric (users, or exposure for rates)."""
        return float(self.sizes[metric][arm][-1])

    @property
    def errors(self) -> dict[str, Any]:
        """What the plan promises: ``family_wise`` (any primary hypothesis rejected
        falsely, all arms and looks, strong sense); ``false_win`` (some arm declared
        better on a primary when it is not: at most the family-wise error);
        ``false_harm_per_arm`` (an arm stopped for harm it does not do: at most the
        sum of the guardrails' alphas); ``false_harm_any_arm`` (some arm: at most
        ``k`` times that, Bonferroni)."""
        g = sum(m.alpha or 0.0 for m in self.metrics if m.role == "guardrail")
        k = len(self.treatments)
        return {"family_wise": self.alpha, "false_win": self.alpha,
                "false_harm_per_arm": min(1.0, g), "false_harm_any_arm": min(1.0, k * g),
                "guardrail_alpha": {m.name: m.alpha for m in self.metrics
                                    if m.role == "guardrail"}}

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, ExperimentPlan):
            return NotImplemented
        return self.to_dict() == other.to_dict()

    __hash__ = None  # type: ignore[assignment]

    # -- display ----------------------------------------------------------------------
    def summary(self) -> str:
        """The plan in a few plain lines."""
        side = "two-sided" if self.sides == 2 else "one-sided"
        whom = "each comparison" if self.power_for == "each" else "at least one arm"
        lines = [f"Experiment plan: {len(self.treatments)} treatment(s) against "
                 f"{self.control!r} ({', '.join(self.treatments)}), {self.looks} look(s).",
                 f"Primaries: family-wise error {self.alpha:g} ({side}) over "
                 f"{len(self.primaries)} hypothesis(es) by the {self.method} method; power "
                 f"{self.power:g} for {whom}."]
        for m in self.metrics:
            if m.role == "guardrail":
                lines.append(f"Guardrail {m.name!r}: harm test at one-sided alpha "
                             f"{m.alpha:g} per arm ({m.spending.label if m.spending else ''})"
                             f", harm beyond {m.margin:g} ({m.better} is better).")
            elif m.hypothesis == "non_inferiority" or m.margin != 0:
                lines.append(f"Primary {m.name!r}: {str(m.hypothesis).replace('_', '-')} "
                             f"against a margin of {m.margin:g} ({m.better} is better).")
        for m in self.metrics:
            sizes = ", ".join(f"{a} {int(self.sizes[m.name][a][-1]):,}" for a in self.arms)
            lines.append(f"Maximum {m.units} for {m.name!r}: {sizes}.")
        e = self.errors
        if any(m.role == "guardrail" for m in self.metrics):
            lines.append(f"A false stop for harm: at most {e['false_harm_per_arm']:.3g} per "
                         f"arm, {e['false_harm_any_arm']:.3g} for some arm.")
        return "\n".join(lines)

    # -- documents -------------------------------------------------------------------
    def to_dict(self) -> dict:
        """The plan document (kind ``experiment``): plain JSON types;
        :func:`seqtest.plan_from_dict` reads it back and checks the computed part
        against a recomputation from the inputs."""
        arms: list[dict[str, Any]] = [{"name": self.control}]
        arms += [{"name": t, "allocation": a}
                 for t, a in zip(self.treatments, self.allocations, strict=True)]
        comps = []
        for c in self.comparisons:
            p = c.plan
            comps.append({
                "arm": c.arm, "metric": c.metric, "role": c.role, "level": c.level,
                "efficacy_z": floats_or_none(p.efficacy_z),
                "futility_z": None if p.futility_z is None else floats_or_none(p.futility_z),
                "cumulative_alpha": floats_or_none(p.cumulative_alpha),
                "drift": p.drift, "planned_power": c.planned_power})
        dn = None
        if self.dunnett is not None:
            dn = {"z_error": floats_or_none(self.dunnett.z_error),
                  "family_error": floats_or_none(self.dunnett.family_error),
                  "standard_error": floats_or_none(self.dunnett.standard_error),
                  "paths": int(self.dunnett.paths)}
        return {
            "kind": EXPERIMENT_KIND,
            "version": __version__,
            "inputs": {
                "arms": arms,
                "metrics": [m.to_dict() for m in self.metrics],
                "alpha": self.alpha, "sides": self.sides, "power": self.power,
                "information_fractions": self.info_fractions.tolist(),
                "efficacy": self.efficacy.to_dict(),
                "futility": None if self.futility is None else self.futility.to_dict(),
                "binding": self.binding, "method": self.method,
                "weights": self.weights.tolist() if self.method == "graphical" else None,
                "transitions": (self.transitions.tolist() if self.method == "graphical"
                                else None),
                "power_for": self.power_for, "grid_r": self.r,
            },
            "computed": {
                "comparisons": comps,
                "sample_size": {m: {a: [int(x) for x in v] for a, v in arms_.items()}
                                for m, arms_ in self.sizes.items()},
                "dunnett": dn,
                "errors": self.errors,
            },
        }

    def inputs(self) -> dict:
        """The keyword arguments of :func:`experiment_plan` that make this plan."""
        d = self.to_dict()["inputs"]
        return {"arms": [a["name"] for a in d["arms"]],
                "allocations": list(self.allocations), "metrics": d["metrics"],
                "alpha": self.alpha, "sides": self.sides, "power": self.power,
                "information_fractions": d["information_fractions"],
                "efficacy": self.efficacy, "futility": self.futility,
                "binding": self.binding, "method": self.method,
                "weights": d["weights"], "transitions": d["transitions"],
                "power_for": self.power_for, "r": self.r}


# -- sizing ---------------------------------------------------------------------------------

def _control_size(plan: Plan) -> float:
    """Control users (exposure) at which a comparison plan has its power, not rounded:
    :func:`~seqtest.planning.sizing.max_control` of its two-arm metric (margin
    included)."""
    return float(max_control(plan, plan.metric or {})[0])


# -- the design -------------------------------------------------------------------------------

def _comparison_plan(level: float, sides: int, power: float, t: np.ndarray, efficacy: Any,
                     futility: SpendingFunction | None, binding: bool, metric: dict, r: int,
                     common: tuple[np.ndarray, np.ndarray] | None) -> Plan:
    """The two-arm plan of one comparison: :func:`design` at its level, or (Dunnett) a
    plan on the common boundaries ``common = (efficacy_z, cumulative_alpha)``."""
    if common is None:
        return design(alpha=level, sides=sides, power=power, info_fractions=t,
                      efficacy=efficacy, futility=futility, binding=binding, metric=metric,
                      r=r)
    eff_z, cum = common
    fixed = float(-special.ndtri(level / sides) - special.ndtri(power))
    beta = 1.0 - power
    fut = futility if t.size > 1 else None
    b = None
    if fut is None:
        drift = _solve_drift(lambda d: _power(t, eff_z, None, sides, d, r), power, fixed)
    else:
        def g(d: float) -> float:
            return _power(t, eff_z, futility_bounds(t, d, eff_z, sides, beta, fut, r),
                          sides, d, r)
        drift = _solve_drift(g, power, fixed, futility=True)
        b = futility_bounds(t, drift, eff_z, sides, beta, fut, r)
    plan = Plan(alpha=level, sides=sides, power=power, info_fractions=t, efficacy_z=eff_z,
                futility_z=b, drift=float(drift), efficacy=efficacy, futility=fut,
                binding=False, metric=metric, r=r, cumulative_alpha=cum)
    n_c = max_control(plan, metric)[0]
    n_ctrl, n_trt = per_look(n_c, metric["allocation"], t)
    return replace(plan, n_control=n_ctrl, n_treatment=n_trt)


@dataclass(frozen=True)
class ExperimentInputs:
    """The checked arguments of :func:`experiment_plan` (what a plan document's
    ``inputs`` hold)."""

    arms: tuple[str, ...]
    allocations: tuple[float, ...]
    metrics: tuple[ExperimentMetric, ...]
    alpha: float
    sides: int
    power: float
    info_fractions: np.ndarray
    efficacy: Any
    futility: SpendingFunction | None
    binding: bool
    method: str
    weights: np.ndarray
    transitions: np.ndarray
    power_for: str
    r: int


def experiment_inputs(
    arms: int | Sequence[str] = 2,
    metrics: Mapping | Sequence[Mapping] | None = None,
    *,
    allocations: float | Sequence[float] | Mapping[str, float] | None = None,
    alpha: float = 0.05,
    sides: int = 2,
    power: float = 0.9,
    looks: int | None = None,
    information_fractions: ArrayLike | None = None,
    efficacy: Any = None,
    futility: Any = None,
    binding: bool = False,
    method: str = "graphical",
    weights: Sequence[float] | Mapping[str, float] | None = None,
    transitions: Sequence[Sequence[float]] | None = None,
    power_for: str = "each",
    r: int = DEFAULT_R,
) -> ExperimentInputs:
    """Check the arguments of :func:`experiment_plan` (same parameters; raises the
    same errors) without designing anything."""
    names = _arms(arms)
    treatments = names[1:]
    k = len(treatments)
    alloc = _allocations(allocations, treatments)
    if metrics is None:
        raise checks.fail("metrics", None, "one metric description or a list of them, at "
                          "least one primary (kind, mde, ...)")
    specs = [metrics] if isinstance(metrics, Mapping) else metrics
    if isinstance(specs, (str, bytes)) or not isinstance(specs, Sequence) or not specs:
        raise checks.fail("metrics", metrics, "one metric description or a non-empty list")
    ms = tuple(_metric(i, s, len(specs) == 1) for i, s in enumerate(specs))
    seen: dict[str, str] = {}
    for m in ms:
        if _key(m.name) in seen or _key(m.name) in {_key(a) for a in names}:
            raise checks.fail("metrics", [x.name for x in ms],
                              f"distinct names, none an arm's ({m.name!r} is taken)")
        seen[_key(m.name)] = m.name
    prim = [m for m in ms if m.role == "primary"]
    if not prim:
        raise checks.fail("metrics", [m.name for m in ms], "at least one primary metric")
    sides = int(checks.choice("sides", sides, (1, 2)))
    a = checks.number("alpha", alpha, lo=0.0, hi=0.5 * sides, lo_open=True,
                      allowed=f"a number in (0, {0.5 * sides:g}] (at most 0.5 per tail)")
    p = checks.number("power", power, lo=a / sides, hi=1.0, lo_open=True, hi_open=True,
                      allowed=f"a number above alpha/sides = {a / sides:g} and below 1")
    t = _check_fractions(5 if looks is None and information_fractions is None else looks,
                         information_fractions, "information_fractions")
    r = _check_r(r)
    eff = parse_boundary(SpendingFunction("obrien_fleming") if efficacy is None else efficacy,
                         "efficacy")
    assert eff is not None
    fut = parse_boundary(futility, "futility")
    if fut is not None and not isinstance(fut, SpendingFunction):
        raise checks.fail("futility", futility, "a spending function (a futility boundary "
                          "is made by beta spending)")
    binding = checks.boolean("binding", binding)
    method = str(checks.choice("method", method, METHODS))
    power_for = str(checks.choice("power_for", power_for, POWER_FOR))
    n_hyp = len(prim) * k
    labels = [f"{arm}/{m.name}" for m in prim for arm in treatments]
    if n_hyp > 1:
        if not isinstance(eff, SpendingFunction):
            raise checks.fail("efficacy", efficacy, "a spending function with several "
                              "primary comparisons (their levels change as alpha is passed "
                              "on, or their boundaries are joint)")
        if binding and fut is not None:
            raise checks.fail("binding", binding, "false with several primary comparisons "
                              "(a futility stop drops an arm as advice; the others' error "
                              "holds whether or not it is obeyed)")
    if method == "dunnett":
        if len(prim) != 1:
            raise checks.fail("method", method, "graphical with several primary metrics "
                              "(dunnett takes one primary metric)")
        if weights is not None or transitions is not None:
            raise checks.fail("weights" if weights is not None else "transitions",
                              weights if weights is not None else transitions,
                              "left out with method dunnett (the boundaries are common)")
    if isinstance(weights, Mapping) and len(prim) == 1:
        weights = {(f"{kk}/{prim[0].name}" if "/" not in str(kk) else str(kk)): v
                   for kk, v in weights.items()}
    w, g = _check_graph(weights, transitions, labels)
    if power_for == "any" and fut is not None and t.size > 1:
        raise checks.fail("power_for", power_for, "each when there is a futility boundary "
                          "(the power of at least one arm is computed without futility)")
    if t.size == 1:
        fut = None
    return ExperimentInputs(names, alloc, ms, a, sides, p, t, eff, fut,
                            bool(binding and fut is not None), method, w, g, power_for, r)


def experiment_plan(
    arms: int | Sequence[str] = 2,
    metrics: Mapping | Sequence[Mapping] | None = None,
    *,
    allocations: float | Sequence[float] | Mapping[str, float] | None = None,
    alpha: float = 0.05,
    sides: int = 2,
    power: float = 0.9,
    looks: int | None = None,
    information_fractions: ArrayLike | None = None,
    efficacy: Any = None,
    futility: Any = None,
    binding: bool = False,
    method: str = "graphical",
    weights: Sequence[float] | Mapping[str, float] | None = None,
    transitions: Sequence[Sequence[float]] | None = None,
    power_for: str = "each",
    r: int = DEFAULT_R,
) -> ExperimentPlan:
    """Design an experiment with one control and 1 to 8 treatment arms.

    Parameters
    ----------
    arms : int or sequence of str
        The number of arms, 2 to 9 (named ``control``, ``treatment`` for two, else
        ``control``, ``treatment_1``, ...), or their names, the control first.
    metrics : mapping or sequence of mappings
        Each metric: ``name``; ``role`` (``primary``, the default, or
        ``guardrail``); the description of
        :func:`seqtest.planning.sizing.check_metric` (``kind`` of any metric kind,
        ``mde`` signed, its sizing fields, ``better``, ``margin`` signed,
        ``hypothesis`` for a primary; no ``allocation``, the arms have it; see the
        module docstring for a guardrail's); guardrails also ``alpha`` (one-sided,
        default 0.05), ``spending`` (default Pocock-type) and ``power`` (optional:
        then the guardrail enters the sizing). At least one primary.
    allocations : float, sequence or mapping, optional
        Users per control user of each treatment (default 1).
    alpha, sides, power, looks, information_fractions, efficacy, futility, binding, r
        As :func:`seqtest.design`, for the primaries (alpha is their family-wise
        error). With more than one primary hypothesis the efficacy boundary must be a
        spending function (levels change when alpha is passed on) and futility is
        non-binding.
    method : {"graphical", "dunnett"}
        How the family-wise error is split (see the module docstring).
    weights, transitions : optional
        The graph of the graphical method: one weight per hypothesis (order of
        :attr:`ExperimentPlan.hypotheses`: each primary metric in turn, its arms in
        order; or a mapping by ``arm/metric``, or by arm with one primary), summing
        to at most 1 (default equal); transitions a square matrix whose rows sum to at
        most 1 with zero diagonal (default: equal split to the others).
    power_for : {"each", "any"}
        Size so that each comparison has the power, or at least one arm.

    Returns
    -------
    ExperimentPlan

    Raises
    ------
    seqtest.InputError
        Naming the argument: fewer than two arms or more than nine, an allocation of
        zero, a guardrail without ``better``, a margin or mde on the wrong side, a
        metric given ``direction`` (the field is ``better``), no primary, ...

    Notes
    -----
    Cost: the graphical method designs one two-arm plan per distinct level and
    allocation (milliseconds each); the Dunnett-type boundaries take about 0.6 s of
    CPU for k = 4 arms and 5 looks (:func:`seqtest.core.multiarm.dunnett_bounds`),
    ``power_for="any"`` a few such computations more.

    Examples
    --------
    >>> import seqtest
    >>> plan = seqtest.experiment_plan(["control", "blue", "green"],
    ...     {"name": "orders", "kind": "binary", "baseline": 0.10, "mde": 0.02},
    ...     alpha=0.025, sides=1, looks=3)
    >>> [round(c.level, 5) for c in plan.primaries]
    [0.0125, 0.0125]

    A primary where lower is better, against a margin, and a guardrail whose harm is
    an increase of more than 0.05 (to detect at 0.2):

    >>> plan = seqtest.experiment_plan(["control", "blue", "green"], [
    ...     {"name": "wait", "kind": "continuous", "sd": 2.0, "better": "lower",
    ...      "mde": -0.3, "margin": -0.05, "hypothesis": "superiority"},
    ...     {"name": "errors", "role": "guardrail", "kind": "rate", "baseline": 2.0,
    ...      "better": "lower", "margin": 0.05, "mde": 0.2}],
    ...     alpha=0.025, sides=1, looks=3)
    >>> plan.comparison("blue", "errors").plan.metric["better"]   # the harm side
    'higher'
    """
    return design_experiment(experiment_inputs(
        arms, metrics, allocations=allocations, alpha=alpha, sides=sides, power=power,
        looks=looks, information_fractions=information_fractions, efficacy=efficacy,
        futility=futility, binding=binding, method=method, weights=weights,
        transitions=transitions, power_for=power_for, r=r))


def design_experiment(inp: ExperimentInputs) -> ExperimentPlan:
    """The plan of checked inputs (see :func:`experiment_plan`)."""
    names, alloc, ms = inp.arms, inp.allocations, inp.metrics
    treatments = names[1:]
    k = len(treatments)
    a, sides, p, t, r = inp.alpha, inp.sides, inp.power, inp.info_fractions, inp.r
    eff, fut, binding, method, w = inp.efficacy, inp.futility, inp.binding, inp.method, \
        inp.weights
    prim = [m for m in ms if m.role == "primary"]
    # -- the primaries' comparison plans
    common = None
    dn = None
    if method == "dunnett" and k > 1:
        from seqtest.core import multiarm
        assert isinstance(eff, SpendingFunction)
        cum_tail = np.asarray(eff(t, a / sides), float)
        dn = multiarm.dunnett_bounds(t, cum_tail, list(alloc), sides=sides)
        common = (dn.z, sides * cum_tail)
    comps: list[Comparison] = []
    cache: dict[tuple, Plan] = {}

    def comp_plan(level: float, metric: dict, pw: float) -> Plan:
        key = (level, pw, json.dumps(metric, sort_keys=True))
        if key not in cache:
            cache[key] = _comparison_plan(level, sides, pw, t, eff, fut, binding, metric, r,
                                          common)
        return cache[key]

    h = 0
    for m in prim:
        for arm, q in zip(treatments, alloc, strict=True):
            level = a if method == "dunnett" else a * float(w[h])
            cm = m.comparison_metric(q)
            plan = comp_plan(level if level > 0 else a, cm, p)
            comps.append(Comparison(arm, m.name, "primary", q, level, plan, None, h))
            h += 1
    for m in ms:
        if m.role != "guardrail":
            continue
        assert m.alpha is not None
        for arm, q in zip(treatments, alloc, strict=True):
            cm = m.comparison_metric(q)
            key = ("guardrail", m.name, q)
            if key not in cache:
                cache[key] = design(alpha=m.alpha, sides=1, power=m.power or p,
                                    info_fractions=t, efficacy=m.spending, futility=None,
                                    metric=cm, r=r)
            comps.append(Comparison(arm, m.name, "guardrail", q, m.alpha, cache[key], None))

    # -- sizes per unit of measurement
    by_name = {m.name: m for m in ms}
    sizes: dict[str, dict[str, np.ndarray]] = {}
    n0: dict[str, float] = {}
    for units in ("users", "exposure"):
        group = [m for m in ms if m.units == units]
        if not group:
            continue
        need: list[float] = []
        pr = [m for m in group if m.role == "primary"]
        if pr:
            need.append(_primary_size(pr, [c for c in comps if c.role == "primary"],
                                      inp.power_for, w, sides, t, r, comp_plan, p))
        for m in group:
            if m.role == "guardrail" and (m.power is not None or not pr):
                for c in comps:
                    if c.metric == m.name:
                        need.append(_control_size(c.plan))
        n0[units] = max(need)
    for m in ms:
        n_c = n0[m.units]
        sizes[m.name] = {names[0]: per_look(n_c, 1.0, t)[0]}
        for arm, q in zip(treatments, alloc, strict=True):
            sizes[m.name][arm] = per_look(n_c, q, t)[1]
    # -- planned power at those sizes; each comparison plan carries the sizes it runs
    out = []
    for c in comps:
        m = by_name[c.metric]
        pw = None
        if c.level > 0:
            pw = float(power_at(c.plan, c.plan.metric or {}, n0[m.units]))
        plan = replace(c.plan, n_control=sizes[m.name][names[0]],
                       n_treatment=sizes[m.name][c.arm])
        out.append(replace(c, plan=plan, planned_power=pw))
    return ExperimentPlan(
        arms=names, allocations=alloc, metrics=ms, alpha=a, sides=sides, power=p,
        info_fractions=t, efficacy=eff, futility=fut, binding=binding, method=method,
        weights=w, transitions=inp.transitions, power_for=inp.power_for, r=r,
        comparisons=tuple(out), sizes=sizes, dunnett=dn)


def _primary_size(prim: list[ExperimentMetric], comps: list[Comparison], power_for: str,
                  w: np.ndarray, sides: int, t: np.ndarray, r: int, comp_plan: Any,
                  power: float) -> float:
    """The control's maximum for the primaries of one unit group (module docstring)."""
    mine = [c for c in comps if c.metric in {m.name for m in prim}]
    if power_for == "each":
        return max(_control_size(c.plan) for c in mine if c.level > 0)
    per_metric = []
    for m in prim:
        cs = [c for c in mine if c.metric == m.name and c.level > 0]
        levels = {round(c.level, 15) for c in cs}
        if len(cs) == 1 or len(levels) > 1:
            # the conservative rule: the comparison that needs the fewest users alone
            per_metric.append(min(_control_size(c.plan) for c in cs))
            continue
        from seqtest.core import multiarm
        c0 = cs[0].plan
        units = np.array([delta_and_unit(c.plan.metric or {})[1] for c in cs])
        pattern = 1.0 / np.sqrt(units)
        pattern = pattern / pattern.max()
        eta = multiarm.any_arm_drift(c0.efficacy_z, t, [c.allocation for c in cs], power,
                                     pattern=pattern, sides=sides)
        need = []
        for c, s in zip(cs, pattern, strict=True):
            pw = _power(t, c.plan.efficacy_z, None, sides, eta * float(s), r)
            if pw <= 1.5 * c.level / sides:
                continue
            plan_i = comp_plan(c.level, c.plan.metric, min(pw, 1.0 - 1e-9))
            need.append(_control_size(plan_i))
        if not need:
            raise InputError(f"power_for: no arm of {m.name!r} can reach the power "
                             "alone; use power_for='each'")
        per_metric.append(max(need))
    return min(per_metric)
