"""Plan documents: reading them back, and refusing those whose numbers were changed.

A plan document (``Plan.to_dict()``, ``MixturePlan.to_dict()``; what ``seqtest plan
--json`` writes and the service stores) has a ``kind``, the ``version`` of seqtest that
wrote it, the ``inputs`` it was designed from and the numbers ``computed`` from them.
:func:`plan_from_dict` checks every field (type, range, length; a message naming the
field), then, unless the caller trusts the document, designs the plan again from its
inputs and compares: a document whose computed numbers disagree with its inputs was
edited, and deciding on it would break the error rates its inputs promise (a boundary
lowered from 2.79 to 1.96, a drift halved so the sample is a quarter of what the power
needs), so it is refused with :class:`~seqtest.core.errors.PlanDocumentError` naming the
field.

Releases. A document written by an earlier release is not refused because this release
computes a little differently: the numbers of each earlier release are accepted within
the documented size of what changed since (:data:`RELEASE_CHANGES`), the plan keeps its
own numbers (a frozen plan decides as it did), and :attr:`Plan.notes` says what this
release would compute instead. A document of this release must agree to within
:data:`SAME_RELEASE_TOLERANCE` (recomputation is deterministic up to rounding).

Old names of the first release (``inputs.info_fractions``, ``computed.nominal_p``) are
read with a :class:`DeprecationWarning`, for one release.

Experiment documents (kind ``experiment``, :meth:`ExperimentPlan.to_dict()
<seqtest.planning.experiment.ExperimentPlan.to_dict>`) hold the experiment's inputs
(arms with allocations, metrics with roles, the method and its graph) and, computed,
every comparison's level, boundaries, cumulative alpha, drift and planned power, the
users per arm and metric, the Dunnett-type boundaries' Monte Carlo errors and the
errors the plan promises. Every field is checked; unless trusted, the experiment is
designed again and every number compared: to :data:`SAME_RELEASE_TOLERANCE` for the
graphical method (deterministic), and for Dunnett-type boundaries to
:data:`DUNNETT_Z_ERRORS` times the recomputation's own reported standard error on z
(quasi-Monte Carlo, deterministic with its fixed seed on one machine, but with
rounding that may differ between machines), with the drift, power and sizes allowed
the change that follows from it. The document's own standard errors never widen the
tolerance (they are checked against the recomputation's).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping
from dataclasses import replace
from typing import Any

import numpy as np

from seqtest.core import checks, classical, spending
from seqtest.core.errors import InputError, PlanDocumentError
from seqtest.core.version import __version__
from seqtest.core.vocabulary import EXPERIMENT_KIND, PLAN_KINDS, SCALES
from seqtest.planning.design import MAX_GRID_R, Plan, design
from seqtest.planning.experiment import (
    Comparison,
    ExperimentInputs,
    ExperimentPlan,
    design_experiment,
    experiment_inputs,
)
from seqtest.planning.mixture import MixturePlan, mixture_plan
from seqtest.planning.sizing import check_metric, legacy_max_control, per_look

__all__ = ["DUNNETT_Z_ERRORS", "RELEASE_CHANGES", "SAME_RELEASE_TOLERANCE",
           "plan_from_dict"]

#: Largest difference accepted between a document of this release and a recomputation
#: (absolute on z and probabilities, relative on the drift and tau2).
SAME_RELEASE_TOLERANCE = 1e-8

#: Dunnett-type boundaries of an experiment document must agree with a recomputation to
#: this many of the recomputation's reported standard errors on z (plus
#: :data:`SAME_RELEASE_TOLERANCE`): the 0.9999 point of Student's t with 7 degrees of
#: freedom is 7.0 for the 8 quasi-Monte Carlo replicates, so a document whose
#: boundaries differ by more was edited, not recomputed elsewhere.
DUNNETT_Z_ERRORS = 7.0

#: For documents of earlier releases: how much each kind of number may differ from
#: what this release computes, and why (the changes since that release).
RELEASE_CHANGES: dict[str, dict[str, Any]] = {
    "0.1.0": {
        "z": 1e-3,
        "probability": 1e-5,
        "relative": 5e-3,
        "why": "0.2.0 made the numerical integration accurate when two looks are close "
               "together (boundaries moved by up to about 1e-4, the drift of such plans "
               "by up to about 0.1%), replaced the root finders (changes near 1e-12) and "
               "sizes binary and rate metrics for the score statistic it tests them with",
    },
}

_GS_INPUTS = {"alpha", "sides", "power", "information_fractions", "efficacy", "futility",
              "binding", "metric", "grid_r"}
_GS_COMPUTED = {"efficacy_z", "futility_z", "cumulative_alpha", "p_threshold", "drift",
                "fixed_drift", "inflation", "sample_size"}
_MIX_INPUTS = ("alpha", "sides", "mde", "max_n_per_arm", "unit_variance", "scale", "metric")
_MIX_COMPUTED = ("tau2", "tau2_rule")
_RENAMED = {"inputs": {"info_fractions": "information_fractions"},
            "computed": {"nominal_p": "p_threshold"}}


def plan_from_dict(document: Any, *, trust: bool = False
                   ) -> Plan | MixturePlan | ExperimentPlan:
    """Read a plan document of any kind (``group_sequential``, ``mixture`` or
    ``experiment``).

    Parameters
    ----------
    document : dict
        A plan document (see the module docstring).
    trust : bool
        Skip the comparison of the computed numbers with a recomputation from the
        inputs (every field is still checked). Only for documents the caller verified
        before, e.g. a plan the service verified when it stored it.

    Raises
    ------
    PlanDocumentError
        Naming the field: not a plan document, a missing or malformed field, or
        computed numbers that disagree with the inputs.
    """
    doc = _mapping("plan", document)
    kind = doc.get("kind")
    if kind == EXPERIMENT_KIND:
        return _read_experiment(doc, trust)
    if kind not in PLAN_KINDS:
        raise PlanDocumentError(f"kind: got {checks.show(kind)}; allowed are "
                                f"{', '.join([*PLAN_KINDS, EXPERIMENT_KIND])}", field="kind")
    version = doc.get("version", "0.1.0")
    if not isinstance(version, str) or len(version) > 40:
        raise PlanDocumentError(f"version: got {checks.show(version)}; allowed is the "
                                "release that wrote the document, e.g. '0.2.0'",
                                field="version")
    if version != __version__ and version not in RELEASE_CHANGES:
        raise PlanDocumentError(
            f"version: got {version!r}; this is seqtest {__version__}, which reads "
            f"documents of {', '.join([__version__, *RELEASE_CHANGES])}; read it with the "
            "release that wrote it", field="version")
    inputs = _renamed("inputs", _mapping("inputs", _field(doc, "inputs", "")))
    computed = _renamed("computed", _mapping("computed", _field(doc, "computed", "")))
    _no_extra(doc, {"kind", "version", "inputs", "computed"}, "")
    try:
        if kind == "group_sequential":
            plan: Plan | MixturePlan = _read_group_sequential(inputs, computed)
        else:
            plan = _read_mixture(inputs, computed)
    except PlanDocumentError:
        raise
    except InputError as exc:
        raise PlanDocumentError(f"inputs: {exc}", field="inputs") from None
    if isinstance(plan, Plan) and plan.metric is not None and plan.n_control is None:
        # a document of the first release carries no users per look: size it as that
        # release did, so that it measures fractions, and so decides, as it did
        n_c = legacy_max_control(plan, plan.metric)
        n_ctrl, n_trt = per_look(n_c, plan.metric["allocation"], plan.info_fractions)
        plan = replace(plan, n_control=n_ctrl, n_treatment=n_trt)
    if trust:
        return plan
    return _verify(plan, inputs, version, sizes_given=computed.get("sample_size") is not None)


# -- checking fields ---------------------------------------------------------------------

def _mapping(name: str, value: Any) -> Mapping:
    if not isinstance(value, Mapping):
        raise PlanDocumentError(f"{name}: got {checks.show(value)}; allowed is a JSON object"
                                + (" (a plan document, e.g. from 'seqtest plan --json')"
                                   if name == "plan" else ""), field=None if name == "plan"
                                else name)
    return value


def _field(d: Mapping, key: str, where: str) -> Any:
    if key not in d:
        path = f"{where}.{key}" if where else key
        raise PlanDocumentError(f"{path}: missing; the document lacks this field",
                                field=path)
    return d[key]


def _no_extra(d: Mapping, allowed: set[str], where: str) -> None:
    extra = sorted(str(k) for k in d if k not in allowed)
    if extra:
        path = f"{where}.{extra[0]}" if where else extra[0]
        raise PlanDocumentError(f"{path}: unknown field; allowed are "
                                f"{', '.join(sorted(allowed))}", field=path)


def _renamed(where: str, d: Mapping) -> dict:
    out = dict(d)
    for old, new in _RENAMED.get(where, {}).items():
        if old in out:
            if new in out:
                raise PlanDocumentError(f"{where}.{old}: give only {where}.{new} (the same "
                                        "field under its new name)", field=f"{where}.{old}")
            warnings.warn(f"plan document: {where}.{old} is now {where}.{new}; the old name "
                          "is read for this release only", DeprecationWarning, stacklevel=4)
            out[new] = out.pop(old)
    return out


def _check(path: str, fn: Any, *args: Any, **kw: Any) -> Any:
    """Run a check from :mod:`seqtest.core.checks`, naming the document's field."""
    try:
        return fn(path, *args, **kw)
    except InputError as exc:
        raise PlanDocumentError(str(exc), field=path) from None


