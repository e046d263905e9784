"""The only module of the service that calls the seqtest library.

Everything statistical (plans, boundaries, validation of totals, decisions) is the
library's. This module asks the library for exactly these things:
``seqtest.design(**inputs)``, ``seqtest.mixture.mixture_plan(**inputs)``,
``seqtest.plan_from_dict(document)``, ``seqtest.analyze(plan, looks, ...)``,
``seqtest.LookDataError``, the shared vocabulary, and for the pages the reporting
package (``seqtest.reporting``: the plain-language summary, the SVG charts, the
tables, the plan's summary); it turns requests into those calls, library
errors into service errors that name what to fix, and results into plain JSON.
The analysis dictionary is the library's: its fields are passed through unrenamed.

Before a plan document reaches the library, its shape is checked as far as the
service itself relies on it: a JSON object with ``kind``, ``inputs`` and
``computed``; ``inputs.metric`` an object (the service reads its ``kind``); one
boundary per planned look (the service builds the boundary table from them); and
caps on what a client may choose (``inputs.grid_r``, the number of looks), so that
no plan makes every look of an experiment needlessly expensive.
"""

from __future__ import annotations

import logging
import re
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from typing import Any

import seqtest
import seqtest.mixture
import seqtest.reporting as reporting
import seqtest.reporting.numbers as reporting_numbers
import seqtest.reporting.style as reporting_style
from seqtest import DECISIONS as _DECISIONS
from seqtest import LookDataError
from seqtest.core.jsonable import plain
from seqtest.core.recent import Recent
from seqtest.core.vocabulary import ARMS, EXPERIMENT_KIND, METRIC_KINDS, PLAN_KINDS
from seqtest.monitoring.rules import FRACTION_BASES
from seqtest.planning.design import MAX_LOOKS, MIN_GRID_R
from service.db.records import Experiment
from service.errors import AnalysisFailed, InvalidPlan, InvalidTotals, Unprocessable

log = logging.getLogger("seqtest.service")

DECISIONS = tuple(d.value for d in _DECISIONS)
ROLES = ARMS  # the library's names of the two arms in a look
# every kind of plan the service takes: the two-arm kinds and many-arm experiments
DOCUMENT_KINDS = (*PLAN_KINDS, EXPERIMENT_KIND)
__all__ = ["DECISIONS", "DOCUMENT_KINDS", "EXPERIMENT_KIND", "FRACTION_BASES", "MAX_LOOKS",
           "METRIC_KINDS", "PLAN_KINDS", "ROLES", "Recent"]

# design inputs per kind of plan (the library's argument names)
DESIGN_INPUTS = {
    "group_sequential": ("alpha", "sides", "power", "looks", "information_fractions",
                         "efficacy",
                         "futility", "binding", "metric"),
    "mixture": ("alpha", "sides", "mde", "max_n_per_arm", "unit_variance", "tau2", "scale",
                "metric"),
    EXPERIMENT_KIND: ("arms", "metrics", "allocations", "alpha", "sides", "power", "looks",
                      "information_fractions", "efficacy", "futility", "binding", "method",
                      "weights", "transitions", "power_for"),
}
MAX_GRID_R = 48  # integration grid of a plan document (the library's default is 24)


def library_version() -> str:
    return str(getattr(seqtest, "__version__", "unknown"))


def json_safe(value: Any) -> Any:
    """Plain JSON types, non-finite floats as ``None`` (the library's one conversion)."""
    return plain(value)


def _text(exc: BaseException) -> str:
    text = str(exc) or type(exc).__name__
    if isinstance(exc, KeyError):
        text = f"missing field {text}"
    return text if len(text) <= 500 else text[:500] + "..."


_FIELD = re.compile(r"^([A-Za-z_][A-Za-z0-9_]*(?:\.[A-Za-z0-9_]+)*)(?:\[\d+\])?:")


def _named_location(message: str, base: list[Any]) -> list[Any]:
    """The location a library message names (``"alpha: got ..."``), under ``base``."""
    m = _FIELD.match(message)
    if m is None:
        return list(base)
    parts = m.group(1).split(".")
    if parts and parts[0] == "plan":
        parts = parts[1:]
    return [*base, *parts]


# ----------------------------------------------------------------------- plans


@dataclass(frozen=True)
class PlanInfo:
    """A plan read or designed once per request, with what the service needs of it."""

    plan: Any
    kind: str
    document: dict[str, Any]
    metric_kind: str | None
    binding: bool
    boundaries: list[dict[str, Any]] | None
    design_inputs: dict[str, Any]  # inputs an amendment may start from
    # an experiment plan's arms, metrics and metric kind (None for two-arm plans)
    layout: dict[str, Any] | None = None


def _bad_plan(location: list[Any], message: str) -> InvalidPlan:
    where = ".".join(str(p) for p in location[1:]) or "plan"
    return InvalidPlan(f"{where}: {message}",
                       details=[{"location": location, "message": message}])


def _check_grid_r(inputs: dict[str, Any], location: list[Any]) -> None:
    """A plan document's integration grid: the library's smallest, up to the service's
    cap (a finer grid makes every look dearer)."""
    if "grid_r" in inputs:
        r = inputs["grid_r"]
        if isinstance(r, bool) or not isinstance(r, int) or not MIN_GRID_R <= r <= MAX_GRID_R:
            raise _bad_plan([*location, "inputs", "grid_r"],
                            f"got {r!r}; allowed is a whole number from {MIN_GRID_R} to "
                            f"{MAX_GRID_R}")


