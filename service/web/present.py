"""From what the pages read to what their templates show.

Every sentence about a decision, every chart and every table of numbers comes from
the library's reporting package (through :mod:`service.library`); this module only
chooses which of them a page shows and in what order, and formats the service's own
facts (names, states, times, who recorded what).

An experiment page is laid out as a list of *comparisons* (today one: treatment vs
control), each with its summary, charts and tables, so that experiments with several
arms or metrics can show one block per comparison.
"""

from __future__ import annotations

import functools
import json
import logging
from dataclasses import dataclass, field
from typing import Any

from markupsafe import Markup

from service import library
from service.errors import ServiceError
from service.web.data import ExperimentData, ListData

log = logging.getLogger("seqtest.service")

STATE_WORDS = {
    "planned": "planned (no look yet)",
    "running": "running",
    "stopped": "stopped",
    "completed": "completed",
}


def when(ts: Any) -> str:
    """A stored UTC time (``2024-05-01T12:00:00.000000Z``) as ``2024-05-01 12:00 UTC``."""
    text = str(ts or "")
    if len(text) >= 16 and text[10] == "T":
        return f"{text[:10]} {text[11:16]} UTC"
    return text or "-"


def who(key_id: Any, labels: dict[str, str]) -> str:
    label = labels.get(str(key_id))
    return f"{label} ({key_id})" if label else str(key_id)


def _html(text: str) -> Markup:
    """HTML written by the library (it escapes everything it writes)."""
    return Markup(text)


def _section(name: str, exp_id: str, build: Any) -> Any:
    """One part of a page; if the library cannot draw it from these numbers, the page
    says so in that place instead of failing as a whole (and the log has the cause)."""
    try:
        return build()
    except ServiceError:
        raise
    except Exception as exc:
        log.warning("page section %s of %s could not be drawn: %s", name, exp_id,
                    type(exc).__name__, exc_info=True)
        return None


# --------------------------------------------------------------------------- plans


@functools.lru_cache(maxsize=256)
def _plan_display(document_json: str) -> library.PlanDisplay:
    # plan versions are append-only: a document's display never changes
    info = library.read_plan(json.loads(document_json), ["plan"], trust=True)
    return library.plan_display(info)


def plan_display(document: dict[str, Any]) -> library.PlanDisplay:
    return _plan_display(json.dumps(document, sort_keys=True, separators=(",", ":")))


def _inputs_text(inputs: dict[str, Any]) -> str:
    return ", ".join(f"{k}={json.dumps(v, sort_keys=True)}" for k, v in sorted(inputs.items()))


def _changes(before: dict[str, Any] | None, after: dict[str, Any]) -> str:
    """What a version changed, in its source's terms."""
    src = after.get("source") or {}
    parts = []
    if src.get("from") == "design":
        new = src.get("inputs") or {}
        old = ((before or {}).get("source") or {}).get("inputs")
        if before is None or not isinstance(old, dict):
            parts.append("designed from " + (_inputs_text(new) or "the defaults"))
        else:
            changed = sorted(k for k in set(old) | set(new) if old.get(k) != new.get(k))
            parts.append("; ".join(
                f"{k}: {json.dumps(old.get(k))} → {json.dumps(new.get(k))}" for k in changed
            ) or "same design inputs")
    else:
        parts.append("plan document")
    if "max_n" in src:
        parts.append(f"max_n={src['max_n']:g}" if isinstance(src["max_n"], (int, float))
                     else f"max_n={src['max_n']}")
    return "; ".join(parts)


@dataclass
class PlanView:
    version: int
    kind: str
    summary: str | None
    table: Markup | None
    versions: list[dict[str, str]] = field(default_factory=list)


def plan_view(data: ExperimentData) -> PlanView:
    d = data.detail
    current = d["plan"]
    shown = _section("plan", d["id"], lambda: plan_display(current["document"]))
    versions = []
    previous = None
    for v in d["plan_versions"]:
        versions.append({
            "version": str(v["version"]),
            "kind": str(v["kind"]).replace("_", "-"),
            "after_look": "before the first look" if not v["after_look"]
            else f"after look {v['after_look']}",
            "recorded": when(v["recorded_at"]),
            "by": who(v["recorded_by"], data.key_labels),
            "reason": v["reason"] or ("first version" if v["version"] == 1 else "-"),
            "changes": _changes(previous, v),
        })
        previous = v
    table = None
    if shown is not None and shown.table is not None:
        table = _html(library.table_html(*shown.table))
    return PlanView(version=int(current["version"]), kind=str(current["kind"]),
                    summary=shown.summary if shown else None, table=table,
                    versions=versions)


