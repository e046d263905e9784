"""Monte Carlo check of an experiment plan: many arms, several (correlated) metrics.

:func:`simulate_experiment` draws synthetic experiments of an
:class:`ExperimentScenario` (a true effect per arm and metric, correlations between
metrics) and runs every replicate through the experiment's own decision rule,
:func:`seqtest.monitoring.experiment.decide`, vectorised over the replicates of a
chunk: the statistics come from :func:`seqtest.monitoring.metrics.effect` (the null
is each metric's margin), the boundaries from the same
:class:`~seqtest.monitoring.experiment.Boundaries` as monitoring, computed once per
chunk (every replicate of a chunk has the same fractions: traffic is fixed) and cached
per process. It reports the family-wise error over the primaries' true nulls, each
hypothesis' rejection rate (power) beside the plan's, the rate at which at least one
arm wins, the false wins and false harm stops beside what the plan promises, each
guardrail's harm detection beside its planned power, and the expected users.

Data, per arm and metric, increment by increment between looks, as
:mod:`seqtest.simulation.engine` draws them
(:func:`~seqtest.simulation.engine.draw_totals` with the kind of the plan's metric:
binary, normal, log-normal, counts, ratio, pre_period), for every metric kind an
experiment may have.
Metrics of the same data kind may be correlated within a user:

- binary metrics: a shared per-user latent normal vector with the given
  correlations, a metric's outcome being the latent below its rate's quantile (a
  multivariate probit). The new users' outcome patterns are multinomial over the
  ``2^B`` patterns, whose probabilities are orthant probabilities of the latent
  normal (inclusion-exclusion on :func:`scipy.stats.multivariate_normal` CDFs at an
  absolute error of 1e-9, with a fixed generator so that runs repeat), so the
  successes of each metric are exact draws of the model (up to 3 correlated binary
  metrics);
- normal metrics: a multivariate normal per user. The new users' mean vector is
  normal with covariance ``Sigma / m`` and, independent of it, their centred sums of
  squares and products are Wishart(``m - 1``, ``Sigma``) (Anderson 2003, theorem
  3.3.2), drawn by Bartlett's decomposition, so the per-metric sums and sums of
  squares have their exact joint law.

Every other metric is drawn independently of the rest (each arm, each metric):
metrics of different data models, log-normal metrics, counts (analysed as a rate per
unit of exposure, one unit a user, or as a count metric per user), ratio metrics
(per-user denominators and numerators) and pre-period data (analysed as adjusted or
continuous metrics); correlations are refused for them.

Traffic: ``fixed`` (every arm at its planned size at the plan's looks) or ``uneven``
(at the given fractions of the maximum), with ``extra_looks`` either way; every
replicate has the same per-arm counts (random day-to-day traffic, which gives every
replicate its own fractions and so its own boundaries, is left to two-arm plans). The
last look is declared final.

Reproducibility: chunk ``i`` draws from ``default_rng(SeedSequence(seed,
spawn_key=(i,)))``; the counts are summed in chunk order, so a run is the same bit for
bit whatever runs the chunks (:mod:`seqtest.simulation.runner`).

References
----------
.. [1] Anderson, T. W. (2003). An Introduction to Multivariate Statistical Analysis,
       3rd ed., Wiley, sections 3.3 and 7.2 (Bartlett's decomposition).
.. [2] Ashford, J. R. and Sowden, R. R. (1970). Multi-variate probit analysis.
       Biometrics 26, 535-546.
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable, Mapping
from concurrent.futures import Executor
from dataclasses import dataclass, field, replace
from itertools import combinations
from typing import Any

import numpy as np
from scipy import special

from seqtest.core.vocabulary import Decision
from seqtest.monitoring import metrics
from seqtest.monitoring.experiment import Boundaries, Frames, decide
from seqtest.planning.experiment import ExperimentPlan
from seqtest.simulation import DEFAULT_CHUNK
from seqtest.simulation.engine import TailRate, clopper_pearson, draw_totals
from seqtest.simulation.runner import Batch, Runner
from seqtest.simulation.scenarios import (
    ANALYSIS_KIND,
    ANALYSIS_KINDS,
    _data,
    _mapping,
    _no_extra,
    _number,
    read_document,
)

__all__ = [
    "ExperimentScenario",
    "ExperimentSimulationResult",
    "MetricData",
    "PreparedExperiment",
    "Rate",
    "experiment_scenario_from_dict",
    "is_experiment_scenario",
    "load_experiment_scenario",
    "prepare_experiment",
    "simulate_experiment",
]

EFFECT_TYPES = ("difference", "relative", "mde_multiple")
_TOP = {"name", "description", "metrics", "correlation", "traffic", "analysis"}
_METRIC = {"name", "data", "effects", "effect_type"}
_TRAFFIC = {"fixed": {"mode", "extra_looks", "control_users"},
            "uneven": {"mode", "fractions", "extra_looks", "control_users"}}
_MAX_CELLS = 2_000_000        # replicates x looks x (arms x metrics) per chunk
_MAX_BINARY_GROUP = 3


# ---------------------------------------------------------------------------------
# Scenarios
# ---------------------------------------------------------------------------------

@dataclass(frozen=True)
class MetricData:
    """How one metric's data are drawn.

    Attributes
    ----------
    name : str
        A metric of the plan.
    data_kind : str
        ``binary``, ``normal``, ``lognormal`` or ``counts`` (as two-arm scenarios).
    data : dict
        The control's parameters.
    effect_type : {"difference", "relative", "mde_multiple"}
        How the effects are given; ``mde_multiple`` is a multiple of the metric's
        signed ``mde`` (a primary's effect to detect, a guardrail's harm to detect).
    effects : dict
        True effect per treatment arm (arms left out: 0).
    """

    name: str
    data_kind: str
    data: dict
    effect_type: str
    effects: dict[str, float]


@dataclass(frozen=True)
class ExperimentScenario:
    """A validated experiment scenario (see :func:`experiment_scenario_from_dict`)."""

    name: str
    description: str
    metrics: tuple[MetricData, ...]
    correlation: dict[tuple[str, str], float]
    mode: str = "fixed"
    fractions: tuple[float, ...] = ()
    extra_looks: tuple[float, ...] = ()
    futility: str = "obey"
    control_users: int | None = None


def is_experiment_scenario(doc: Any) -> bool:
    """Whether a parsed scenario document describes an experiment (it has
    ``metrics``)."""
    return isinstance(doc, Mapping) and "metrics" in doc


def experiment_scenario_from_dict(d: Any) -> ExperimentScenario:
    """Validate a parsed experiment scenario::

        name = "three variants, one better"
        [[metrics]]
        name = "orders"                        # a metric of the plan
        data = {kind = "binary", rate = 0.10}  # the control's data model
        effects = {green = 0.02}               # per treatment arm (others: 0)
        effect_type = "difference"             # or relative, mde_multiple
        [[metrics]]
        name = "signup"
        data = {kind = "binary", rate = 0.30}
        [correlation]
        orders = {signup = 0.4}                # or [["orders", "signup", 0.4]]
        [traffic]
        mode = "fixed"                         # or "uneven" with fractions = [...]
        extra_looks = [0.3]
        control_users = 12000                  # at the last scheduled look (default:
                                               # the plan's; arms: times allocation)
        [analysis]
        futility = "obey"                      # or "ignore"

    Raises
    ------
    ValueError
        Naming the field, the value given and what is allowed.
    """
    d = _mapping("scenario", d)
    _no_extra("scenario", d, _TOP)
    name = d.get("name", "experiment")
    if not isinstance(name, str) or not name.strip():
        raise ValueError(f"name: got {name!r}; allowed is a non-empty string")
    desc = d.get("description", "")
    if not isinstance(desc, str):
        raise ValueError(f"description: got {desc!r}; allowed is a string")
    ms = d.get("metrics")
    if not isinstance(ms, list) or not ms:
        raise ValueError(f"metrics: got {ms!r}; allowed is a list of metric tables (name, "
                         "data, effects)")
    out = []
    for i, m in enumerate(ms):
        where = f"metrics[{i}]"
        m = _mapping(where, m)
        _no_extra(where, m, _METRIC)
        mname = m.get("name")
        if not isinstance(mname, str) or not mname.strip():
            raise ValueError(f"{where}.name: got {mname!r}; allowed is the name of a metric "
                             "of the plan")
        try:
            kind, data = _data(m.get("data"))
        except ValueError as exc:
            raise ValueError(f"{where}.{exc}") from None
        etype = m.get("effect_type", "difference")
        if etype not in EFFECT_TYPES:
            raise ValueError(f"{where}.effect_type: got {etype!r}; allowed are "
                             f"{', '.join(EFFECT_TYPES)}")
        eff = _mapping(f"{where}.effects", m.get("effects", {}))
        effects = {str(a): _number(f"{where}.effects.{a}", v) for a, v in eff.items()}
        if etype == "relative":
            for a, v in effects.items():
                if not v > -1:
                    raise ValueError(f"{where}.effects.{a}: got {v!r}; allowed is a relative "
                                     "effect > -1")
        out.append(MetricData(mname.strip(), kind, data, etype, effects))
    names = [m.name for m in out]
    if len(set(names)) != len(names):
        raise ValueError(f"metrics: got the names {names}; allowed is each metric once")
    corr = _correlation(d.get("correlation", {}), {m.name: m.data_kind for m in out})
    tr = _mapping("traffic", d.get("traffic", {"mode": "fixed"}))
    mode = tr.get("mode", "fixed")
    if mode not in _TRAFFIC:
        raise ValueError(f"traffic.mode: got {mode!r}; allowed are fixed and uneven "
                         "(an experiment's replicates share their traffic)")
    _no_extra(f"traffic (mode {mode})", tr, _TRAFFIC[mode])
    fractions: tuple[float, ...] = ()
    if mode == "uneven":
        fr = tr.get("fractions")
        if not isinstance(fr, list) or not fr:
            raise ValueError(f"traffic.fractions: got {fr!r}; allowed is a list of look "
                             "times as fractions of the maximum")
        fractions = tuple(_number(f"traffic.fractions[{i}]", v) for i, v in enumerate(fr))
        if fractions[0] <= 0 or any(b <= a for a, b in zip(fractions, fractions[1:],
                                                              strict=False)):
            raise ValueError(f"traffic.fractions: got {list(fractions)}; allowed is a "
                             "strictly increasing list of fractions > 0")
    extra: tuple[float, ...] = ()
    if "extra_looks" in tr:
        ex = tr["extra_looks"]
        if not isinstance(ex, list):
            raise ValueError(f"traffic.extra_looks: got {ex!r}; allowed is a list of "
                             "fractions in (0, 1)")
        vals = [_number(f"traffic.extra_looks[{i}]", v) for i, v in enumerate(ex)]
        for i, v in enumerate(vals):
            if not 0 < v < 1:
                raise ValueError(f"traffic.extra_looks[{i}]: got {v!r}; allowed are "
                                 "fractions in (0, 1)")
        extra = tuple(sorted(set(vals)))
    users = None
    if tr.get("control_users") is not None:
        v = _number("traffic.control_users", tr["control_users"])
        if not (v >= 2 and v.is_integer()):
            raise ValueError(f"traffic.control_users: got {tr['control_users']!r}; allowed "
                             "is a whole number >= 2")
        users = int(v)
    an = _mapping("analysis", d.get("analysis", {}))
    _no_extra("analysis", an, {"futility"})
    fut = an.get("futility", "obey")
    if fut not in ("obey", "ignore"):
        raise ValueError(f"analysis.futility: got {fut!r}; allowed are obey and ignore")
    return ExperimentScenario(name.strip(), desc, tuple(out), corr, mode, fractions, extra,
                              fut, users)


def _correlation(value: Any, kinds: dict[str, str]) -> dict[tuple[str, str], float]:
    pairs: list[tuple[str, str, Any]] = []
    if isinstance(value, Mapping):
        for a, inner in value.items():
            inner = _mapping(f"correlation.{a}", inner)
            for b, rho in inner.items():
                pairs.append((str(a), str(b), rho))
    elif isinstance(value, list):
        for i, row in enumerate(value):
            if not isinstance(row, list) or len(row) != 3:
                raise ValueError(f"correlation[{i}]: got {row!r}; allowed is [metric, "
                                 "metric, correlation]")
            pairs.append((str(row[0]), str(row[1]), row[2]))
    else:
        raise ValueError(f"correlation: got {value!r}; allowed is a table {{a = {{b = "
                         "rho}}}} or a list of [a, b, rho]")
    out: dict[tuple[str, str], float] = {}
    for a, b, rho in pairs:
        where = f"correlation.{a}.{b}"
        for x in (a, b):
            if x not in kinds:
                raise ValueError(f"{where}: {x!r} is not a metric of the scenario "
                                 f"({', '.join(kinds)})")
        if a == b:
            raise ValueError(f"{where}: a metric's correlation with itself is 1")
        r = _number(where, rho)
        if not -1 < r < 1:
            raise ValueError(f"{where}: got {r!r}; allowed is a correlation in (-1, 1)")
        if kinds[a] != kinds[b] or kinds[a] not in ("binary", "normal"):
            raise ValueError(f"{where}: {a} is {kinds[a]} and {b} is {kinds[b]}; "
                             "correlations are drawn between binary metrics (a shared "
                             "latent normal) or between normal metrics")
        key = (a, b) if a < b else (b, a)
        if key in out and out[key] != r:
            raise ValueError(f"{where}: given twice with different values")
        out[key] = r
    return out


def load_experiment_scenario(path: Any) -> ExperimentScenario:
    """Read and validate an experiment scenario file (``.toml`` or ``.json``)."""
    return experiment_scenario_from_dict(read_document(path))


# ---------------------------------------------------------------------------------
# Setting a run up
# ---------------------------------------------------------------------------------

@dataclass(frozen=True)
class _Group:
    """Metrics drawn together for each arm: one (independent), or a correlated group
    of binary or normal metrics with its correlation matrix; ``metric_kind`` the kind
    the plan analyses the group's metrics as (which totals the data model gives)."""

    names: tuple[str, ...]
    kind: str
    corr: np.ndarray
    metric_kind: str = ""