def check_document_shape(document: Any, location: list[Any]) -> None:
    """What the service itself relies on in a plan document (see the module docstring)."""
    if not isinstance(document, dict):
        raise _bad_plan(location, "got a non-object; allowed is a plan document, a JSON "
                        "object with kind, inputs and computed (from `seqtest plan --json`)")
    kind = document.get("kind")
    if kind not in DOCUMENT_KINDS:
        raise _bad_plan([*location, "kind"], f"got {kind!r}; allowed are "
                        f"{', '.join(DOCUMENT_KINDS)}")
    for part in ("inputs", "computed"):
        if not isinstance(document.get(part), dict):
            raise _bad_plan([*location, part], f"got {type(document.get(part)).__name__}; "
                            "allowed is a JSON object, as written by `seqtest plan --json`")
    inputs = document["inputs"]
    if kind == EXPERIMENT_KIND:
        _check_experiment_shape(inputs, location)
        return
    metric = inputs.get("metric")
    if metric is not None and not isinstance(metric, dict):
        raise _bad_plan([*location, "inputs", "metric"],
                        f"got {type(metric).__name__}; allowed is an object such as "
                        "{'kind': 'binary', 'baseline': 0.1, 'mde': 0.02}, or null")
    if isinstance(metric, dict) and metric.get("kind") is not None and \
            metric.get("kind") not in METRIC_KINDS:
        raise _bad_plan([*location, "inputs", "metric", "kind"],
                        f"got {metric.get('kind')!r}; allowed are {', '.join(METRIC_KINDS)}")
    _check_grid_r(inputs, location)
    for name in ("info_fractions", "information_fractions"):
        fr = inputs.get(name)
        if isinstance(fr, list) and not 1 <= len(fr) <= MAX_LOOKS:
            raise _bad_plan([*location, "inputs", name],
                            f"got {len(fr)} looks; allowed is 1 to {MAX_LOOKS}")


def inputs_of_document(document: dict[str, Any]) -> dict[str, Any]:
    """A plan document's inputs as design arguments (the names the library's design
    functions take; a first-release document's ``info_fractions`` under its new name)."""
    inputs = document.get("inputs") if isinstance(document, dict) else None
    if isinstance(document, dict) and document.get("kind") == EXPERIMENT_KIND:
        return _experiment_arguments(inputs or {})
    out = {k: v for k, v in (inputs or {}).items() if k != "grid_r"}
    if "info_fractions" in out:
        out["information_fractions"] = out.pop("info_fractions")
    return out


def _first(plan: Any, *names: str) -> Any:
    for name in names:
        value = getattr(plan, name, None)
        if value is not None:
            return value
    return None


def boundary_table(plan: Any, location: list[Any]) -> list[dict[str, Any]] | None:
    """One row per planned look: information fraction, boundaries, p threshold, and the
    users (exposure, for rates) per arm the plan expects by then when it has a metric.

    ``None`` for plans without planned looks (a mixture plan is monitored
    continuously). Every per-look sequence must have one value per look.
    """
    fractions = _first(plan, "information_fractions", "info_fractions")
    efficacy = getattr(plan, "efficacy_z", None)
    if fractions is None or efficacy is None:
        return None
    columns = {
        "efficacy_z": efficacy,
        "futility_z": getattr(plan, "futility_z", None),
        "p_threshold": _first(plan, "p_threshold", "nominal_p"),
        "cumulative_alpha": getattr(plan, "cumulative_alpha", None),
    }
    k = len(fractions)
    for name, values in columns.items():
        if values is not None and len(values) != k:
            field = "nominal_p" if name == "p_threshold" and not hasattr(plan, "p_threshold") \
                else name
            raise _bad_plan([*location, "computed", field],
                            f"got {len(values)} values; allowed is one per planned look ({k})")
    rows = []
    for j in range(k):
        p = columns["p_threshold"]
        row = {
            "look": j + 1,
            "information_fraction": float(fractions[j]),
            "efficacy_z": float(efficacy[j]),
            "futility_z": None if columns["futility_z"] is None
            else float(columns["futility_z"][j]),
            "p_threshold": None if p is None else float(p[j]),
            "cumulative_alpha": None if columns["cumulative_alpha"] is None
            else float(columns["cumulative_alpha"][j]),
        }
        n_c, n_t = getattr(plan, "n_control", None), getattr(plan, "n_treatment", None)
        row["n_control"] = None if n_c is None else int(n_c[j])
        row["n_treatment"] = None if n_t is None else int(n_t[j])
        row["nominal_p"] = row["p_threshold"]  # deprecated name, kept one release
        rows.append(json_safe(row))
    return rows


@contextmanager
def _usable(location: list[Any]) -> Iterator[None]:
    """Reading a plan the library accepted: a failure of the library on it is a 422
    naming the plan (logged with its trace), never a 500."""
    try:
        yield
    except InvalidPlan:
        raise
    except Exception as exc:  # the library failed on a plan it accepted
        log.warning("plan not usable: %s", type(exc).__name__, exc_info=True)
        raise _bad_plan(location, f"the plan cannot be used ({type(exc).__name__}: "
                        f"{_text(exc)})") from exc


def _plan_info(plan: Any, location: list[Any], design_inputs: dict[str, Any] | None = None
               ) -> PlanInfo:
    if isinstance(plan, seqtest.ExperimentPlan):
        return _experiment_info(plan, location, design_inputs)
    with _usable(location):
        document = json_safe(plan.to_dict())
        metric = getattr(plan, "metric", None)
        if metric is not None and not isinstance(metric, dict):
            raise _bad_plan([*location, "inputs", "metric"],
                            f"got {type(metric).__name__}; allowed is an object or null")
        kind = metric.get("kind") if isinstance(metric, dict) else None
        table = boundary_table(plan, location)
    doc_kind = str(document.get("kind", ""))
    if design_inputs is None:
        design_inputs = inputs_of_document(document)
    return PlanInfo(
        plan=plan, kind=doc_kind, document=document,
        metric_kind=kind if isinstance(kind, str) else None,
        binding=bool(getattr(plan, "binding", False)), boundaries=table,
        design_inputs=design_inputs,
    )


