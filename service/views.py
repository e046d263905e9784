"""Stored records -> the JSON bodies the service answers with.

Used by the use cases (an answer is rendered inside the write's transaction, so an
idempotent retry can get it back) and by the read routes. Field names follow the
project's glossary; names of the first release are kept for one release where
noted as deprecated.
"""

from __future__ import annotations

from typing import Any

from service import library
from service.db.records import Experiment, Look, PlanVersion


def _layout(exp: Experiment) -> dict[str, Any]:
    """How the arms, allocations and metrics read: two-arm experiments by role, an
    experiment plan's as lists (the control first)."""
    if exp.arms is None:
        return {"arms": {"control": exp.control_arm, "treatment": exp.treatment_arm},
                "allocations": None, "metrics": None, "allocation": exp.allocation}
    allocations = {a["name"]: a["allocation"] for a in exp.arms[1:]}
    common = set(allocations.values())
    return {"arms": [a["name"] for a in exp.arms], "allocations": allocations,
            "metrics": exp.metrics, "allocation": common.pop() if len(common) == 1 else None}


def summary(exp: Experiment) -> dict[str, Any]:
    layout = _layout(exp)
    return {
        "id": exp.id,
        "name": exp.name,
        "description": exp.description,
        "metric_kind": exp.metric_kind,
        "metric": exp.metric_kind,  # deprecated: metric_kind
        "arms": layout["arms"],
        "allocations": layout["allocations"],
        "metrics": layout["metrics"],
        "allocation": layout["allocation"],
        "max_n": exp.max_n,
        "fraction_basis": exp.fraction_basis,
        "fraction": exp.fraction_basis,  # deprecated: fraction_basis
        "state": exp.state,
        "decision": exp.decision,
        "look_count": exp.look_count,
        "looks": exp.look_count,  # deprecated: look_count
        "plan_version": exp.plan_version,
        "created_at": exp.created_at,
        "created_by": exp.created_by,
        "updated_at": exp.updated_at,
    }


def plan(pv: PlanVersion) -> dict[str, Any]:
    boundaries = pv.boundaries if pv.boundaries_stored else \
        library.stored_boundaries(pv.document)
    return {
        "version": pv.version,
        "kind": pv.kind,
        "document": pv.document,
        "boundaries": boundaries,
        "source": pv.source,
        "reason": pv.reason,
        "after_look": pv.after_look,
        "recorded_at": pv.recorded_at,
        "recorded_by": pv.recorded_by,
    }


def created(exp: Experiment, pv: PlanVersion, deprecations: list[str]) -> dict[str, Any]:
    body = {**summary(exp), "plan": plan(pv)}
    if deprecations:
        body["deprecations"] = deprecations
    return body


def amendment(exp: Experiment, pv: PlanVersion, deprecations: list[str]) -> dict[str, Any]:
    body: dict[str, Any] = {"experiment_id": exp.id, "state": exp.state,
                            "max_n": exp.max_n, "plan": plan(pv)}
    if deprecations:
        body["deprecations"] = deprecations
    return body


def look_row(exp: Experiment, lk: Look) -> dict[str, Any]:
    return {
        "look": lk.number,
        "plan_version": lk.plan_version,
        "final": lk.final,
        "totals": library.to_names(exp, lk.totals),
        "decision": lk.decision,
        "recorded_at": lk.recorded_at,
        "recorded_by": lk.recorded_by,
        "result": lk.result,
    }


def look(exp: Experiment, lk: Look, rows: list[Any], state: str) -> dict[str, Any]:
    """A look's answer: its row, the summary, and the analysis over ``rows`` (the
    stored rows of looks 1 .. this one)."""
    return {
        "experiment_id": exp.id,
        "look": lk.number,
        "plan_version": lk.plan_version,
        "final": lk.final,
        "totals": library.to_names(exp, lk.totals),
        "decision": lk.decision,
        "state": state,
        "recorded_at": lk.recorded_at,
        "recorded_by": lk.recorded_by,
        "result": lk.result,
        "analysis": library.analysis_object(lk.summary, rows),
        "arm_states": library.arm_states(lk.summary),
    }


def page(offset: int, limit: int, total: int) -> dict[str, int]:
    return {"offset": offset, "limit": limit, "total": total}


def detail(exp: Experiment, current: PlanVersion, versions: list[PlanVersion],
           looks: list[Look], latest: Look | None, *, looks_page: dict[str, int],
           versions_page: dict[str, int]) -> dict[str, Any]:
    analysis = None
    if latest is not None:
        analysis = library.analysis_object(latest.summary, [lk.result for lk in looks])
    return {
        **summary(exp),
        "plan": plan(current),
        "plan_versions": [plan(p) for p in versions],
        "plan_versions_page": versions_page,
        "looks_recorded": [look_row(exp, lk) for lk in looks],
        "looks_page": looks_page,
        "analysis": analysis,
        "current": analysis,  # deprecated: analysis
        "arm_states": library.arm_states(latest.summary if latest is not None else None),
    }