# --------------------------------------------------------------------------- experiment


@dataclass
class Comparison:
    """One comparison's block on an experiment page."""

    title: str
    summary: library.PageSummary | None
    z_chart: Markup | None
    effect_chart: Markup | None
    final_table: Markup | None
    looks_table: Markup | None
    projection: list[tuple[str, str]]
    look_count: int


def _looks_table(d: dict[str, Any], analysis: dict[str, Any]) -> Markup:
    """The library's looks table with the service's columns added: the plan version
    each look was analysed under and when it was recorded."""
    headers, rows = library.look_table(analysis)
    stored = {int(x["look"]): x for x in d["looks_recorded"]}
    headers = [*headers, "plan version", "recorded"]
    out = []
    for row in rows:
        x = stored.get(int(row[0]))
        out.append([*row, str(x["plan_version"]) if x else "-",
                    when(x["recorded_at"]) if x else "-"])
    return _html(library.table_html(headers, out))


def _projection(analysis: dict[str, Any], kind: str) -> list[tuple[str, str]]:
    proj = analysis.get("projection") or None
    if not proj or analysis.get("decision") != "continue":
        return []
    people = "units of exposure" if kind == "rate" else "users"
    rows = []
    for what, units, days in (("to the next planned look", "more_units_to_next_look",
                               "days_to_next_look"),
                              ("to the end (the maximum sample)", "more_units_to_end",
                               "days_to_end")):
        if proj.get(units) is None:
            continue
        text = f"{library.number_text('count', proj[units])} more {people}"
        if proj.get(days) is not None:
            text += f", about {library.number_text('days', proj[days])}"
        rows.append((what.capitalize(), text))
    for label, key in (("Chance of a significant result by the end, if the effect is the "
                        "planned one", "conditional_power_planned"),
                       ("… if the effect is the current estimate",
                        "conditional_power_current")):
        if proj.get(key) is not None:
            rows.append((label, library.number_text("probability", proj[key])))
    return rows


@dataclass
class ExperimentView:
    """An experiment plan's block (many arms, several metrics): the overall decision
    and its reason, one row per treatment arm, one row per comparison at the latest
    look, the warnings and the caution, all in the library's words and numbers."""

    decision: str
    reason_text: str | None
    arms: list[dict[str, str]]
    comparisons: list[dict[str, str]]
    warnings: list[str]
    caution: str


def _number(value: Any, digits: int = 2) -> str:
    return f"{float(value):.{digits}f}" if isinstance(value, (int, float)) \
        and not isinstance(value, bool) else "-"


def experiment_view(d: dict[str, Any]) -> ExperimentView:
    analysis = d.get("analysis") or {}
    states = d.get("arm_states") or {}
    arms = [{"arm": str(a.get("arm")),
             "decision": library.decision_words(a.get("decision")),
             "state": STATE_WORDS.get(states.get(str(a.get("arm")), ""), "-"),
             "stopped_at": "-" if a.get("stopped_at") is None else f"look {a['stopped_at']}",
             "reason": str(a.get("reason") or "")}
            for a in analysis.get("arms") or [] if isinstance(a, dict)]
    comps = []
    for c in analysis.get("comparisons") or []:
        if not isinstance(c, dict):
            continue
        rows = [r for r in c.get("looks") or [] if isinstance(r, dict)]
        last = rows[-1] if rows else {}
        comps.append({"arm": str(c.get("arm")), "metric": str(c.get("metric")),
                      "role": str(c.get("role")),
                      "look": "-" if not last else str(last.get("look")),
                      "z": _number(last.get("z")), "boundary": _number(last.get("efficacy_z")),
                      "decision": library.decision_words(c.get("decision"),
                                                         c.get("direction"))})
    return ExperimentView(
        decision=library.decision_words(d["decision"]) if d.get("decision") else
        "no look yet", reason_text=analysis.get("reason_text"), arms=arms,
        comparisons=comps, warnings=[str(w) for w in analysis.get("warnings") or []],
        caution=str(analysis.get("caution") or library.caution()))