@dataclass(frozen=True)
class _Job:
    plan: ExperimentPlan
    groups: tuple[_Group, ...]
    params: dict[str, dict[str, dict]]       # metric -> arm -> data parameters
    counts: dict[str, np.ndarray]            # arm -> cumulative users per look
    frames: Frames
    times: np.ndarray
    true_null: np.ndarray                    # per primary hypothesis
    no_harm: np.ndarray                      # per guardrail comparison
    obey: bool
    seed: int
    chunk: int


def _means(plan: ExperimentPlan, md: MetricData, arm: str, m_c: float) -> float:
    """The arm's true mean of a metric."""
    if arm == plan.control:
        return m_c
    e = md.effects.get(arm, 0.0)
    if md.effect_type == "difference":
        return m_c + e
    if md.effect_type == "relative":
        return m_c * (1.0 + e)
    cm = plan.comparison(arm, md.name).plan.metric or {}
    if cm.get("kind") == "ratio":
        b_c = cm["numerator_mean"] / cm["denominator_mean"]
    else:
        b_c = cm.get("baseline", 0.0) or 0.0
    b_t = b_c * (1.0 + cm["mde"]) if cm.get("relative") else b_c + cm["mde"]
    if cm.get("relative") or cm.get("scale") == "relative":
        if b_c == 0:
            raise ValueError(f"metrics.{md.name}.effect_type: mde_multiple needs a non-zero "
                             "baseline for a relative effect")
        return m_c * (1.0 + e * (b_t / b_c - 1.0))
    return m_c + e * (b_t - b_c)