def read_plan(document: Any, location: list[Any] | None = None, *, trust: bool = False
              ) -> PlanInfo:
    """A posted or stored plan document, checked and read by the library.

    A posted document is verified: the library designs the plan again from its
    inputs and refuses one whose computed numbers were changed. A stored one was
    verified when it was accepted, so it is read with ``trust`` (every field is still
    checked, nothing is recomputed): a look does not pay for a new design.
    """
    location = location or ["body", "plan"]
    check_document_shape(document, location)
    try:
        plan = seqtest.plan_from_dict(document, trust=trust)
    except (ValueError, TypeError) as exc:
        message = _text(exc)
        field = getattr(exc, "field", None) if document.get("kind") == EXPERIMENT_KIND \
            else None
        where = [*location, *_field_path(field)] if isinstance(field, str) and field \
            else _named_location(message, location)
        raise InvalidPlan(f"The plan document is not usable: {message}",
                          details=[{"location": where, "message": message}]) from exc
    except Exception as exc:  # the library failed reading it: still the document's fault
        log.warning("plan document not readable: %s", type(exc).__name__, exc_info=True)
        raise InvalidPlan(
            f"The plan document is not usable: reading it failed ({type(exc).__name__}: "
            f"{_text(exc)}); check its numbers, or design the plan from its inputs",
            details=[{"location": location, "message": type(exc).__name__}]) from exc
    return _plan_info(plan, location)


def design_plan(kind: str, inputs: dict[str, Any], location: list[Any] | None = None
                ) -> PlanInfo:
    """A plan designed by the library from ``inputs`` (``kind``: group_sequential or
    mixture)."""
    location = location or ["body", "design"]
    allowed = DESIGN_INPUTS.get(kind, ())
    wrong = sorted(k for k in inputs if k not in allowed)
    if wrong:
        names = list(allowed)
        raise InvalidPlan(
            f"design.{wrong[0]}: does not apply to a {kind} plan; its inputs are "
            f"{', '.join(names)}",
            details=[{"location": [*location, k], "message": f"not an input of a {kind} plan"}
                     for k in wrong])
    plan: Any
    try:
        if kind == "mixture":
            plan = seqtest.mixture.mixture_plan(**inputs)
        elif kind == EXPERIMENT_KIND:
            _check_experiment_inputs(inputs, location)
            plan = seqtest.experiment_plan(**inputs)
        else:
            plan = seqtest.design(**inputs)
    except (ValueError, TypeError) as exc:
        message = _text(exc)
        raise InvalidPlan(f"The plan cannot be designed: {message}",
                          details=[{"location": _named_location(message, location),
                                    "message": message}]) from exc
    except Exception as exc:
        log.warning("design failed: %s", type(exc).__name__, exc_info=True)
        raise InvalidPlan(
            f"The plan cannot be designed from these inputs ({type(exc).__name__}: "
            f"{_text(exc)}); check that they are in a plausible range",
            details=[{"location": location, "message": type(exc).__name__}]) from exc
    return _plan_info(plan, location, json_safe(inputs))


def stored_boundaries(document: dict[str, Any]) -> list[dict[str, Any]] | None:
    """The boundary table of a stored document (for versions stored without one)."""
    return read_plan(document, ["plan"], trust=True).boundaries


# ----------------------------------------------------------------------- looks


def to_roles(exp: Experiment, totals: dict[str, dict[str, float]]) -> dict[str, dict]:
    """Posted totals keyed by arm name -> keyed by role (control, treatment); for an
    experiment plan, ``{metric: {arm: totals}}`` checked against its arms and metrics
    (see :func:`experiment_totals`)."""
    if exp.is_experiment_plan:
        return experiment_totals(exp, totals)
    names = {exp.control_arm: ROLES[0], exp.treatment_arm: ROLES[1]}
    unknown = sorted(set(totals) - set(names))
    if unknown:
        raise InvalidTotals(
            f"totals: unknown arm {unknown[0]!r}; this experiment's arms are "
            f"{exp.control_arm!r} (control) and {exp.treatment_arm!r} (treatment)",
            details=[
                {"location": ["body", "totals", a], "message": "unknown arm"} for a in unknown
            ],
        )
    missing = [n for n in names if n not in totals]
    if missing:
        raise InvalidTotals(
            f"totals: arm {missing[0]!r} is missing; post the cumulative totals of both "
            f"arms, {exp.control_arm!r} and {exp.treatment_arm!r}",
            details=[
                {"location": ["body", "totals", a], "message": "missing arm"} for a in missing
            ],
        )
    return {names[name]: dict(values) for name, values in totals.items()}


def to_names(exp: Experiment, totals: dict[str, Any]) -> dict[str, Any]:
    """Stored totals keyed by role -> keyed by the experiment's arm names (an experiment
    plan's are stored by name already)."""
    if exp.is_experiment_plan:
        return totals
    names = {ROLES[0]: exp.control_arm, ROLES[1]: exp.treatment_arm}
    return {names.get(role, role): values for role, values in totals.items()}