def _numbers(path: str, value: Any, *, length: int | None, missing: float,
             lo: float = -math.inf, hi: float = math.inf) -> np.ndarray:
    """A JSON list of numbers (``null`` for a non-finite value, read as ``missing``)."""
    if not isinstance(value, list):
        raise PlanDocumentError(f"{path}: got {checks.show(value)}; allowed is a list of "
                                "numbers", field=path)
    if length is not None and len(value) != length:
        raise PlanDocumentError(f"{path}: got {len(value)} values; allowed is one per look "
                                f"({length})", field=path)
    out = [missing if v is None else _check(f"{path}[{i}]", checks.number, v, lo=lo, hi=hi)
           for i, v in enumerate(value)]
    return np.asarray(out, float)


def _boundary(path: str, value: Any) -> Any:
    if value is None:
        return None
    d = _mapping(path, value)
    try:
        if d.get("type") == "classical":
            fam = d.get("family")
            if fam == "wang_tsiatis":
                _no_extra(d, {"type", "family", "delta"}, path)
                return classical.wang_tsiatis(_field(d, "delta", path))
            if fam == "haybittle_peto":
                _no_extra(d, {"type", "family", "interim_z"}, path)
                return classical.haybittle_peto(_field(d, "interim_z", path))
            raise PlanDocumentError(f"{path}.family: got {checks.show(fam)}; allowed are "
                                    "wang_tsiatis, haybittle_peto", field=f"{path}.family")
        if d.get("type") != "spending":
            raise PlanDocumentError(f"{path}.type: got {checks.show(d.get('type'))}; allowed "
                                    "are spending, classical", field=f"{path}.type")
        fam = d.get("family")
        params = {"obrien_fleming": set(), "pocock": set(), "hwang_shih_decani": {"gamma"},
                  "power_family": {"rho"}, "table": {"fractions", "cumulative"}}
        if fam not in params:
            raise PlanDocumentError(f"{path}.family: got {checks.show(fam)}; allowed are "
                                    f"{', '.join(params)}", field=f"{path}.family")
        _no_extra(d, {"type", "family", *params[fam]}, path)
        for key in params[fam]:
            _field(d, key, path)
        return spending.from_dict(dict(d))
    except PlanDocumentError:
        raise
    except (InputError, ValueError, TypeError) as exc:
        raise PlanDocumentError(f"{path}: {exc}", field=path) from None