def _control_mean(md: MetricData) -> float:
    d = md.data
    if md.data_kind == "lognormal":
        return (1.0 - d.get("zero_share", 0.0)) * d["mean"]
    return d["rate"] if md.data_kind in ("binary", "counts", "ratio") else d["mean"]


def _params(md: MetricData, m_c: float, m_t: float, arm: str, control: bool) -> dict:
    d = md.data
    k = md.data_kind
    where = f"metrics.{md.name}.effects.{arm}"
    if k == "binary":
        if not 0 < m_t < 1:
            raise ValueError(f"{where}: gives a rate of {m_t:g}; allowed effects keep it "
                             "inside (0, 1)")
        return {"p": m_t}
    if k == "normal":
        return {"mean": m_t, "sd": d["sd"] if control else d.get("sd_treatment", d["sd"])}
    if k == "pre_period":
        # the treatment moves the metric, not its pre-period covariate
        return {"mean": m_t, "pre_mean": d["mean"], "sd": d["sd"],
                "correlation": d["correlation"]}
    if k == "ratio":
        if not m_t > 0:
            raise ValueError(f"{where}: gives a ratio of {m_t:g}; allowed effects keep it "
                             "> 0")
        return {"rate": m_t, "denominator_mean": d["denominator_mean"],
                "dispersion": d.get("dispersion")}
    if k == "lognormal":
        if not m_t > 0:
            raise ValueError(f"{where}: gives a mean of {m_t:g}; allowed effects keep it > 0")
        z = d.get("zero_share", 0.0)
        s2 = math.log1p((d["sd"] / d["mean"]) ** 2)
        mu = math.log(d["mean"]) - 0.5 * s2
        return {"mu": mu + math.log(m_t / m_c), "sigma": math.sqrt(s2), "zero_share": z}
    if not m_t > 0:
        raise ValueError(f"{where}: gives a rate of {m_t:g}; allowed effects keep it > 0")
    return {"rate": m_t, "dispersion": d.get("dispersion")}