def state_after(decision: str, final: bool, binding: bool) -> str:
    """The experiment's state after a look with this decision.

    ``completed`` at a final look or a completion without significance;
    ``stopped`` for an efficacy stop, a stop for harm (experiment plans: the overall
    decision, once no arm runs and one crossed a guardrail) or a *binding* futility
    stop; otherwise ``running``: a non-binding futility crossing advises stopping, and
    further looks stay valid (the type I error holds whether or not it is obeyed).
    An experiment plan's decision is its overall one, so an arm that stops while
    others run leaves the experiment ``running``.
    """
    if final or decision == "complete_not_significant":
        return "completed"
    if decision in ("stop_efficacy", "stop_harm") or (decision == "stop_futility"
                                                     and binding):
        return "stopped"
    return "running"


@dataclass(frozen=True)
class LookOutcome:
    """What the library computed at a look: its own row, the look-level summary."""

    decision: str
    state: str
    result: dict[str, Any] | None
    summary: dict[str, Any]


def _library_analysis(exp: Experiment, compute: Callable[[], Any],
                      totals_error: Callable[[LookDataError], Exception]
                      ) -> tuple[dict[str, Any], str]:
    """Run the library's analysis of a look and return its JSON and decision; every
    refusal becomes the service's error (nothing is stored): bad totals through
    ``totals_error``, other refusals a 422, a failed computation an AnalysisFailed."""
    try:
        analysis = compute().to_dict()  # plain JSON types already (the library's to_dict)
    except LookDataError as exc:
        raise totals_error(exc) from exc
    except (ValueError, TypeError) as exc:
        message = _text(exc)
        raise Unprocessable(f"The look cannot be analysed: {message}",
                            details=[{"location": _named_location(message, ["body"]),
                                      "message": message}]) from exc
    except Exception as exc:
        # The library could not compute on these totals under this plan (numbers near
        # the float range, a plan it accepted but cannot use). Nothing is stored.
        log.warning("analysis failed on experiment %s: %s", exp.id, type(exc).__name__,
                    exc_info=True)
        raise AnalysisFailed(
            "The look cannot be analysed: the computation failed on these totals under "
            f"this plan ({type(exc).__name__}: {_text(exc)}). Nothing was stored. Check "
            "that the totals are cumulative and in a plausible range."
        ) from exc
    decision = analysis.get("decision")
    if decision not in DECISIONS:
        raise AnalysisFailed(f"The look cannot be analysed: the library returned the unknown "
                             f"decision {decision!r}. Nothing was stored.")
    return analysis, str(decision)


def analyze_look(
    exp: Experiment,
    plan: PlanInfo,
    prior: list[dict[str, Any]],
    roles: dict[str, dict[str, Any]],
    final: bool,
    daily_traffic: float | None = None,
) -> LookOutcome:
    """Analyse every stored look plus the new one; keep the new look's own row and
    the summary (everything else the library computed is already stored)."""
    if exp.is_experiment_plan:
        return _analyze_experiment_look(exp, plan, prior, roles, final, daily_traffic)
    looks = [*prior, roles]
    options: dict[str, Any] = {}
    if exp.max_n is not None:
        options["max_n"] = exp.max_n
    if exp.fraction_basis is not None:
        options["fraction_basis"] = exp.fraction_basis
    if daily_traffic is not None:
        options["daily_traffic"] = daily_traffic
    analysis, decision = _library_analysis(
        exp, lambda: seqtest.analyze(plan.plan, looks, metric=exp.metric_kind,
                                     allocation=exp.allocation, final=final, **options),
        lambda exc: _totals_error(exc, exp, len(looks)))
    rows = analysis.get("looks")
    number = len(looks)
    row = rows[number - 1] if isinstance(rows, list) and len(rows) >= number else None
    summary = {k: v for k, v in analysis.items() if k != "looks"}
    return LookOutcome(decision=decision, state=state_after(decision, final, plan.binding),
                       result=row, summary=summary)


def _totals_error(exc: LookDataError, exp: Experiment, this_look: int) -> InvalidTotals:
    arm = to_names(exp, {exc.arm: None}).popitem()[0] if exc.arm is not None else None
    location: list[Any] = ["body", "totals"]
    where = "totals"
    if arm is not None:
        location.append(arm)
        where += f".{arm}"
    if exc.field is not None:
        location.append(exc.field)
        where += f".{exc.field}"
    detail = exc.detail
    if exc.look is not None and exc.look != this_look:
        detail += f" (at stored look {exc.look})"
    return InvalidTotals(
        f"{where}: {detail}",
        details=[{"location": location, "message": detail, "look": exc.look, "arm": arm,
                  "field": exc.field}],
    )


def analysis_object(summary: dict[str, Any], rows: list[Any]) -> dict[str, Any]:
    """The analysis in the library's shape: the summary and the rows of the looks."""
    if summary.get("kind") == EXPERIMENT_KIND:
        return _experiment_analysis_object(summary, rows)
    return dict(sorted({**summary, "looks": rows}.items()))


# ----------------------------------------------------------------------- reporting
# What the pages show comes from the library's reporting package, the same functions
# that write `seqtest report` and the summary in the JSON: the pages never phrase a
# decision or draw a chart themselves.


@dataclass(frozen=True)
class PageSummary:
    """The plain-language summary of an analysis, in the parts a page lays out."""

    alert: str | None
    headline: str
    effect: str
    outlook: str | None
    caveat: str | None
    alerts: list[str]
    notes: list[str]
    caution: str
    text: str
    figures: dict[str, Any]


def summarize(analysis: dict[str, Any]) -> PageSummary:
    """``seqtest.reporting.summarize`` of a stored analysis (its JSON)."""
    s = reporting.summarize(analysis)
    return PageSummary(alert=s.alert, headline=s.headline, effect=s.effect,
                       outlook=s.outlook, caveat=s.caveat, alerts=list(s.alerts),
                       notes=list(s.notes), caution=s.caution, text=s.text,
                       figures=plain(s.figures))