def _metric(value: Any) -> dict | None:
    if value is None:
        return None
    try:
        return check_metric(value)
    except (InputError, ValueError) as exc:
        raise PlanDocumentError(f"inputs.metric: {exc}", field="inputs.metric") from None


def _read_group_sequential(inp: dict, comp: dict) -> Plan:
    _no_extra(inp, _GS_INPUTS, "inputs")
    _no_extra(comp, _GS_COMPUTED, "computed")
    for key in ("alpha", "sides", "power", "information_fractions", "efficacy", "futility",
                "binding"):
        _field(inp, key, "inputs")
    for key in ("efficacy_z", "futility_z", "cumulative_alpha", "drift"):
        _field(comp, key, "computed")
    from seqtest.planning.design import _check_fractions
    sides = int(_check("inputs.sides", checks.choice, inp["sides"], (1, 2)))
    alpha = _check("inputs.alpha", checks.number, inp["alpha"], lo=0.0, hi=0.5 * sides,
                   lo_open=True)
    power = _check("inputs.power", checks.probability, inp["power"], lo=alpha / sides)
    try:
        t = _check_fractions(None, inp["information_fractions"],
                             "inputs.information_fractions")
    except InputError as exc:
        raise PlanDocumentError(str(exc), field="inputs.information_fractions") from None
    eff = _boundary("inputs.efficacy", inp["efficacy"])
    if eff is None:
        raise PlanDocumentError("inputs.efficacy: got None; allowed is a spending function "
                                "or a classical boundary", field="inputs.efficacy")
    fut = _boundary("inputs.futility", inp["futility"])
    if fut is not None and not isinstance(fut, spending.SpendingFunction):
        raise PlanDocumentError("inputs.futility: a futility boundary is made by beta "
                                "spending; allowed is a spending function or null",
                                field="inputs.futility")
    binding = _check("inputs.binding", checks.boolean, inp["binding"])
    r = _check("inputs.grid_r", checks.whole, inp.get("grid_r", 24), lo=8, hi=MAX_GRID_R)
    k = t.size
    eff_z = _numbers("computed.efficacy_z", comp["efficacy_z"], length=k, missing=np.inf,
                     lo=-50.0, hi=50.0)
    fut_z = None
    if comp["futility_z"] is not None:
        fut_z = _numbers("computed.futility_z", comp["futility_z"], length=k,
                         missing=-np.inf, lo=-50.0, hi=50.0)
    if (fut_z is None) != (fut is None or k == 1):
        raise PlanDocumentError("computed.futility_z: present exactly when the plan has a "
                                "futility boundary and more than one look",
                                field="computed.futility_z")
    cum = _numbers("computed.cumulative_alpha", comp["cumulative_alpha"], length=k,
                   missing=np.nan, lo=0.0, hi=1.0)
    drift = _check("computed.drift", checks.number, comp["drift"], lo=0.0, hi=1e3,
                   lo_open=True)
    sizes: dict[str, np.ndarray] = {}
    if comp.get("sample_size") is not None:
        ss = _mapping("computed.sample_size", comp["sample_size"])
        _no_extra(ss, {"control", "treatment"}, "computed.sample_size")
        for arm in ("control", "treatment"):
            sizes[arm] = _numbers(f"computed.sample_size.{arm}",
                                  _field(ss, arm, "computed.sample_size"), length=k,
                                  missing=np.nan, lo=0.0, hi=1e15)
    plan = Plan(alpha=alpha, sides=sides, power=power, info_fractions=t, efficacy_z=eff_z,
                futility_z=fut_z, drift=drift, efficacy=eff, futility=fut,
                binding=bool(binding and fut_z is not None),
                metric=_metric(inp.get("metric")), r=r, cumulative_alpha=cum,
                n_control=sizes.get("control"), n_treatment=sizes.get("treatment"))
    # numbers derived from the ones above: they must agree with them whatever the release
    derived = [("p_threshold", plan.p_threshold, False), ("fixed_drift", plan.fixed_drift, True),
               ("inflation", plan.inflation, True)]
    for key, value, relative in derived:
        if key not in comp:
            continue
        path = f"computed.{key}"
        if key == "p_threshold":
            got = _numbers(path, comp[key], length=k, missing=0.0, lo=0.0, hi=1.0)
        else:
            got = np.atleast_1d(_check(path, checks.number, comp[key]))
        want = np.atleast_1d(np.asarray(value, float))
        err = np.abs(got - want) / (np.abs(want) if relative else 1.0)
        if np.any(~(err <= SAME_RELEASE_TOLERANCE)):
            i = int(np.argmax(~(err <= SAME_RELEASE_TOLERANCE)))
            where = f"{path}[{i}]" if key == "p_threshold" else path
            raise PlanDocumentError(f"{where}: the document says {got[i]:.6g} but its own "
                                    f"boundaries and drift give {want[i]:.6g}; the document "
                                    "was edited", field=where)
    return plan