def _groups(sc: ExperimentScenario, metric_kinds: Mapping[str, str] | None = None
            ) -> tuple[_Group, ...]:
    kinds = {m.name: m.data_kind for m in sc.metrics}
    parent = {m.name: m.name for m in sc.metrics}

    def find(x: str) -> str:
        while parent[x] != x:
            x = parent[x]
        return x

    for a, b in sc.correlation:
        parent[find(a)] = find(b)
    out = []
    done: set[str] = set()
    for m in sc.metrics:
        root = find(m.name)
        if root in done:
            continue
        done.add(root)
        names = tuple(x.name for x in sc.metrics if find(x.name) == root)
        corr = np.eye(len(names))
        for i, j in combinations(range(len(names)), 2):
            key = tuple(sorted((names[i], names[j])))
            corr[i, j] = corr[j, i] = sc.correlation.get((key[0], key[1]), 0.0)
        if len(names) > 1:
            try:
                np.linalg.cholesky(corr)
            except np.linalg.LinAlgError:
                raise ValueError(f"correlation: the correlations of {', '.join(names)} do not "
                                 "form a valid correlation matrix (not positive definite)"
                                 ) from None
            if kinds[names[0]] == "binary" and len(names) > _MAX_BINARY_GROUP:
                raise ValueError(f"correlation: {len(names)} correlated binary metrics "
                                 f"({', '.join(names)}); allowed are at most "
                                 f"{_MAX_BINARY_GROUP}")
        mk = (metric_kinds or {}).get(names[0], ANALYSIS_KIND[kinds[names[0]]])
        out.append(_Group(names, kinds[names[0]], corr, mk))
    return tuple(out)


def _schedule(plan: ExperimentPlan, sc: ExperimentScenario) -> np.ndarray:
    base = np.asarray(sc.fractions if sc.mode == "uneven" else plan.info_fractions, float)
    extra = [x for x in sc.extra_looks if not np.any(np.isclose(base, x, rtol=0, atol=1e-12))]
    times = np.sort(np.concatenate([base, np.asarray(extra, float)]))
    if np.any(times[:-1] >= 1.0):
        k = int(np.argmax(times >= 1.0)) + 1
        raise ValueError(f"traffic.fractions: look {k} is at fraction {times[k - 1]:g}, "
                         "already the maximum, so later looks would never be analysed")
    return times


def _frames(plan: ExperimentPlan, counts: dict[str, np.ndarray], times: np.ndarray) -> Frames:
    n_j = times.size

    def frame(metric: str, arm: str) -> tuple[np.ndarray, bool]:
        t = (counts[plan.control] + counts[arm]) / (plan.max_n(metric, plan.control)
                                                    + plan.max_n(metric, arm))
        end = n_j
        reached = np.flatnonzero(t >= 1.0)
        if reached.size:
            end = int(reached[0]) + 1
        return t[:end], True

    prim = [frame(c.metric, c.arm) for c in plan.primaries]
    guard = [frame(c.metric, c.arm) for c in plan.guardrails]
    control = None
    if plan.dunnett is not None:
        m = plan.primaries[0].metric
        full = counts[plan.control] / plan.max_n(m, plan.control)
        reached = np.flatnonzero(full >= 1.0)
        end = int(reached[0]) + 1 if reached.size else n_j
        control = full[:end]
        prim = [(t[: min(t.size, end)], True) for t, _ in prim]
    return Frames([t for t, _ in prim], [f for _, f in prim], [t for t, _ in guard],
                  [f for _, f in guard], control, plan.dunnett is not None, n_j)


