"""The only place the service calls the seqtest library.

Everything statistical (plans, boundaries, validation of totals, decisions)
is the library's; this module turns requests into library calls, library
errors into HTTP errors that name what to fix, and results into plain JSON.
"""

from __future__ import annotations

import logging
import math
from typing import Any

import seqtest
from seqtest import LookDataError, plan_from_dict
from seqtest.core.vocabulary import ARMS
from service.errors import InvalidPlan, InvalidTotals, Unavailable, Unprocessable
from service.storage import Experiment, NewLook, NewPlan, PlanVersion

log = logging.getLogger("seqtest.service")


def json_safe(value: Any) -> Any:
    """Plain JSON types with every non-finite float replaced by ``None``.

    numpy scalars and arrays are turned into Python numbers and lists.
    """
    if isinstance(value, dict):
        return {str(k): json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_safe(v) for v in value]
    if isinstance(value, bool) or value is None or isinstance(value, str):
        return value
    if isinstance(value, int):
        return value
    if hasattr(value, "tolist"):  # numpy scalar or array
        return json_safe(value.tolist())
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    return str(value)


# ----------------------------------------------------------------------- plans


def read_plan(document: dict[str, Any]) -> Any:
    """The library's plan object for a stored or posted plan document."""
    try:
        return plan_from_dict(document)
    except (ValueError, TypeError, KeyError, AttributeError, IndexError) as exc:
        raise InvalidPlan(f"The plan document is not usable: {_text(exc)}") from exc


def build_plan_from(body: Any) -> NewPlan:
    """The plan of a request body with ``plan`` (a document) or ``design`` (inputs)."""
    design = body.design
    return build_plan(
        body.plan,
        design.arguments() if design is not None else None,
        design.kind if design is not None else "group_sequential",
    )


def build_plan(
    document: dict[str, Any] | None,
    design: dict[str, Any] | None,
    design_kind: str = "group_sequential",
) -> NewPlan:
    """A plan from a posted document, or designed from posted inputs."""
    if document is not None:
        plan = read_plan(document)
        source: dict[str, Any] = {"from": "document"}
    else:
        assert design is not None
        try:
            if design_kind == "mixture":
                from seqtest.mixture import mixture_plan

                plan = mixture_plan(**design)
            else:
                plan = seqtest.design(**design)
        except (ValueError, TypeError) as exc:
            raise InvalidPlan(f"The plan cannot be designed: {_text(exc)}") from exc
        source = {"from": "design", "kind": design_kind, "inputs": json_safe(design)}
    doc = json_safe(plan.to_dict())
    return NewPlan(kind=str(doc.get("kind", "")), document=doc, source=source)


def plan_metric_kind(document: dict[str, Any]) -> str | None:
    """The metric kind the plan was sized for, if it names one."""
    metric = getattr(read_plan(document), "metric", None)
    kind = metric.get("kind") if isinstance(metric, dict) else None
    return kind if isinstance(kind, str) else None


def check_sizing(plan: NewPlan, max_n: float | None) -> None:
    """A group-sequential plan is monitored on sample fractions: it needs a size.

    The size comes from the plan's metric (its sample size) or from ``max_n``.
    """
    if plan.kind != "group_sequential" or max_n is not None:
        return
    if plan_metric_kind(plan.document) is None:
        raise Unprocessable(
            "max_n: the plan has no metric to size it, so give max_n, the maximum total "
            "sample over both arms (exposure for rates), or design the plan with a metric",
            details=[{"location": ["body", "max_n"], "message": "missing"}],
        )


def resolve_metric(metric: str | None, plan: NewPlan) -> str:
    """The experiment's metric kind: as given, else the plan's; the two must agree."""
    planned = plan_metric_kind(plan.document)
    if metric is None:
        if planned is None:
            raise Unprocessable(
                "metric: give the metric kind of the totals (binary, continuous or rate); "
                "the plan does not name one",
                details=[{"location": ["body", "metric"], "message": "missing"}],
            )
        return planned
    if planned is not None and planned != metric:
        raise Unprocessable(
            f"metric: got {metric!r} but the plan was sized for a {planned!r} metric; "
            "give the same kind, or leave metric out",
            details=[{"location": ["body", "metric"], "message": "differs from the plan"}],
        )
    return metric