def _read_mixture(inp: dict, comp: dict) -> MixturePlan:
    _no_extra(inp, set(_MIX_INPUTS), "inputs")
    _no_extra(comp, set(_MIX_COMPUTED), "computed")
    for key in _MIX_INPUTS:
        _field(inp, key, "inputs")
    for key in _MIX_COMPUTED:
        _field(comp, key, "computed")
    _check("inputs.scale", checks.choice, inp["scale"], SCALES)
    try:
        return MixturePlan(alpha=inp["alpha"], sides=inp["sides"], tau2=comp["tau2"],
                           mde=inp["mde"], max_n_per_arm=inp["max_n_per_arm"],
                           metric=_metric(inp["metric"]), scale=inp["scale"],
                           unit_variance=inp["unit_variance"], tau2_rule=comp["tau2_rule"])
    except (InputError, ValueError, TypeError) as exc:
        raise PlanDocumentError(f"plan: {exc}", field="inputs") from None


# -- verification --------------------------------------------------------------------------

def _verify(plan: Plan | MixturePlan, inputs: dict, version: str, *,
            sizes_given: bool = True) -> Plan | MixturePlan:
    """Recompute the plan from its inputs and compare (see the module docstring)."""
    same = version == __version__
    change = RELEASE_CHANGES.get(version, {})
    tol_z = SAME_RELEASE_TOLERANCE if same else change["z"]
    tol_p = SAME_RELEASE_TOLERANCE if same else change["probability"]
    tol_rel = SAME_RELEASE_TOLERANCE if same else change["relative"]
    try:
        fresh = _recompute(plan, inputs)
    except InputError as exc:
        raise PlanDocumentError(f"inputs: {exc}", field="inputs") from None
    notes: list[str] = []
    for path, stored, new, kind in _comparable(plan, fresh, sizes_given):
        tol = {"z": tol_z, "probability": tol_p, "relative": tol_rel,
               "users": 0.5 if same else change["relative"] * float(np.max(new))}[kind]
        a, b = np.atleast_1d(np.asarray(stored, float)), np.atleast_1d(np.asarray(new, float))
        same_inf = (np.isinf(a) & np.isinf(b) & (np.sign(a) == np.sign(b))) \
            | (np.isnan(a) & np.isnan(b))
        with np.errstate(invalid="ignore"):
            diff = np.abs(a - b) if kind != "relative" else np.abs(a - b) / np.abs(b)
        bad = ~same_inf & ~(diff <= tol)
        if bad.any():
            i = int(np.argmax(bad))
            where = f"{path}[{i}]" if a.size > 1 or path.endswith("_z") \
                or path.endswith("alpha") else path
            raise PlanDocumentError(
                f"{where}: the document says {a[i]:.6g} but its inputs give {b[i]:.6g}; the "
                "computed numbers were changed after the plan was designed (or belong to "
                "other inputs). Design the plan again ('seqtest plan' or seqtest.design) "
                "instead of editing it.", field=where)
        if not same:
            moved = ~same_inf & (diff > SAME_RELEASE_TOLERANCE)
            for j in np.flatnonzero(moved):
                where = f"{path}[{j}]" if a.size > 1 else path
                notes.append(f"{where}: {a[j]:.6g} (this release would compute {b[j]:.6g})")
    if isinstance(plan, Plan) and isinstance(fresh, Plan) and not same \
            and plan.n_control is not None and plan.n_treatment is not None \
            and fresh.n_control is not None and fresh.n_treatment is not None \
            and not np.array_equal(plan.n_control, fresh.n_control):
        notes.append(f"users per arm at the last look: {int(plan.n_control[-1])} control, "
                     f"{int(plan.n_treatment[-1])} treatment (this release would size it "
                     f"at {int(fresh.n_control[-1])} and {int(fresh.n_treatment[-1])}, "
                     "with the score statistic)")
    if notes:
        text = (f"plan written by seqtest {version}; it keeps its own numbers and decides as "
                f"it did. seqtest {__version__} would compute: " + "; ".join(notes[:6])
                + ("; ..." if len(notes) > 6 else "") + f" ({change['why']})")
        return replace(plan, notes=(text,))
    return plan