def caution() -> str:
    """The caution every decision carries."""
    return str(seqtest.CAUTION)


def z_path_svg(analysis: dict[str, Any], plan: Any, title: str) -> str:
    """The z path against the boundaries (observed, and planned when ``plan`` is a
    group-sequential plan), as an inline ``<svg>``."""
    return str(reporting.z_path_svg(analysis, plan, title=title))


def effect_svg(analysis: dict[str, Any], title: str) -> str:
    """The effect at each look with its interval valid at every look, as ``<svg>``."""
    return str(reporting.effect_svg(analysis, title=title))


Table = tuple[list[str], list[list[str]]]


def look_table(analysis: dict[str, Any]) -> Table:
    return reporting.look_rows(analysis)


def final_table(analysis: dict[str, Any]) -> Table | None:
    return reporting.final_rows(analysis)


def table_html(headers: list[str], rows: list[list[str]], caption: str | None = None) -> str:
    """A table of strings as escaped HTML (the report's own table)."""
    return str(reporting.table_html(headers, rows, caption=caption))


def decision_words(decision: Any, direction: Any = None) -> str:
    """A decision in a few words (``stop for efficacy (treatment better)``)."""
    return str(reporting_style.decision_words(decision, direction))


def sample_ratio_looks(summary: dict[str, Any], rows: list[Any]) -> list[int]:
    """Looks whose arms fail the sample-ratio check: from the rows given, and from the
    summary's own record of them (which covers every look)."""
    found = set(summary.get("sample_ratio_mismatch") or [])
    found |= set(reporting.sample_ratio_looks({**summary, "looks": [r for r in rows if r]}))
    if not summary.get("sample_ratio_mismatch") and "srm_threshold" not in summary:
        # written by an earlier release: read from the warnings
        found |= set(reporting.sample_ratio_looks({"warnings": summary.get("warnings") or []}))
    return sorted(int(x) for x in found)


def number_text(kind: str, value: Any) -> str:
    """A number as the reports write it: ``count`` (users still needed), ``days``,
    ``probability`` (a chance in percent), ``p`` (a p-value)."""
    formats: dict[str, Callable[[Any], str]] = {
        "count": reporting_numbers.count, "days": reporting_numbers.days,
        "probability": reporting_numbers.probability, "p": reporting_numbers.p_value,
    }
    return str(formats[kind](value))


class _SizedOnce:
    """A plan whose sample size is computed once: its summary and its table each ask
    for it, and for a 50-look plan it is the dearest part of showing the plan."""

    def __init__(self, plan: Any) -> None:
        self._plan = plan
        self._size: Any = None

    def sample_size(self) -> Any:
        if self._size is None:
            self._size = self._plan.sample_size()
        return self._size

    def __getattr__(self, name: str) -> Any:
        return getattr(self._plan, name)


@dataclass(frozen=True)
class PlanDisplay:
    """A plan as the pages show it: the object (for the planned boundaries of the z
    chart), its summary in plain lines, and its looks with users per arm."""

    plan: Any
    kind: str
    summary: str
    table: Table | None
    expected: dict[str, Any] | None  # expected and maximum totals (plans with a metric)


def plan_display(info: PlanInfo) -> PlanDisplay:
    """The summary and the boundary table of a plan read or designed by the library."""
    if info.layout is not None:
        return _experiment_plan_display(info)
    plan = _SizedOnce(info.plan)
    expected = None
    if info.kind == "group_sequential" and getattr(info.plan, "metric", None):
        ss = plan.sample_size()
        expected = plain({"max_total": ss.total, "max_control": ss.n_control,
                          "max_treatment": ss.n_treatment,
                          "fixed_total": ss.fixed_control + ss.fixed_treatment,
                          "expected_null": ss.expected_null,
                          "expected_alternative": ss.expected_alternative})
    return PlanDisplay(plan=info.plan, kind=info.kind,
                       summary=str(reporting.plan_summary(plan)),
                       table=reporting.plan_table_rows(plan), expected=expected)


# ----------------------------------------------------------------------- experiments
# Plans of kind "experiment" (seqtest.experiment_plan): one control, 1 to 8 treatments,
# metrics with roles (primary, guardrail). Their looks are {arm: totals} (one metric)
# or {metric: {arm: totals}}, stored as posted; their analysis is the library's
# ExperimentAnalysis, stored as for two-arm plans: each look's own rows (one per
# comparison, keyed "arm/metric") once, and the look-level summary.

NAME_PATTERN = r"^[A-Za-z0-9][A-Za-z0-9_.\-]{0,63}$"  # arm and metric names a look can key
_NAME = re.compile(NAME_PATTERN)
MAX_METRICS = 10  # metrics of one experiment plan: each adds a comparison per arm to a look
_INDEX = re.compile(r"\[(\d+)\]")


def _field_path(field: str) -> list[Any]:
    """``"computed.comparisons[0].efficacy_z[2]"`` -> its location parts."""
    out: list[Any] = []
    for part in field.split("."):
        head = _INDEX.split(part)
        if head[0]:
            out.append(head[0])
        out += [int(x) for x in head[1::2]]
    return out


def arm_state(decision: Any) -> str:
    """A treatment arm's state after its decision (experiment plans): ``running`` while
    it continues, ``completed`` at its final look without significance, else
    ``stopped`` (efficacy, harm, or futility: a dropped arm is not analysed again)."""
    if decision == "continue":
        return "running"
    if decision == "complete_not_significant":
        return "completed"
    return "stopped"