def boundary_table(document: dict[str, Any]) -> list[dict[str, Any]] | None:
    """One row per planned look: information fraction, boundaries, nominal p.

    Read from the plan object; ``None`` for plans without looks (e.g. a
    mixture plan, which is monitored continuously).
    """
    plan = read_plan(document)
    fractions = getattr(plan, "info_fractions", None)
    efficacy = getattr(plan, "efficacy_z", None)
    if fractions is None or efficacy is None:
        return None
    futility = getattr(plan, "futility_z", None)
    nominal = getattr(plan, "nominal_p", None)
    cumulative = getattr(plan, "cumulative_alpha", None)
    rows = []
    for k in range(len(fractions)):
        rows.append(
            json_safe(
                {
                    "look": k + 1,
                    "information_fraction": float(fractions[k]),
                    "efficacy_z": float(efficacy[k]),
                    "futility_z": None if futility is None else float(futility[k]),
                    "nominal_p": None if nominal is None else float(nominal[k]),
                    "cumulative_alpha": None if cumulative is None else float(cumulative[k]),
                }
            )
        )
    return rows


# ----------------------------------------------------------------------- looks


def to_roles(exp: Experiment, totals: dict[str, dict[str, float]]) -> dict[str, dict]:
    """Posted totals keyed by arm name -> keyed by role (control, treatment)."""
    names = {exp.control_arm: ARMS[0], exp.treatment_arm: ARMS[1]}
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
    names = {ARMS[0]: exp.control_arm, ARMS[1]: exp.treatment_arm}
    return {names.get(role, role): values for role, values in totals.items()}


def _monitor() -> Any:
    try:
        from seqtest.monitoring import analysis as monitor
    except ImportError as exc:  # the library's monitor is not installed
        raise Unavailable(
            "Looks cannot be analysed: this installation of seqtest has no monitor. "
            "Nothing was stored."
        ) from exc
    return monitor


def analyze_look(
    exp: Experiment,
    plan: PlanVersion,
    prior: list[dict[str, Any]],
    totals: dict[str, dict[str, float]],
    final: bool,
    daily_traffic: float | None = None,
) -> NewLook:
    """Run the monitor over every stored look plus the new one.

    The experiment's state follows the monitor: ``stopped`` once it reports a
    stop (``stopped_at``), ``completed`` at a final look or a completion without
    significance, else ``running`` (which includes a non-binding futility
    crossing: the monitor advises stopping, and further looks stay valid).
    """
    roles = to_roles(exp, totals)
    looks = [*prior, roles]
    plan_obj = read_plan(plan.document)
    monitor = _monitor()
    options: dict[str, Any] = {}
    if exp.max_n is not None:
        options["max_n"] = exp.max_n
    if exp.fraction is not None:
        options["fraction"] = exp.fraction
    if daily_traffic is not None:
        options["daily_traffic"] = daily_traffic
    try:
        result = monitor.analyze(
            plan_obj, looks, metric=exp.metric, allocation=exp.allocation, final=final,
            **options,
        )
    except LookDataError as exc:
        raise _totals_error(exc, exp, len(looks)) from exc
    except ImportError as exc:
        raise Unavailable(
            f"This kind of plan cannot be monitored by this installation of seqtest "
            f"({_text(exc)}). Nothing was stored."
        ) from exc
    except (ValueError, TypeError) as exc:
        raise Unprocessable(f"The look cannot be analysed: {_text(exc)}") from exc
    except ArithmeticError as exc:
        # The library could not compute on these totals (e.g. numbers near the
        # float range, or no variation at all). Nothing is stored; say so plainly.
        log.warning("monitor failed on experiment %s", exp.id, exc_info=True)
        raise Unprocessable(
            "The look cannot be analysed: the computation failed on these totals "
            f"({type(exc).__name__}: {_text(exc)}). Nothing was stored. Check that the "
            "totals are cumulative and in a plausible range."
        ) from exc
    analysis = json_safe(result.to_dict())
    decision = analysis.get("decision")
    if decision not in seqtest.DECISIONS:
        raise RuntimeError(f"the monitor returned an unknown decision {decision!r}")
    if final or decision == "complete_not_significant":
        state = "completed"
    elif analysis.get("stopped_at") is not None:
        state = "stopped"
    else:
        state = "running"
    return NewLook(
        totals=roles, final=final, decision=decision, state=state, analysis=analysis
    )


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
    message = f"{where}: {detail}"
    return InvalidTotals(
        message,
        details=[
            {
                "location": location,
                "message": detail,
                "look": exc.look,
                "arm": arm,
                "field": exc.field,
            }
        ],
    )


def look_row(analysis: dict[str, Any], number: int) -> dict[str, Any] | None:
    """The monitor's row for look ``number`` (1-based) in a stored analysis."""
    rows = analysis.get("looks")
    if isinstance(rows, list) and 0 < number <= len(rows) and isinstance(rows[number - 1], dict):
        return rows[number - 1]
    return None


def _text(exc: BaseException) -> str:
    text = str(exc) or type(exc).__name__
    if isinstance(exc, KeyError):
        text = f"missing field {text}"
    return text[:1000]


def library_version() -> str:
    return str(getattr(seqtest, "__version__", "unknown"))
