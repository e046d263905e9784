"""Stored records -> the JSON bodies the routes answer with."""

from __future__ import annotations

from typing import Any

from service import analysis
from service.storage import Experiment, Look, PlanVersion


def summary(exp: Experiment) -> dict[str, Any]:
    return {
        "id": exp.id,
        "name": exp.name,
        "description": exp.description,
        "metric": exp.metric,
        "arms": {"control": exp.control_arm, "treatment": exp.treatment_arm},
        "allocation": exp.allocation,
        "max_n": exp.max_n,
        "fraction": exp.fraction,
        "state": exp.state,
        "decision": exp.decision,
        "looks": exp.look_count,
        "plan_version": exp.plan_version,
        "created_at": exp.created_at,
        "created_by": exp.created_by,
        "updated_at": exp.updated_at,
    }


def plan(pv: PlanVersion) -> dict[str, Any]:
    return {
        "version": pv.version,
        "kind": pv.kind,
        "document": pv.document,
        "boundaries": analysis.boundary_table(pv.document),
        "source": pv.source,
        "reason": pv.reason,
        "after_look": pv.after_look,
        "recorded_at": pv.recorded_at,
        "recorded_by": pv.recorded_by,
    }


def created(exp: Experiment, pv: PlanVersion) -> dict[str, Any]:
    return {**summary(exp), "plan": plan(pv)}


def amendment(exp: Experiment, pv: PlanVersion) -> dict[str, Any]:
    return {"experiment_id": exp.id, "plan": plan(pv)}


def look(exp: Experiment, lk: Look) -> dict[str, Any]:
    return {
        "experiment_id": exp.id,
        "look": lk.number,
        "plan_version": lk.plan_version,
        "final": lk.final,
        "totals": analysis.to_names(exp, lk.totals),
        "decision": lk.decision,
        "state": exp.state,
        "recorded_at": lk.recorded_at,
        "recorded_by": lk.recorded_by,
        "result": analysis.look_row(lk.analysis, lk.number),
        "analysis": lk.analysis,
    }


def detail(exp: Experiment, plans: list[PlanVersion], looks: list[Look]) -> dict[str, Any]:
    current = next(p for p in plans if p.version == exp.plan_version)
    return {
        **summary(exp),
        "plan": plan(current),
        "plan_versions": [plan(p) for p in plans],
        "looks_recorded": [
            {
                "look": lk.number,
                "plan_version": lk.plan_version,
                "final": lk.final,
                "totals": analysis.to_names(exp, lk.totals),
                "decision": lk.decision,
                "recorded_at": lk.recorded_at,
                "recorded_by": lk.recorded_by,
                "result": analysis.look_row(lk.analysis, lk.number),
            }
            for lk in looks
        ],
        "current": looks[-1].analysis if looks else None,
    }