def _recompute(plan: Plan | MixturePlan, inputs: dict) -> Plan | MixturePlan:
    if isinstance(plan, Plan):
        return design(alpha=plan.alpha, sides=plan.sides, power=plan.power,
                      info_fractions=plan.info_fractions, efficacy=plan.efficacy,
                      futility=plan.futility, binding=bool(inputs["binding"]),
                      metric=plan.metric, r=plan.r)
    kw: dict[str, Any] = {"alpha": plan.alpha, "sides": plan.sides}
    if plan.metric is not None:
        kw["metric"] = plan.metric
        if plan.tau2_rule == "given":
            kw["tau2"] = plan.tau2
        if plan.max_n_per_arm is not None:
            kw["max_n_per_arm"] = plan.max_n_per_arm
        if inputs.get("unit_variance") is not None and plan.tau2_rule == "max_n":
            kw["unit_variance"] = plan.unit_variance
        return mixture_plan(**kw)
    kw.update(mde=plan.mde, max_n_per_arm=plan.max_n_per_arm,
              unit_variance=plan.unit_variance, scale=plan.scale)
    if plan.tau2_rule == "given":
        kw["tau2"] = plan.tau2
    return mixture_plan(**kw)


def _comparable(plan: Any, fresh: Any, sizes_given: bool) -> list[tuple[str, Any, Any, str]]:
    if isinstance(plan, Plan):
        rows = [("computed.efficacy_z", plan.efficacy_z, fresh.efficacy_z, "z"),
                ("computed.cumulative_alpha", plan.cumulative_alpha, fresh.cumulative_alpha,
                 "probability"),
                ("computed.drift", plan.drift, fresh.drift, "relative")]
        if plan.futility_z is not None:
            if fresh.futility_z is None:
                raise PlanDocumentError("computed.futility_z: the inputs give no futility "
                                        "boundary", field="computed.futility_z")
            rows.append(("computed.futility_z", plan.futility_z, fresh.futility_z, "z"))
        for arm in ("control", "treatment"):
            stored, new = getattr(plan, f"n_{arm}"), getattr(fresh, f"n_{arm}")
            if stored is not None and sizes_given:
                if new is None:
                    raise PlanDocumentError(f"computed.sample_size.{arm}: the inputs give no "
                                            "sample size (no metric)",
                                            field=f"computed.sample_size.{arm}")
                rows.append((f"computed.sample_size.{arm}", stored, new, "users"))
        return rows
    if plan.tau2_rule != fresh.tau2_rule:
        raise PlanDocumentError(f"computed.tau2_rule: the document says {plan.tau2_rule!r} "
                                f"but its inputs give {fresh.tau2_rule!r}",
                                field="computed.tau2_rule")
    return [("computed.tau2", plan.tau2, fresh.tau2, "relative"),
            ("inputs.unit_variance", plan.unit_variance if plan.unit_variance is not None
             else math.nan, fresh.unit_variance if fresh.unit_variance is not None
             else math.nan, "relative")]


# -- experiments ---------------------------------------------------------------------------

_EXP_INPUTS = {"arms", "metrics", "alpha", "sides", "power", "information_fractions",
               "efficacy", "futility", "binding", "method", "weights", "transitions",
               "power_for", "grid_r"}