def _job(plan: ExperimentPlan, sc: ExperimentScenario, seed: int, chunk: int) -> _Job:
    if not isinstance(plan, ExperimentPlan):
        raise ValueError(f"plan: got {type(plan).__name__}; allowed is an experiment plan")
    if not isinstance(sc, ExperimentScenario):
        raise ValueError(f"scenario: got {type(sc).__name__}; allowed is an experiment "
                         "scenario (with metrics)")
    given = {m.name for m in sc.metrics}
    wanted = {m.name for m in plan.metrics}
    if given != wanted:
        miss = sorted(wanted - given)
        extra = sorted(given - wanted)
        raise ValueError("metrics: " + (f"the plan's {', '.join(miss)} "
                                        f"{'has' if len(miss) == 1 else 'have'} no data"
                                        if miss else
                                        f"{', '.join(extra)} {'is' if len(extra) == 1 else 'are'}"
                                        " not a metric of the plan"))
    params: dict[str, dict[str, dict]] = {}
    means: dict[str, dict[str, float]] = {}
    for md in sc.metrics:
        pm = plan.metric_by_name(md.name)
        if pm.kind not in ANALYSIS_KINDS[md.data_kind]:
            raise ValueError(f"metrics.{md.name}.data.kind: {md.data_kind} data are analysed "
                             f"as {' or '.join(ANALYSIS_KINDS[md.data_kind])}, but the "
                             f"plan's metric is {pm.kind}")
        for a in md.effects:
            if a not in plan.treatments:
                raise ValueError(f"metrics.{md.name}.effects.{a}: not a treatment arm of the "
                                 f"plan ({', '.join(plan.treatments)})")
        m_c = _control_mean(md)
        means[md.name] = {a: _means(plan, md, a, m_c) for a in plan.arms}
        params[md.name] = {a: _params(md, m_c, means[md.name][a], a, a == plan.control)
                           for a in plan.arms}
    if sc.futility == "ignore" and plan.binding:
        raise ValueError("analysis.futility: the plan's futility boundary is binding; use "
                         "futility = \"obey\"")
    times = _schedule(plan, sc)
    users = {a: max(plan.max_n(m.name, a) for m in plan.metrics) for a in plan.arms}
    if sc.control_users is not None:
        # the same users for every plan (e.g. to compare methods at equal sizes); the
        # fractions stay those of the plan's maxima, so looks may under- or over-run
        users = {a: sc.control_users * plan.allocation(a) for a in plan.arms}
    counts = {a: np.ceil(users[a] * times * (1 - 1e-12)).astype(np.int64) for a in plan.arms}
    for a, cnt in counts.items():
        if np.any(np.diff(cnt) <= 0) or cnt[0] < 2:
            raise ValueError(f"traffic: arm {a} would have {cnt.tolist()} users at the looks; "
                             "every look needs new users (at least 2 at the first)")
    # which hypotheses are true nulls, which guardrail comparisons do no harm
    true_null = []
    for c in plan.primaries:
        m = plan.metric_by_name(c.metric)
        e = _effect_on_scale(m.scale, means[c.metric][plan.control], means[c.metric][c.arm])
        away = m.orientation * (e - m.margin)     # > 0: on the tested side of the null
        true_null.append(abs(away) <= 1e-12 if plan.sides == 2 else away <= 1e-12)
    no_harm = []
    for c in plan.guardrails:
        m = plan.metric_by_name(c.metric)
        e = _effect_on_scale(m.scale, means[c.metric][plan.control], means[c.metric][c.arm])
        no_harm.append(m.orientation * (e - m.margin) <= 1e-12)
    groups = _groups(sc, {m.name: m.kind for m in plan.metrics})
    return _Job(plan, groups, params, counts, _frames(plan, counts, times), times,
                np.asarray(true_null, bool), np.asarray(no_harm, bool),
                sc.futility == "obey", int(seed), chunk)


def _effect_on_scale(scale: str, m_c: float, m_t: float) -> float:
    return m_t / m_c - 1.0 if scale == "relative" else m_t - m_c


# ---------------------------------------------------------------------------------
# Drawing correlated metrics
# ---------------------------------------------------------------------------------

def _binary_cells(p: np.ndarray, corr: np.ndarray) -> np.ndarray:
    """Probabilities of the ``2^B`` success patterns (bit ``i`` of the index: metric
    ``i`` succeeds) of a multivariate probit with rates ``p`` and latent correlation
    ``corr``, by inclusion-exclusion on the latent normal's orthant probabilities."""
    from scipy.stats import multivariate_normal

    b = p.size
    a = special.ndtri(p)
    joint = np.zeros(2 ** b)          # P(all metrics in the set succeed)
    for s in range(2 ** b):
        idx = [i for i in range(b) if s >> i & 1]
        if not idx:
            joint[s] = 1.0
        elif len(idx) == 1:
            joint[s] = p[idx[0]]
        else:
            sub = corr[np.ix_(idx, idx)]
            # Genz's lattice rule with a fixed generator: the same numbers every run
            joint[s] = float(multivariate_normal.cdf(a[idx], mean=np.zeros(len(idx)),
                                                     cov=sub, abseps=1e-9, releps=1e-9,
                                                     rng=np.random.default_rng(0)))
    cells = np.zeros(2 ** b)
    for s in range(2 ** b):
        total = 0.0
        for t in range(2 ** b):
            if t & s == s:
                total += (-1) ** (bin(t).count("1") - bin(s).count("1")) * joint[t]
        cells[s] = total
    cells = np.clip(cells, 0.0, None)
    return cells / cells.sum()


def _draw_group(g: _Group, rng: np.random.Generator, cum: np.ndarray,
                params: list[dict]) -> list[dict]:
    """Cumulative totals of each metric of a group for one arm (replicates x looks)."""
    if len(g.names) == 1:
        return [draw_totals(g.kind, rng, cum, params[0], metric_kind=g.metric_kind)]
    m = np.ascontiguousarray(np.diff(cum, axis=1, prepend=0))
    if g.kind == "binary":
        p = np.array([x["p"] for x in params])
        cells = _binary_cells(p, g.corr)
        draws = rng.multinomial(m, cells)                       # (R, J, 2^B)
        out = []
        for i in range(p.size):
            bit = np.array([(s >> i) & 1 for s in range(cells.size)], bool)
            out.append({"n": cum, "successes": np.cumsum(draws[..., bit].sum(axis=-1),
                                                         axis=1)})
        return out
    # normal: mean vector and Wishart sums of squares (Bartlett's decomposition)
    mu = np.array([x["mean"] for x in params])
    sd = np.array([x["sd"] for x in params])
    cov = g.corr * np.outer(sd, sd)
    low = np.linalg.cholesky(cov)
    q = mu.size
    mm = np.maximum(m, 1).astype(float)
    z = rng.standard_normal(m.shape + (q,))
    mean = mu + (z @ low.T) / np.sqrt(mm)[..., None]
    df = m - 1
    if np.any(df < q):
        raise ValueError(f"traffic: {int(m.min())} new users at a look are too few to draw "
                         f"{q} correlated normal metrics")
    a = np.zeros(m.shape + (q, q))
    for i in range(q):
        a[..., i, i] = np.sqrt(rng.chisquare(df - i))
        for j in range(i):
            a[..., i, j] = rng.standard_normal(m.shape)
    la = low @ a                                                 # (R, J, q, q)
    ss = np.sum(la * la, axis=-1)                                # diag of W
    out = []
    for i in range(q):
        s1 = m * mean[..., i]
        s2 = ss[..., i] + m * mean[..., i] ** 2
        out.append({"n": cum, "sum": np.cumsum(s1, axis=1), "sum_sq": np.cumsum(s2, axis=1)})
    return out