def arm_states(summary: dict[str, Any] | None) -> dict[str, str] | None:
    """Each treatment arm's state after a look of an experiment plan (None for two-arm
    plans, whose state is the experiment's)."""
    if not summary or summary.get("kind") != EXPERIMENT_KIND:
        return None
    return {str(a.get("arm")): arm_state(a.get("decision"))
            for a in summary.get("arms") or [] if isinstance(a, dict)}


def _experiment_plan_display(info: PlanInfo) -> PlanDisplay:
    """An experiment plan's own summary and its boundary table per comparison."""
    headers = ["arm", "metric", "role", "look", "fraction", "users, control",
               "users, arm", "efficacy z", "p to stop", "futility z"]

    def num(value: Any, digits: int = 3) -> str:
        return "-" if value is None else f"{float(value):.{digits}f}"
    rows = [[str(r["arm"]), str(r["metric"]), str(r["role"]), str(r["look"]),
             num(r.get("information_fraction")),
             "-" if r.get("n_control") is None else f"{r['n_control']:,}",
             "-" if r.get("n_treatment") is None else f"{r['n_treatment']:,}",
             num(r.get("efficacy_z")),
             reporting_numbers.p_value(r.get("p_threshold"), exact=True),
             num(r.get("futility_z"))]
            for r in info.boundaries or []]
    return PlanDisplay(plan=info.plan, kind=info.kind, summary=str(info.plan.summary()),
                       table=(headers, rows), expected=None)


def _check_experiment_shape(inputs: dict[str, Any], location: list[Any]) -> None:
    """Caps on what a client may choose in an experiment document (the library reads
    and verifies the rest): looks, metrics, the integration grid."""
    fr = inputs.get("information_fractions")
    if isinstance(fr, list) and not 1 <= len(fr) <= MAX_LOOKS:
        raise _bad_plan([*location, "inputs", "information_fractions"],
                        f"got {len(fr)} looks; allowed is 1 to {MAX_LOOKS}")
    metrics = inputs.get("metrics")
    if isinstance(metrics, list) and len(metrics) > MAX_METRICS:
        raise _bad_plan([*location, "inputs", "metrics"],
                        f"got {len(metrics)} metrics; allowed is 1 to {MAX_METRICS}")
    _check_grid_r(inputs, location)


def _check_experiment_inputs(inputs: dict[str, Any], location: list[Any]) -> None:
    metrics = inputs.get("metrics")
    if isinstance(metrics, list) and len(metrics) > MAX_METRICS:
        raise _bad_plan([*location, "metrics"],
                        f"got {len(metrics)} metrics; allowed is 1 to {MAX_METRICS}")


def _experiment_arguments(inputs: dict[str, Any]) -> dict[str, Any]:
    """An experiment document's inputs as ``seqtest.experiment_plan``'s arguments (an
    amendment designs from them)."""
    out = {k: v for k, v in inputs.items()
           if k not in ("arms", "grid_r", "weights", "transitions")}
    arms = inputs.get("arms")
    if isinstance(arms, list):
        out["arms"] = [a.get("name") if isinstance(a, dict) else a for a in arms]
        alloc = [a.get("allocation", 1.0) for a in arms[1:] if isinstance(a, dict)]
        if alloc:
            out["allocations"] = alloc
    for key in ("weights", "transitions"):
        if inputs.get(key) is not None:
            out[key] = inputs[key]
    return out


def _experiment_layout(plan: Any) -> dict[str, Any]:
    """What the service keeps of an experiment plan beside its document: the arms (the
    control first, each treatment with its allocation), the metrics (name, role, kind)
    and the experiment's metric kind (its first primary metric's)."""
    arms: list[dict[str, Any]] = [{"name": plan.control}]
    arms += [{"name": t, "allocation": float(a)}
             for t, a in zip(plan.treatments, plan.allocations, strict=True)]
    metrics = [{"name": m.name, "role": m.role, "metric_kind": m.kind} for m in plan.metrics]
    primary = next(m for m in metrics if m["role"] == "primary")
    return {"arms": arms, "metrics": metrics, "metric_kind": primary["metric_kind"]}


def experiment_boundary_table(plan: Any, location: list[Any]) -> list[dict[str, Any]]:
    """The boundary table per comparison: for each (arm, metric) in the plan's order
    (primaries, then guardrails), one row per planned look with the comparison's
    boundaries and the users (exposure, for rates) of the control and of the arm the
    plan expects by then."""
    rows: list[dict[str, Any]] = []
    for c in plan.comparisons:
        table = boundary_table(c.plan, location) or []
        n_c, n_t = plan.sizes[c.metric][plan.control], plan.sizes[c.metric][c.arm]
        for j, row in enumerate(table):
            rows.append(json_safe({"arm": c.arm, "metric": c.metric, "role": c.role, **row,
                                   "n_control": int(n_c[j]), "n_treatment": int(n_t[j])}))
    return rows


def _experiment_info(plan: Any, location: list[Any], design_inputs: dict[str, Any] | None
                     ) -> PlanInfo:
    designed = design_inputs is not None
    for i, name in enumerate(plan.arms):
        if not _NAME.match(name):
            where = [*location, "arms", i] if designed else \
                [*location, "inputs", "arms", i, "name"]
            raise _bad_plan(where, f"got {name!r}; an arm's name must be "
                            "1 to 64 letters, digits, '_', '.', '-', starting with a letter "
                            "or digit (looks are keyed by it)")
    for i, m in enumerate(plan.metrics):
        if not _NAME.match(m.name):
            raise _bad_plan([*location, *([] if designed else ["inputs"]), "metrics", i,
                             "name"],
                            f"got {m.name!r}; a metric's name must be 1 to 64 letters, "
                            "digits, '_', '.', '-', starting with a letter or digit (looks "
                            "are keyed by it)")
    with _usable(location):
        document = json_safe(plan.to_dict())
        table = experiment_boundary_table(plan, location)
        layout = _experiment_layout(plan)
    if design_inputs is None:
        design_inputs = inputs_of_document(document)
    return PlanInfo(plan=plan, kind=EXPERIMENT_KIND, document=document,
                    metric_kind=layout["metric_kind"], binding=bool(plan.binding),
                    boundaries=table, design_inputs=design_inputs, layout=layout)