_EXP_COMPUTED = {"comparisons", "sample_size", "dunnett", "errors"}
_EXP_COMPARISON = {"arm", "metric", "role", "level", "efficacy_z", "futility_z",
                   "cumulative_alpha", "drift", "planned_power"}
_EXP_DUNNETT = {"z_error", "family_error", "standard_error", "paths"}


def _field_of(message: str, where: str) -> str:
    """The field an input check names (the text before its first colon)."""
    head = message.split(":", 1)[0].strip()
    return f"{where}.{head}" if head and " " not in head else where


def _experiment_inputs(inp: Mapping) -> ExperimentInputs:
    _no_extra(inp, _EXP_INPUTS, "inputs")
    for key in _EXP_INPUTS - {"grid_r"}:
        _field(inp, key, "inputs")
    arms = inp["arms"]
    if not isinstance(arms, list) or not arms:
        raise PlanDocumentError(f"inputs.arms: got {checks.show(arms)}; allowed is a list of "
                                "arms, the control first", field="inputs.arms")
    names, alloc = [], []
    for i, a in enumerate(arms):
        d = _mapping(f"inputs.arms[{i}]", a)
        _no_extra(d, {"name"} if i == 0 else {"name", "allocation"}, f"inputs.arms[{i}]")
        names.append(_field(d, "name", f"inputs.arms[{i}]"))
        if i:
            alloc.append(_field(d, "allocation", f"inputs.arms[{i}]"))
    if not isinstance(inp["metrics"], list):
        raise PlanDocumentError(f"inputs.metrics: got {checks.show(inp['metrics'])}; allowed "
                                "is a list of metric descriptions", field="inputs.metrics")
    fractions = inp["information_fractions"]
    if not isinstance(fractions, list):
        raise PlanDocumentError(f"inputs.information_fractions: got {checks.show(fractions)}"
                                "; allowed is a list of numbers",
                                field="inputs.information_fractions")
    eff = _boundary("inputs.efficacy", inp["efficacy"])
    if eff is None:
        raise PlanDocumentError("inputs.efficacy: got None; allowed is a spending function "
                                "or a classical boundary", field="inputs.efficacy")
    fut = _boundary("inputs.futility", inp["futility"])
    r = _check("inputs.grid_r", checks.whole, inp.get("grid_r", 24), lo=8, hi=MAX_GRID_R)
    try:
        return experiment_inputs(
            names, list(inp["metrics"]), allocations=alloc, alpha=inp["alpha"],
            sides=inp["sides"], power=inp["power"], information_fractions=fractions,
            efficacy=eff, futility=fut, binding=inp["binding"], method=inp["method"],
            weights=inp["weights"], transitions=inp["transitions"],
            power_for=inp["power_for"], r=r)
    except (InputError, ValueError, TypeError) as exc:
        raise PlanDocumentError(f"inputs.{exc}", field=_field_of(str(exc), "inputs")) from None


def _expected_comparisons(inp: ExperimentInputs) -> list[tuple[str, str, str]]:
    """(arm, metric, role) of each comparison, in the order the plan lists them."""
    out = [(arm, m.name, "primary") for m in inp.metrics if m.role == "primary"
           for arm in inp.arms[1:]]
    out += [(arm, m.name, "guardrail") for m in inp.metrics if m.role == "guardrail"
            for arm in inp.arms[1:]]
    return out