# ---------------------------------------------------------------------------------
# One chunk
# ---------------------------------------------------------------------------------

@dataclass
class _Chunk:
    fw: int
    any_reject: int
    any_win: int
    false_win: int
    any_harm: int
    false_harm: int
    reject: np.ndarray       # per primary hypothesis
    win: np.ndarray          # per arm
    outcomes: np.ndarray     # (k, 5) decision codes
    harm: np.ndarray         # per guardrail comparison
    stops: np.ndarray        # (k, J)
    users: int
    users_sq: int


def _run_chunk(job: _Job, index: int, n: int,
               report: Callable[[float], None] | None = None) -> _Chunk:
    plan = job.plan
    rng = np.random.default_rng(np.random.SeedSequence(job.seed, spawn_key=(index,)))
    n_j = job.times.size
    totals: dict[str, dict[str, dict]] = {m.name: {} for m in plan.metrics}
    for a in plan.arms:
        cum = np.broadcast_to(job.counts[a], (n, n_j))
        for g in job.groups:
            drawn = _draw_group(g, rng, cum, [job.params[x][a] for x in g.names])
            for name, tot in zip(g.names, drawn, strict=True):
                totals[name][a] = tot
    if report is not None:
        report(0.5)

    def z_of(cs: tuple) -> tuple[np.ndarray, np.ndarray]:
        z = np.zeros((n, len(cs), n_j))
        ok = np.zeros((n, len(cs), n_j), bool)
        for i, c in enumerate(cs):
            m = plan.metric_by_name(c.metric)
            eff = metrics.effect(m.kind, totals[c.metric][plan.control],
                                 totals[c.metric][c.arm], scale=m.scale, null=m.null)
            z[:, i, :] = m.orientation * np.asarray(eff.z, float)
            ok[:, i, :] = ~np.asarray(eff.degenerate, bool)
        return z, ok

    zp, okp = z_of(plan.primaries)
    zg, okg = z_of(plan.guardrails)
    out = decide(plan, job.frames, zp, okp, zg, okg, Boundaries(plan, job.frames),
                 obey_futility=job.obey)
    rows = np.arange(n)
    k = len(plan.treatments)
    rej = out.rejected >= 0
    # direction of each rejection (two-sided tests can reject towards worse)
    up = np.zeros_like(rej)
    for p in range(rej.shape[1]):
        look = np.maximum(out.rejected[:, p], 0)
        up[:, p] = rej[:, p] & (zp[rows, p, look] > 0)
    arm_p = np.array([plan.treatments.index(c.arm) for c in plan.primaries])
    arm_won = out.arm_code == Decision.STOP_EFFICACY.code
    worse = np.zeros((n, k), bool)
    for p in range(rej.shape[1]):
        worse[:, arm_p[p]] |= rej[:, p] & ~up[:, p]
    winner = arm_won & ~worse
    false_win = np.zeros(n, bool)
    for q in np.flatnonzero(job.true_null):
        false_win |= up[:, q] & winner[:, arm_p[q]]
    harm = out.harm >= 0
    stop = np.where(out.arm_stop >= 0, out.arm_stop, n_j - 1)
    outcomes = np.zeros((k, 5), dtype=np.int64)
    stops = np.zeros((k, n_j), dtype=np.int64)
    users = np.zeros(n, dtype=np.int64)
    for ai in range(k):
        np.add.at(outcomes[ai], out.arm_code[:, ai].astype(np.intp), 1)
        np.add.at(stops[ai], stop[:, ai], 1)
        users += job.counts[plan.treatments[ai]][stop[:, ai]]
    users += job.counts[plan.control][stop.max(axis=1)]
    if report is not None:
        report(1.0)
    return _Chunk(
        fw=int((rej[:, job.true_null]).any(axis=1).sum()) if job.true_null.any() else 0,
        any_reject=int(rej.any(axis=1).sum()), any_win=int(winner.any(axis=1).sum()),
        false_win=int(false_win.sum()), any_harm=int(harm.any(axis=1).sum()),
        false_harm=int(harm[:, job.no_harm].any(axis=1).sum()) if job.no_harm.any() else 0,
        reject=rej.sum(axis=0).astype(np.int64), win=winner.sum(axis=0).astype(np.int64),
        outcomes=outcomes, harm=harm.sum(axis=0).astype(np.int64), stops=stops,
        users=int(users.sum()), users_sq=int((users * users).sum()))


# ---------------------------------------------------------------------------------
# Results
# ---------------------------------------------------------------------------------

@dataclass(frozen=True)
class Rate:
    """A count of replicates, its share and exact (Clopper-Pearson) interval, beside
    what the plan states (``planned``)."""

    count: int
    rate: float
    ci_lower: float
    ci_upper: float
    planned: float | None = None