def _refuse_totals(where: list[Any], message: str, **extra: Any) -> InvalidTotals:
    text = ".".join(str(p) for p in where[1:])
    return InvalidTotals(f"{text}: {message}",
                         details=[{"location": where, "message": message, **extra}])


def experiment_totals(exp: Experiment, totals: dict[str, Any]) -> dict[str, Any]:
    """A look of an experiment plan as posted, checked against its arms and metrics:
    ``{arm: totals}`` (one metric) or ``{metric: {arm: totals}}`` (any number), every
    name one of the plan's, the control present under every metric. What else the
    totals must satisfy (every arm still running present, cumulative, possible) is the
    library's to check. Returned as posted (stored so)."""
    assert exp.arms is not None and exp.metrics is not None
    arms = [a["name"] for a in exp.arms]
    metrics = [m["name"] for m in exp.metrics]
    control = arms[0]
    body = ["body", "totals"]
    nested = [k for k in totals if k in metrics]
    flat = [k for k in totals if k not in metrics]
    for key, values in totals.items():
        inner = [isinstance(v, dict) for v in values.values()]
        if key in metrics and not all(inner):
            bad = next(f for f, v in values.items() if not isinstance(v, dict))
            raise _refuse_totals([*body, key, bad], f"got a number under metric {key!r}; "
                                 "allowed is {arm: {total: number}} for each metric",
                                 metric=key)
        if key not in metrics and any(inner):
            if key not in arms:
                raise _refuse_totals([*body, key], f"unknown metric {key!r}; this "
                                     f"experiment's metrics are {', '.join(metrics)}",
                                     metric=key)
            bad = next(f for f, v in values.items() if isinstance(v, dict))
            raise _refuse_totals([*body, key, bad], "got an object where a total was "
                                 "expected; allowed is {total: number} for each arm",
                                 arm=key)
    if flat and (nested or len(metrics) > 1):
        key = flat[0]
        if key in arms:
            raise _refuse_totals([*body, key], f"arm {key!r} at the top of the look; this "
                                 "experiment has the metrics " + ", ".join(metrics) +
                                 ", so a look is {metric: {arm: totals}}", arm=key)
        raise _refuse_totals([*body, key], f"unknown metric {key!r}; this experiment's "
                             f"metrics are {', '.join(metrics)}", metric=key)
    per = {m: totals[m] for m in nested} if nested else {metrics[0]: totals}
    for metric, values in per.items():
        prefix = [*body, metric] if nested else list(body)
        for arm in values:
            if arm not in arms:
                raise _refuse_totals([*prefix, arm], f"unknown arm {arm!r}; this "
                                     f"experiment's arms are {', '.join(arms)} (the "
                                     "control first)", arm=arm,
                                     metric=metric if nested else None)
        if control not in values:
            raise _refuse_totals([*prefix, control], f"the control {control!r} is "
                                 "missing; every look needs the control's totals"
                                 + (f" for every metric ({metric!r})" if nested else ""),
                                 arm=control, metric=metric if nested else None)
    missing = [m for m in metrics if m not in per]
    if missing:
        raise _refuse_totals([*body, missing[0]], f"metric {missing[0]!r} is missing; every "
                             f"look needs the totals of every metric ({', '.join(metrics)})",
                             metric=missing[0])
    return {k: {a: dict(v) for a, v in values.items()} for k, values in totals.items()} \
        if nested else {a: dict(v) for a, v in totals.items()}


def _experiment_totals_error(exc: LookDataError, exp: Experiment, new_look: dict[str, Any],
                             this_look: int) -> InvalidTotals:
    """A library refusal of an experiment's totals, located where the new look puts the
    value (``["body", "totals", (metric,) arm, field]``)."""
    assert exp.metrics is not None
    metric = getattr(exc, "metric", None)
    nested = any(k in {m["name"] for m in exp.metrics} for k in new_look)
    location: list[Any] = ["body", "totals"]
    if metric is not None and nested:
        location.append(metric)
    if exc.arm is not None:
        location.append(exc.arm)
    if exc.field is not None and exc.field != "metric":
        location.append(exc.field)
    detail = exc.detail
    if exc.look is not None and exc.look != this_look:
        detail += f" (at stored look {exc.look})"
    where = ".".join(str(p) for p in location[1:])
    return InvalidTotals(f"{where}: {detail}", details=[{
        "location": location, "message": detail, "look": exc.look, "arm": exc.arm,
        "metric": metric, "field": exc.field}])


def _analyze_experiment_look(exp: Experiment, plan: PlanInfo, prior: list[dict[str, Any]],
                             look: dict[str, Any], final: bool,
                             daily_traffic: float | None) -> LookOutcome:
    if daily_traffic is not None:
        raise Unprocessable(
            "daily_traffic: does not apply to an experiment with many arms (its analysis "
            "projects no days); leave it out",
            details=[{"location": ["body", "daily_traffic"],
                      "message": "not for experiment plans"}])
    looks = [*prior, look]
    number = len(looks)
    analysis, decision = _library_analysis(
        exp, lambda: seqtest.analyze(plan.plan, looks, final=final),
        lambda exc: _experiment_totals_error(exc, exp, look, number))
    rows: dict[str, Any] = {}
    comparisons = []
    for c in analysis.get("comparisons") or []:
        label = f"{c.get('arm')}/{c.get('metric')}"
        for row in c.get("looks") or []:
            if isinstance(row, dict) and row.get("look") == number:
                rows[label] = row
        comparisons.append({k: v for k, v in c.items() if k != "looks"})
    summary = {**analysis, "comparisons": comparisons}
    return LookOutcome(decision=decision, state=state_after(decision, final, plan.binding),
                       result=rows, summary=summary)


