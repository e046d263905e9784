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
from collections.abc import Callable
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
from seqtest.core.vocabulary import ARMS, METRIC_KINDS, PLAN_KINDS
from seqtest.monitoring.rules import FRACTION_BASES
from seqtest.planning.design import MAX_LOOKS
from service.db.records import Experiment
from service.errors import AnalysisFailed, InvalidPlan, InvalidTotals, Unprocessable

log = logging.getLogger("seqtest.service")

DECISIONS = tuple(d.value for d in _DECISIONS)
ROLES = ARMS  # the library's names of the two arms in a look
__all__ = ["DECISIONS", "FRACTION_BASES", "MAX_LOOKS", "METRIC_KINDS", "PLAN_KINDS",
           "ROLES"]

# design inputs per kind of plan (the library's argument names)
DESIGN_INPUTS = {
    "group_sequential": ("alpha", "sides", "power", "looks", "information_fractions",
                         "efficacy",
                         "futility", "binding", "metric"),
    "mixture": ("alpha", "sides", "mde", "max_n_per_arm", "unit_variance", "tau2", "scale",
                "metric"),
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


def _bad_plan(location: list[Any], message: str) -> InvalidPlan:
    where = ".".join(str(p) for p in location[1:]) or "plan"
    return InvalidPlan(f"{where}: {message}",
                       details=[{"location": location, "message": message}])


def check_document_shape(document: Any, location: list[Any]) -> None:
    """What the service itself relies on in a plan document (see the module docstring)."""
    if not isinstance(document, dict):
        raise _bad_plan(location, "got a non-object; allowed is a plan document, a JSON "
                        "object with kind, inputs and computed (from `seqtest plan --json`)")
    kind = document.get("kind")
    if kind not in PLAN_KINDS:
        raise _bad_plan([*location, "kind"], f"got {kind!r}; allowed are "
                        f"{', '.join(PLAN_KINDS)}")
    for part in ("inputs", "computed"):
        if not isinstance(document.get(part), dict):
            raise _bad_plan([*location, part], f"got {type(document.get(part)).__name__}; "
                            "allowed is a JSON object, as written by `seqtest plan --json`")
    inputs = document["inputs"]
    metric = inputs.get("metric")
    if metric is not None and not isinstance(metric, dict):
        raise _bad_plan([*location, "inputs", "metric"],
                        f"got {type(metric).__name__}; allowed is an object such as "
                        "{'kind': 'binary', 'baseline': 0.1, 'mde': 0.02}, or null")
    if isinstance(metric, dict) and metric.get("kind") is not None and \
            metric.get("kind") not in METRIC_KINDS:
        raise _bad_plan([*location, "inputs", "metric", "kind"],
                        f"got {metric.get('kind')!r}; allowed are {', '.join(METRIC_KINDS)}")
    if "grid_r" in inputs:
        r = inputs["grid_r"]
        if isinstance(r, bool) or not isinstance(r, int) or not 4 <= r <= MAX_GRID_R:
            raise _bad_plan([*location, "inputs", "grid_r"],
                            f"got {r!r}; allowed is a whole number from 4 to {MAX_GRID_R}")
    for name in ("info_fractions", "information_fractions"):
        fr = inputs.get(name)
        if isinstance(fr, list) and not 1 <= len(fr) <= MAX_LOOKS:
            raise _bad_plan([*location, "inputs", name],
                            f"got {len(fr)} looks; allowed is 1 to {MAX_LOOKS}")


def inputs_of_document(document: dict[str, Any]) -> dict[str, Any]:
    """A plan document's inputs as design arguments (the names the library's design
    functions take; a first-release document's ``info_fractions`` under its new name)."""
    inputs = document.get("inputs") if isinstance(document, dict) else None
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


def _plan_info(plan: Any, location: list[Any], design_inputs: dict[str, Any] | None = None
               ) -> PlanInfo:
    try:
        document = json_safe(plan.to_dict())
        metric = getattr(plan, "metric", None)
        if metric is not None and not isinstance(metric, dict):
            raise _bad_plan([*location, "inputs", "metric"],
                            f"got {type(metric).__name__}; allowed is an object or null")
        kind = metric.get("kind") if isinstance(metric, dict) else None
        table = boundary_table(plan, location)
    except InvalidPlan:
        raise
    except Exception as exc:  # the library failed on a plan it accepted
        log.warning("plan not usable: %s", type(exc).__name__, exc_info=True)
        raise _bad_plan(location, f"the plan cannot be used ({type(exc).__name__}: "
                        f"{_text(exc)})") from exc
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
        raise InvalidPlan(f"The plan document is not usable: {message}",
                          details=[{"location": _named_location(message, location),
                                    "message": message}]) from exc
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
    """Posted totals keyed by arm name -> keyed by role (control, treatment)."""
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
    """Stored totals keyed by role -> keyed by the experiment's arm names."""
    names = {ROLES[0]: exp.control_arm, ROLES[1]: exp.treatment_arm}
    return {names.get(role, role): values for role, values in totals.items()}


def state_after(decision: str, final: bool, binding: bool) -> str:
    """The experiment's state after a look with this decision.

    ``completed`` at a final look or a completion without significance;
    ``stopped`` for an efficacy stop or a *binding* futility stop; otherwise
    ``running``: a non-binding futility crossing advises stopping, and further
    looks stay valid (the type I error holds whether or not it is obeyed).
    """
    if final or decision == "complete_not_significant":
        return "completed"
    if decision == "stop_efficacy" or (decision == "stop_futility" and binding):
        return "stopped"
    return "running"


@dataclass(frozen=True)
class LookOutcome:
    """What the library computed at a look: its own row, the look-level summary."""

    decision: str
    state: str
    result: dict[str, Any] | None
    summary: dict[str, Any]


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
    looks = [*prior, roles]
    options: dict[str, Any] = {}
    if exp.max_n is not None:
        options["max_n"] = exp.max_n
    if exp.fraction_basis is not None:
        options["fraction_basis"] = exp.fraction_basis
    if daily_traffic is not None:
        options["daily_traffic"] = daily_traffic
    try:
        result = seqtest.analyze(plan.plan, looks, metric=exp.metric_kind,
                                 allocation=exp.allocation, final=final, **options)
        analysis = json_safe(result.to_dict())
    except LookDataError as exc:
        raise _totals_error(exc, exp, len(looks)) from exc
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