def comparisons(data: ExperimentData, plan: PlanView) -> list[Comparison]:
    d = data.detail
    title = str(d["name"])
    analysis = d.get("analysis")
    name = f"{d['arms']['treatment']} vs {d['arms']['control']}"
    if not analysis or not analysis.get("looks"):
        return [Comparison(name, None, None, None, None, None, [], 0)]
    exp_id = d["id"]
    shown = _section("plan", exp_id, lambda: plan_display(d["plan"]["document"]))
    planned = shown.plan if shown is not None and shown.kind == "group_sequential" else None
    summary = _section("summary", exp_id, lambda: library.summarize(analysis))
    z = _section("z chart", exp_id, lambda: _html(library.z_path_svg(analysis, planned,
                                                                     title)))
    eff = _section("effect chart", exp_id, lambda: _html(library.effect_svg(analysis, title)))
    fin = _section("final table", exp_id, lambda: library.final_table(analysis))
    looks = _section("looks table", exp_id, lambda: _looks_table(d, analysis))
    return [Comparison(
        title=name, summary=summary, z_chart=z, effect_chart=eff,
        final_table=_html(library.table_html(*fin)) if fin else None,
        looks_table=looks, projection=_projection(analysis, str(d["metric_kind"])),
        look_count=len(analysis["looks"]),
    )]


def experiment_context(data: ExperimentData) -> dict[str, Any]:
    d = data.detail
    plan = plan_view(data)
    analysis = d.get("analysis") or {}
    if isinstance(d["arms"], list):  # an experiment plan: many arms, several metrics
        return _experiment_plan_context(data, plan)
    facts = [
        ("Metric", str(d["metric_kind"])),
        ("Arms", f"{d['arms']['control']} (control), {d['arms']['treatment']} (treatment)"),
        ("Planned allocation", f"{d['allocation']:g} treatment per control"),
        ("Plan", f"{plan.kind.replace('_', '-')}, version {plan.version}"),
        ("Looks recorded", str(d["look_count"])),
        ("Created", f"{when(d['created_at'])} by {who(d['created_by'], data.key_labels)}"),
    ]
    if d.get("max_n") is not None:
        facts.insert(3, ("Maximum sample (both arms)", f"{d['max_n']:,.0f}"))
    if d["looks_page"]["offset"]:
        facts.append(("Shown", f"the latest {len(d['looks_recorded'])} looks"))
    return {
        "exp": d,
        "state": STATE_WORDS.get(d["state"], d["state"]),
        "decision": library.decision_words(d["decision"], analysis.get("direction"))
        if d["decision"] else "no look yet",
        "facts": facts,
        "plan": plan,
        "comparisons": comparisons(data, plan),
        "experiment": None,
        "experiment_failed": False,
        "json_url": f"/v1/experiments/{d['id']}",
    }


def _experiment_plan_context(data: ExperimentData, plan: PlanView) -> dict[str, Any]:
    d = data.detail
    arms = list(d["arms"])
    allocations = d.get("allocations") or {}
    metrics = d.get("metrics") or []
    facts = [
        ("Metrics", ", ".join(f"{m['name']} ({m['role']}, {m['metric_kind']})"
                              for m in metrics)),
        ("Arms", f"{arms[0]} (control), " + ", ".join(arms[1:])),
        ("Planned allocation", ", ".join(f"{a} {allocations.get(a, 1.0):g}" for a in arms[1:])
         + " per control"),
        ("Plan", f"experiment, version {plan.version}"),
        ("Looks recorded", str(d["look_count"])),
        ("Created", f"{when(d['created_at'])} by {who(d['created_by'], data.key_labels)}"),
    ]
    view = _section("experiment", d["id"], lambda: experiment_view(d))
    return {
        "exp": d,
        "state": STATE_WORDS.get(d["state"], d["state"]),
        "decision": library.decision_words(d["decision"]) if d["decision"]
        else "no look yet",
        "facts": facts,
        "plan": plan,
        "comparisons": [],
        "experiment": view,
        "experiment_failed": view is None,
        "json_url": f"/v1/experiments/{d['id']}",
    }


# --------------------------------------------------------------------------- list


def list_rows(data: ListData) -> list[dict[str, Any]]:
    rows = []
    for e in data.listing["experiments"]:
        latest = data.latest.get(e["id"])
        marks = []
        if latest is not None:
            srm = library.sample_ratio_looks(latest.summary, [latest.result])
            if srm:
                marks.append(("sample ratio", "Sample-ratio mismatch at look"
                              + ("s " if len(srm) > 1 else " ") + ", ".join(map(str, srm))
                              + ": the arms did not split as planned"))
            if latest.result and latest.result.get("small_sample"):
                marks.append(("small samples", "An arm is small at the latest look: the "
                              "numbers there are approximate"))
        direction = latest.summary.get("direction") if latest else None
        rows.append({
            "id": e["id"], "name": e["name"], "metric_kind": e["metric_kind"],
            "state": e["state"],
            "decision": library.decision_words(e["decision"], direction)
            if e["decision"] else "-",
            "look_count": e["look_count"],
            "last_look": when(latest.recorded_at) if latest else "-",
            "marks": marks,
        })
    return rows