def _experiment_analysis_object(summary: dict[str, Any], rows: list[Any]) -> dict[str, Any]:
    """An experiment's analysis: the summary, each comparison with the stored rows of
    the looks given (``rows``: each look's ``{"arm/metric": row}``)."""
    comparisons = []
    for c in summary.get("comparisons") or []:
        label = f"{c.get('arm')}/{c.get('metric')}"
        looks = [r[label] for r in rows if isinstance(r, dict) and isinstance(r.get(label),
                                                                              dict)]
        comparisons.append({**c, "looks": looks})
    return dict(sorted({**summary, "comparisons": comparisons}.items()))


def check_experiment_create(layout: dict[str, Any], given: dict[str, Any]) -> None:
    """A create request's own fields against its experiment plan: arms, metric kind and
    allocation, when given, must be the plan's; ``max_n`` and a fraction basis other
    than ``sample`` do not apply (the plan sizes every arm, fractions are by sample)."""
    arms = [a["name"] for a in layout["arms"]]
    treatments = arms[1:]

    def refuse(where: list[Any], message: str) -> Unprocessable:
        return Unprocessable(f"{'.'.join(str(p) for p in where)}: {message}",
                             details=[{"location": ["body", *where],
                                       "message": message}])
    kind = given.get("metric_kind")
    if kind is not None and kind != layout["metric_kind"]:
        raise refuse(["metric_kind"], f"got {kind!r} but the plan's primary metric is "
                     f"{layout['metric_kind']!r}; give the same kind, or leave it out")
    names = given.get("arms")
    if isinstance(names, list):
        if names != arms:
            i = next((j for j, (a, b) in enumerate(zip(names, arms, strict=False))
                      if a != b),
                     min(len(names), len(arms)))
            raise refuse(["arms", i] if i < len(names) else ["arms"],
                         f"got {names!r} but the plan's arms are {arms!r} (the control "
                         "first); give the same names, or leave arms out")
    elif isinstance(names, dict):
        if names.get("control") != arms[0]:
            raise refuse(["arms", "control"], f"got {names.get('control')!r} but the plan's "
                         f"control is {arms[0]!r}; give the same name, or leave arms out")
        if len(treatments) != 1 or names.get("treatment") != treatments[0]:
            raise refuse(["arms", "treatment"], f"got {names.get('treatment')!r} but the "
                         f"plan's treatments are {', '.join(treatments)}; give arms as the "
                         "plan's list of names, or leave arms out")
    alloc = given.get("allocation")
    planned = [a["allocation"] for a in layout["arms"][1:]]
    if alloc is not None and any(abs(float(alloc) - p) > 1e-12 for p in planned):
        shown = ", ".join(f"{t} {p:g}" for t, p in zip(treatments, planned, strict=True))
        raise refuse(["allocation"], f"got {alloc!r} but the plan's allocations are "
                     f"{shown}; leave allocation out (the plan carries each arm's)")
    if given.get("max_n") is not None:
        raise refuse(["max_n"], "does not apply to an experiment plan (it sizes every arm "
                     "of every metric itself); leave it out")
    basis = given.get("fraction_basis")
    if basis is not None and basis != "sample":
        raise refuse(["fraction_basis"], f"got {basis!r}; an experiment plan measures "
                     "fractions by sample; leave it out")


def amended_layout(exp: Experiment, plan: PlanInfo, source: str) -> dict[str, Any] | None:
    """An amendment's plan against the experiment: a two-arm experiment stays two-arm and
    an experiment plan stays one; once looks exist an experiment plan keeps its arms
    and its metrics (names, roles, kinds). Returns the layout to store when an amendment
    before the first look changed it, else None."""
    if exp.is_experiment_plan != (plan.layout is not None):
        have = "an experiment plan (many arms)" if exp.is_experiment_plan else \
            "a two-arm plan"
        raise Unprocessable(
            f"{source}.kind: got {plan.kind!r} but this experiment has {have}; an "
            "amendment keeps the kind of plan (create a new experiment for another)",
            details=[{"location": ["body", source, "kind"],
                      "message": "differs from the experiment's kind of plan"}])
    if plan.layout is None:
        return None
    new = plan.layout
    if new["arms"] == exp.arms and new["metrics"] == exp.metrics:
        return None
    if exp.look_count == 0:
        return new
    old_arms = [a["name"] for a in exp.arms or []]
    new_arms = [a["name"] for a in new["arms"]]
    if new_arms != old_arms or new["arms"] != exp.arms:
        what, field = (f"arms {new_arms} (allocations "
                       f"{[a.get('allocation') for a in new['arms'][1:]]}) instead of "
                       f"{old_arms} (allocations "
                       f"{[a.get('allocation') for a in (exp.arms or [])[1:]]})"), "arms"
    else:
        what, field = (f"metrics {new['metrics']} instead of {exp.metrics}", "metrics")
    raise Unprocessable(
        f"{source}.{field}: the amended plan has {what}, and {exp.look_count} look(s) are "
        "recorded; once looks exist an amendment keeps the experiment's arms and metrics "
        "(create a new experiment for others)",
        details=[{"location": ["body", source, *(["inputs"] if source == "plan" else []),
                               field],
                  "message": "differs from the experiment's; looks exist"}])