def _read_experiment(doc: Mapping, trust: bool) -> ExperimentPlan:
    version = doc.get("version")
    if version != __version__:
        raise PlanDocumentError(f"version: got {checks.show(version)}; experiment documents "
                                f"are read by the release that wrote them (this is seqtest "
                                f"{__version__})", field="version")
    _no_extra(doc, {"kind", "version", "inputs", "computed"}, "")
    inp_doc = _mapping("inputs", _field(doc, "inputs", ""))
    comp = _mapping("computed", _field(doc, "computed", ""))
    inp = _experiment_inputs(inp_doc)
    _no_extra(comp, _EXP_COMPUTED, "computed")
    for key in _EXP_COMPUTED:
        _field(comp, key, "computed")
    t = inp.info_fractions
    k_looks = t.size
    treatments = inp.arms[1:]
    # sizes
    ss = _mapping("computed.sample_size", comp["sample_size"])
    _no_extra(ss, {m.name for m in inp.metrics}, "computed.sample_size")
    sizes: dict[str, dict[str, np.ndarray]] = {}
    for m in inp.metrics:
        where = f"computed.sample_size.{m.name}"
        per_arm = _mapping(where, _field(ss, m.name, "computed.sample_size"))
        _no_extra(per_arm, set(inp.arms), where)
        sizes[m.name] = {}
        for arm in inp.arms:
            v = _numbers(f"{where}.{arm}", _field(per_arm, arm, where), length=k_looks,
                         missing=np.nan, lo=0.0, hi=1e15)
            if np.any(np.isnan(v)) or np.any(v != np.round(v)) or np.any(np.diff(v) < 0):
                raise PlanDocumentError(f"{where}.{arm}: got {v.tolist()}; allowed are "
                                        "whole numbers that do not decrease",
                                        field=f"{where}.{arm}")
            sizes[m.name][arm] = v.astype(int)
    # comparisons
    rows = comp["comparisons"]
    expected = _expected_comparisons(inp)
    if not isinstance(rows, list) or len(rows) != len(expected):
        raise PlanDocumentError(f"computed.comparisons: got {checks.show(rows)}; allowed is "
                                f"one entry per comparison ({len(expected)})",
                                field="computed.comparisons")
    by_name = {m.name: m for m in inp.metrics}
    comps: list[Comparison] = []
    h = 0
    for i, (row, (arm, metric, role)) in enumerate(zip(rows, expected, strict=True)):
        where = f"computed.comparisons[{i}]"
        d = _mapping(where, row)
        _no_extra(d, _EXP_COMPARISON, where)
        for key in _EXP_COMPARISON:
            _field(d, key, where)
        for key, want in (("arm", arm), ("metric", metric), ("role", role)):
            if d[key] != want:
                raise PlanDocumentError(f"{where}.{key}: got {checks.show(d[key])}; allowed "
                                        f"is {want!r} (comparisons are listed primaries "
                                        "first, by metric, then arm)", field=f"{where}.{key}")
        m = by_name[metric]
        q = inp.allocations[treatments.index(arm)]
        level = _check(f"{where}.level", checks.number, d["level"], lo=0.0, hi=1.0)
        eff_z = _numbers(f"{where}.efficacy_z", d["efficacy_z"], length=k_looks,
                         missing=np.inf, lo=-50.0, hi=50.0)
        fut_z = None
        if d["futility_z"] is not None:
            fut_z = _numbers(f"{where}.futility_z", d["futility_z"], length=k_looks,
                             missing=-np.inf, lo=-50.0, hi=50.0)
        if (fut_z is None) != (role == "guardrail" or inp.futility is None):
            raise PlanDocumentError(f"{where}.futility_z: present exactly for primaries of a "
                                    "plan with a futility boundary", field=f"{where}.futility_z")
        cum = _numbers(f"{where}.cumulative_alpha", d["cumulative_alpha"], length=k_looks,
                       missing=np.nan, lo=0.0, hi=1.0)
        drift = _check(f"{where}.drift", checks.number, d["drift"], lo=0.0, hi=1e3,
                       lo_open=True)
        pw = None if d["planned_power"] is None else _check(
            f"{where}.planned_power", checks.number, d["planned_power"], lo=0.0, hi=1.0)
        if role == "primary":
            plan = Plan(alpha=level if level > 0 else inp.alpha, sides=inp.sides,
                        power=inp.power, info_fractions=t, efficacy_z=eff_z,
                        futility_z=fut_z, drift=drift, efficacy=inp.efficacy,
                        futility=inp.futility, binding=inp.binding,
                        metric=m.comparison_metric(q), r=inp.r, cumulative_alpha=cum,
                        n_control=sizes[metric][inp.arms[0]], n_treatment=sizes[metric][arm])
            comps.append(Comparison(arm, metric, role, q, level, plan, pw, h))
            h += 1
        else:
            assert m.alpha is not None and m.spending is not None
            plan = Plan(alpha=m.alpha, sides=1, power=m.power or inp.power,
                        info_fractions=t, efficacy_z=eff_z, futility_z=None, drift=drift,
                        efficacy=m.spending, futility=None, binding=False,
                        metric=m.comparison_metric(q), r=inp.r, cumulative_alpha=cum,
                        n_control=sizes[metric][inp.arms[0]], n_treatment=sizes[metric][arm])
            comps.append(Comparison(arm, metric, role, q, level, plan, pw))
    # the Dunnett-type boundaries' errors
    dn = None
    dunnett_expected = inp.method == "dunnett" and len(treatments) > 1
    if (comp["dunnett"] is None) == dunnett_expected:
        raise PlanDocumentError("computed.dunnett: present exactly for the dunnett method "
                                "with more than one treatment", field="computed.dunnett")
    if dunnett_expected:
        dd = _mapping("computed.dunnett", comp["dunnett"])
        _no_extra(dd, _EXP_DUNNETT, "computed.dunnett")
        got = {key: _numbers(f"computed.dunnett.{key}", _field(dd, key, "computed.dunnett"),
                             length=k_looks, missing=0.0, lo=0.0, hi=1.0)
               for key in ("z_error", "family_error", "standard_error")}
        paths = _check("computed.dunnett.paths", checks.whole, _field(dd, "paths",
                                                                      "computed.dunnett"),
                       lo=1)
        from seqtest.core.multiarm import DunnettBounds
        dn = DunnettBounds(comps[0].plan.efficacy_z, got["family_error"],
                           got["standard_error"], got["z_error"], paths)
    plan_ = ExperimentPlan(
        arms=inp.arms, allocations=inp.allocations, metrics=inp.metrics, alpha=inp.alpha,
        sides=inp.sides, power=inp.power, info_fractions=t, efficacy=inp.efficacy,
        futility=inp.futility, binding=inp.binding, method=inp.method, weights=inp.weights,
        transitions=inp.transitions, power_for=inp.power_for, r=inp.r,
        comparisons=tuple(comps), sizes=sizes, dunnett=dn)
    # the errors the plan promises follow from the inputs alone
    errors = _mapping("computed.errors", comp["errors"])
    if errors != plan_.errors:
        raise PlanDocumentError("computed.errors: the document's promised error rates are "
                                "not those of its inputs; the document was edited",
                                field="computed.errors")
    if trust:
        return plan_
    _verify_experiment(plan_, design_experiment(inp))
    return plan_