@dataclass(frozen=True)
class ExperimentSimulationResult:
    """What :func:`simulate_experiment` found.

    Attributes
    ----------
    scenario, description, method, plan_label : str
    alpha : float
    sides : int
    reps, seed, chunk_size : int
    confidence : float
    futility : {"obey", "ignore"}
    true_nulls : list of str
        Primary hypotheses (``arm/metric``) whose null is true in the scenario.
    null : bool
        Some primary null is true: :attr:`rate` is then the family-wise error.
    rejections, rate, ci_lower, ci_upper : int, float, float, float
        Replicates rejecting some true null (the family-wise error), and its interval.
    tails : tuple of TailRate
        One entry, ``family``, at alpha (for the validation grid's rule).
    any_rejection : Rate
        At least one primary hypothesis rejected (power for at least one arm).
    any_win, false_win : Rate
        Some arm won; some arm won on a true null (at most alpha, the plan states).
    hypotheses : dict
        Per hypothesis its rejection :class:`Rate`, ``planned`` its planned power.
    winners : dict
        Per arm the :class:`Rate` of winning.
    outcomes : dict
        Per arm the count of each decision.
    guardrails : dict
        Per guardrail comparison its harm-stop :class:`Rate`, ``planned`` its
        planned power when the scenario harms, its alpha when it does not.
    any_harm, false_harm : Rate
        Some arm stopped for harm; some guardrail crossed without harm beyond its
        margin (``planned``: the plan's bound on a false stop for harm for some arm).
    expected_total, expected_total_se, max_total : float
        Users over all arms at the end (each arm until its stop, the control until
        the last).
    look_times : ndarray
    stops : dict
        Per arm, replicates stopping at each look.
    verdict : str
    boundary_calls : int
        Chunks (each computes, or finds cached, one set of boundaries).
    """

    scenario: str
    description: str
    method: str
    plan_label: str
    alpha: float
    sides: int
    reps: int
    seed: int
    chunk_size: int
    confidence: float
    futility: str
    true_nulls: list[str]
    null: bool
    rejections: int
    rate: float
    ci_lower: float
    ci_upper: float
    tails: tuple[TailRate, ...]
    any_rejection: Rate
    any_win: Rate
    false_win: Rate
    hypotheses: dict[str, Rate]
    winners: dict[str, Rate]
    outcomes: dict[str, dict[str, int]]
    guardrails: dict[str, Rate]
    any_harm: Rate
    false_harm: Rate
    expected_total: float
    expected_total_se: float
    max_total: float
    look_times: np.ndarray
    stops: dict[str, list[int]]
    verdict: str
    boundary_calls: int
    naive: None = field(default=None, repr=False)

    @property
    def leaks(self) -> bool:
        """The family-wise error's interval lies above alpha (a true null exists)."""
        return self.null and self.ci_lower > self.alpha

    def to_dict(self) -> dict:
        """Plain JSON types."""
        from seqtest.core.jsonable import plain
        out = plain(self)
        out["measure"] = "family_wise_error" if self.null else "power"
        return out

    def table(self) -> str:
        pct = f"{self.confidence:.0%}"
        lines = [f"Scenario {self.scenario!r}: {self.reps:,} simulated experiments (seed "
                 f"{self.seed})", f"  plan: {self.plan_label}"]
        if self.null:
            lines.append(f"Family-wise error over the true nulls ({', '.join(self.true_nulls)}):"
                         f" {self.rate:.4f} ({pct} Clopper-Pearson {self.ci_lower:.4f} to "
                         f"{self.ci_upper:.4f}); plan: {self.alpha:g}")
        r = self.any_rejection
        lines.append(f"At least one arm rejected: {r.rate:.4f} ({r.ci_lower:.4f} to "
                     f"{r.ci_upper:.4f}); some arm won: {self.any_win.rate:.4f}; a false "
                     f"win: {self.false_win.rate:.4f} (plan: at most {self.alpha:g})")
        for name, x in self.hypotheses.items():
            plan_ = "" if x.planned is None else f"; planned power {x.planned:.4f}"
            lines.append(f"  {name}: rejected {x.rate:.4f} ({x.ci_lower:.4f} to "
                         f"{x.ci_upper:.4f}){plan_}")
        for name, x in self.guardrails.items():
            lines.append(f"  guardrail {name}: harm stop {x.rate:.4f} ({x.ci_lower:.4f} to "
                         f"{x.ci_upper:.4f})" + ("" if x.planned is None
                                                 else f"; plan {x.planned:.4f}"))
        if self.guardrails:
            f_ = self.false_harm
            lines.append(f"A false stop for harm: {f_.rate:.4f} ({f_.ci_lower:.4f} to "
                         f"{f_.ci_upper:.4f}); plan: at most {f_.planned}")
        for arm, counts in self.outcomes.items():
            lines.append(f"  {arm}: " + ", ".join(f"{d} {c:,}" for d, c in counts.items()
                                                  if c))
        lines.append(f"Expected users over all arms: {self.expected_total:,.1f} +- "
                     f"{self.expected_total_se:,.1f} of at most {self.max_total:,.0f}")
        lines.append(f"Verdict: {self.verdict}")
        return "\n".join(lines)


@dataclass(frozen=True)
class PreparedExperiment:
    """A checked experiment simulation ready to run (see
    :class:`seqtest.simulation.engine.Prepared`)."""

    plan: ExperimentPlan
    scenario: ExperimentScenario
    job: _Job
    reps: int
    confidence: float

    @property
    def batch(self) -> Batch:
        c = self.job.chunk
        return Batch(_run_chunk, self.job, tuple(min(c, self.reps - s)
                                                 for s in range(0, self.reps, c)))

    def result(self, chunks: list) -> ExperimentSimulationResult:
        return _combine(self, chunks)