def _verify_experiment(plan: ExperimentPlan, fresh: ExperimentPlan) -> None:
    """Compare a document's numbers with a recomputation (module docstring)."""
    tol = SAME_RELEASE_TOLERANCE
    z_tol: np.ndarray | float = tol
    drift_rel = power_abs = users_rel = tol
    if fresh.dunnett is not None:
        z_err = np.asarray(fresh.dunnett.z_error, float)
        z_tol = DUNNETT_Z_ERRORS * z_err + tol
        worst = float(DUNNETT_Z_ERRORS * np.max(z_err))
        drift = float(fresh.comparisons[0].plan.drift)
        # a boundary moved by dz moves the drift by about dz, the power by at most
        # dz times the normal density's peak (0.4), users by twice the drift's share
        drift_rel = worst / drift + tol
        power_abs = 0.4 * worst + tol
        users_rel = 2.0 * drift_rel
    rows: list[tuple[str, Any, Any, Any, bool]] = []
    for i, (c, f) in enumerate(zip(plan.comparisons, fresh.comparisons, strict=True)):
        where = f"computed.comparisons[{i}]"
        rows += [(f"{where}.level", c.level, f.level, tol, False),
                 (f"{where}.efficacy_z", c.plan.efficacy_z, f.plan.efficacy_z,
                  z_tol if c.role == "primary" else tol, False),
                 (f"{where}.cumulative_alpha", c.plan.cumulative_alpha,
                  f.plan.cumulative_alpha, tol, False),
                 (f"{where}.drift", c.plan.drift, f.plan.drift,
                  drift_rel if c.role == "primary" else tol, True),
                 (f"{where}.planned_power", math.nan if c.planned_power is None
                  else c.planned_power, math.nan if f.planned_power is None
                  else f.planned_power, power_abs, False)]
        if c.plan.futility_z is not None:
            assert f.plan.futility_z is not None
            rows.append((f"{where}.futility_z", c.plan.futility_z, f.plan.futility_z,
                         2.0 * np.max(z_tol) + tol if fresh.dunnett is not None else tol,
                         False))
    for m, per_arm in plan.sizes.items():
        for arm, v in per_arm.items():
            new = fresh.sizes[m][arm]
            rows.append((f"computed.sample_size.{m}.{arm}", v, new,
                         0.5 + users_rel * float(np.max(new)), False))
    if plan.dunnett is not None:
        assert fresh.dunnett is not None
        se = np.asarray(fresh.dunnett.standard_error, float)
        rows += [("computed.dunnett.family_error", plan.dunnett.family_error,
                  fresh.dunnett.family_error, DUNNETT_Z_ERRORS * se + tol, False),
                 ("computed.dunnett.z_error", plan.dunnett.z_error, fresh.dunnett.z_error,
                  0.5 * np.asarray(fresh.dunnett.z_error) + tol, False),
                 ("computed.dunnett.standard_error", plan.dunnett.standard_error, se,
                  0.5 * se + tol, False)]
    for path, stored, new, tolerance, relative in rows:
        a = np.atleast_1d(np.asarray(stored, float))
        b = np.atleast_1d(np.asarray(new, float))
        same = (np.isinf(a) & np.isinf(b) & (np.sign(a) == np.sign(b))) \
            | (np.isnan(a) & np.isnan(b))
        with np.errstate(invalid="ignore"):
            diff = np.abs(a - b) / (np.abs(b) if relative else 1.0)
        bad = ~same & ~(diff <= np.broadcast_to(np.asarray(tolerance, float), diff.shape))
        if bad.any():
            j = int(np.argmax(bad))
            where = f"{path}[{j}]" if a.size > 1 else path
            raise PlanDocumentError(
                f"{where}: the document says {a[j]:.6g} but its inputs give {b[j]:.6g}; the "
                "computed numbers were changed after the plan was designed (or belong to "
                "other inputs). Design the experiment again ('seqtest plan' or "
                "seqtest.experiment_plan) instead of editing it.", field=where)