def prepare_experiment(plan: ExperimentPlan, scenario: ExperimentScenario, reps: int, *,
                       seed: int = 0, chunk_size: int = DEFAULT_CHUNK,
                       confidence: float = 0.95) -> PreparedExperiment:
    """Check the arguments of :func:`simulate_experiment` and set the run up."""
    if isinstance(reps, bool) or not isinstance(reps, (int, np.integer)) or reps < 1:
        raise ValueError(f"reps: got {reps!r}; allowed is a whole number >= 1")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ValueError(f"seed: got {seed!r}; allowed is a whole number >= 0")
    if isinstance(chunk_size, bool) or not isinstance(chunk_size, (int, np.integer)) \
            or chunk_size < 1:
        raise ValueError(f"chunk_size: got {chunk_size!r}; allowed is a whole number >= 1")
    if not 0 < float(confidence) < 1:
        raise ValueError(f"confidence: got {confidence!r}; allowed is a level in (0, 1)")
    if isinstance(plan, Mapping):
        from seqtest.planning.documents import plan_from_dict
        plan = plan_from_dict(plan)  # type: ignore[assignment]
    job = _job(plan, scenario, int(seed), 0)
    cells = job.times.size * len(plan.arms) * max(len(plan.metrics), 1)
    chunk = int(min(int(chunk_size), max(500, _MAX_CELLS // cells)))
    return PreparedExperiment(plan, scenario, replace(job, chunk=chunk), int(reps),
                              float(confidence))


def _rate(count: int, reps: int, confidence: float, planned: float | None = None) -> Rate:
    lo, hi = clopper_pearson(count, reps, confidence)
    return Rate(int(count), count / reps, lo, hi, planned)


def _combine(prep: PreparedExperiment, chunks: list[_Chunk]) -> ExperimentSimulationResult:
    plan, job, reps, conf = prep.plan, prep.job, prep.reps, prep.confidence
    sc = prep.scenario
    first = chunks[0]
    tot: dict[str, Any] = {f: 0 for f in ("fw", "any_reject", "any_win", "false_win",
                                          "any_harm", "false_harm", "users", "users_sq")}
    arr: dict[str, np.ndarray] = {f: np.zeros_like(getattr(first, f))
                                  for f in ("reject", "win", "outcomes", "harm", "stops")}
    for c in chunks:                        # in chunk order
        for f in tot:
            tot[f] += getattr(c, f)
        for f in arr:
            arr[f] = arr[f] + getattr(c, f)
    fw_lo, fw_hi = clopper_pearson(tot["fw"], reps, conf)
    null = bool(job.true_null.any())
    hyps = {c.label: _rate(int(arr["reject"][i]), reps, conf,
                           None if job.true_null[i] else c.planned_power)
            for i, c in enumerate(plan.primaries)}
    guards = {c.label: _rate(int(arr["harm"][i]), reps, conf,
                             c.level if job.no_harm[i] else c.planned_power)
              for i, c in enumerate(plan.guardrails)}
    codes = [d.value for d in Decision]
    outcomes = {a: {codes[i]: int(arr["outcomes"][k, i]) for i in range(len(codes))}
                for k, a in enumerate(plan.treatments)}
    errors = plan.errors
    false_harm = _rate(tot["false_harm"], reps, conf, errors["false_harm_any_arm"])
    false_win = _rate(tot["false_win"], reps, conf, plan.alpha)
    mean = tot["users"] / reps
    var = max(0.0, (tot["users_sq"] - tot["users"] ** 2 / reps) / max(reps - 1, 1))
    max_total = float(sum(job.counts[a][-1] for a in plan.arms))
    verdicts = []
    if null:
        verdicts.append("family-wise error " + ("leaks alpha" if fw_lo > plan.alpha
                                                else "holds alpha"))
    verdicts.append("false wins " + ("above" if false_win.ci_lower > plan.alpha
                                     else "within") + " alpha")
    if job.no_harm.any() and plan.guardrails:
        verdicts.append("false harm stops " + ("above" if false_harm.ci_lower
                                               > errors["false_harm_any_arm"]
                                               else "within") + " the plan's bound")
    label = (f"{len(plan.treatments)} treatments, {plan.looks} looks, "
             f"{'one' if plan.sides == 1 else 'two'}-sided alpha {plan.alpha:g}, "
             f"{plan.method}, {len(plan.metrics)} metric(s)")
    return ExperimentSimulationResult(
        scenario=sc.name, description=sc.description, method=plan.method,
        plan_label=label, alpha=plan.alpha, sides=plan.sides, reps=reps, seed=job.seed,
        chunk_size=job.chunk, confidence=conf, futility="obey" if job.obey else "ignore",
        true_nulls=[c.label for i, c in enumerate(plan.primaries) if job.true_null[i]],
        null=null, rejections=int(tot["fw"]), rate=tot["fw"] / reps, ci_lower=fw_lo,
        ci_upper=fw_hi,
        tails=(TailRate("family", int(tot["fw"]), tot["fw"] / reps, fw_lo, fw_hi,
                        plan.alpha),),
        any_rejection=_rate(tot["any_reject"], reps, conf),
        any_win=_rate(tot["any_win"], reps, conf), false_win=false_win, hypotheses=hyps,
        winners={a: _rate(int(arr["win"][k]), reps, conf)
                 for k, a in enumerate(plan.treatments)},
        outcomes=outcomes, guardrails=guards, any_harm=_rate(tot["any_harm"], reps, conf),
        false_harm=false_harm, expected_total=mean, expected_total_se=math.sqrt(var / reps),
        max_total=max_total, look_times=job.times.copy(),
        stops={a: [int(x) for x in arr["stops"][k]] for k, a in enumerate(plan.treatments)},
        verdict="; ".join(verdicts), boundary_calls=len(chunks))


def simulate_experiment(
    plan: ExperimentPlan,
    scenario: ExperimentScenario,
    reps: int,
    *,
    seed: int = 0,
    workers: int | None = 1,
    chunk_size: int = DEFAULT_CHUNK,
    confidence: float = 0.95,
    progress: Callable[[int, int], None] | None = None,
    executor: Executor | None = None,
    client: Any = None,
) -> ExperimentSimulationResult:
    """Simulate ``reps`` experiments of a scenario under an experiment plan (module
    docstring); arguments as :func:`seqtest.simulation.engine.simulate`."""
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int)
                                or workers < 0):
        raise ValueError(f"workers: got {workers!r}; allowed is a whole number >= 0 "
                         "(0 or None: all cores)")
    prep = prepare_experiment(plan, scenario, reps, seed=seed, chunk_size=chunk_size,
                              confidence=confidence)
    runner = Runner(workers=workers if workers else (os.cpu_count() or 1),
                    executor=executor, client=client)
    moved = None if progress is None else (lambda _b, done: progress(done, prep.reps))
    chunks = runner.run([prep.batch], progress=moved)[0]
    assert chunks is not None
    return prep.result(chunks)


