"""Experiments on the command line: ``seqtest plan --arms`` (or ``--experiment FILE``),
``seqtest analyze`` and ``seqtest simulate`` with an experiment plan document.

Kept apart from the two-arm subcommands, which call in here when the plan is an
experiment; nothing numerical is imported until a command runs.
"""

from __future__ import annotations

import argparse
import json
import textwrap
from pathlib import Path
from typing import Any

from seqtest.cli.common import UsageError, table, write
from seqtest.core.vocabulary import CAUTION

__all__ = ["add_experiment_options", "analysis_text", "cmd_analyze", "cmd_plan",
           "cmd_simulate", "exit_status", "make_plan", "plan_rows", "plan_text",
           "read_looks", "size_rows", "wants_experiment"]

#: ``seqtest plan`` options that describe a one-metric experiment.
_EXPERIMENT_OPTIONS = ("arms", "allocations", "method", "power_for", "experiment")


def add_experiment_options(p: argparse.ArgumentParser) -> None:
    """The ``seqtest plan`` options of an experiment (several treatments)."""
    g = p.add_argument_group("experiments (one control, 1 to 8 treatments)")
    g.add_argument("--arms", default=None, metavar="N|NAMES",
                   help="design an experiment: the number of arms (2 to 9, the control "
                        "included) or their names, the control first (control,blue,green); "
                        "the metric options (--metric, --mde, --margin, --better, "
                        "--hypothesis, ...) describe its one primary metric")
    g.add_argument("--allocations", default=None, metavar="A,...",
                   help="treatment users per control user, one per treatment or one for "
                        "all (1)")
    g.add_argument("--method", choices=("graphical", "dunnett"), default=None,
                   help="how the family-wise error is split: graphical (weighted "
                        "Bonferroni passing alpha on, the default) or dunnett (common "
                        "boundaries from the arms' correlation)")
    g.add_argument("--power-for", choices=("each", "any"), default=None, dest="power_for",
                   help="size for the power of each comparison (default) or of at least "
                        "one arm")
    g.add_argument("--experiment", metavar="FILE", default=None,
                   help="an experiment described in a JSON or TOML file: the arguments of "
                        "seqtest.experiment_plan (arms, metrics with roles, allocations, "
                        "method, weights, transitions, ...)")


def wants_experiment(args: argparse.Namespace) -> bool:
    return any(getattr(args, o, None) is not None for o in _EXPERIMENT_OPTIONS)


def _arms(text: str) -> Any:
    text = text.strip()
    if text.isdigit():
        return int(text)
    names = [x.strip() for x in text.split(",") if x.strip()]
    if len(names) < 2:
        raise UsageError(f"--arms: got {text!r}; allowed is a number of arms (2 to 9) or "
                         "comma-separated names, the control first")
    return names


def _numbers(text: str | None, option: str) -> list[float] | None:
    if text is None:
        return None
    try:
        return [float(x) for x in text.split(",") if x.strip()]
    except ValueError:
        raise UsageError(f"{option}: got {text!r}; give comma-separated numbers") from None


def _read_file(path: str, option: str) -> Any:
    p = Path(path)
    if not p.is_file():
        raise UsageError(f"{option}: {str(p)!r} does not exist")
    text = p.read_text(encoding="utf-8")
    try:
        if p.suffix.lower() == ".toml":
            import tomllib
            return tomllib.loads(text)
        return json.loads(text)
    except (ValueError, ImportError) as exc:
        raise UsageError(f"{option}: {str(p)!r} cannot be read ({exc})") from None


def make_plan(args: argparse.Namespace, metric: dict | None,
              fractions: list[float] | None) -> Any:
    """The experiment plan the ``seqtest plan`` options describe (``metric`` and
    ``fractions``: the metric and fraction options as ``seqtest plan`` reads them)."""
    from seqtest.planning.experiment import experiment_plan
    if args.experiment is not None:
        given = [o for o in ("arms", "allocations", "method", "power_for", "better",
                             "margin", "hypothesis", "metric") if getattr(args, o) is not None]
        if given:
            raise UsageError(f"--{given[0].replace('_', '-')}: give it in the --experiment "
                             "file instead")
        spec = _read_file(args.experiment, "--experiment")
        if not isinstance(spec, dict):
            raise UsageError("--experiment: the file must hold a table of the arguments of "
                             "seqtest.experiment_plan")
        return experiment_plan(**spec)
    if metric is None:
        raise UsageError("--arms: an experiment needs its metric (--metric with --mde, "
                         "--baseline or --sd), or an --experiment file")
    # the command line's metric is the experiment's one primary: --margin, --better and
    # --hypothesis are its fields, as for a two-arm plan
    metric.pop("allocation", None)
    alloc = _numbers(args.allocations, "--allocations")
    if args.allocation != 1.0 and alloc is None:
        alloc = [args.allocation]
    return experiment_plan(
        _arms(args.arms or "2"), metric,
        allocations=None if alloc is None else (alloc[0] if len(alloc) == 1 else alloc),
        alpha=args.alpha, sides=args.sides, power=args.power, looks=args.looks,
        information_fractions=fractions,
        efficacy=args.efficacy, futility=args.futility, binding=args.binding,
        method=args.method or "graphical", power_for=args.power_for or "each")


def plan_rows(plan: Any) -> list[tuple[str, list[str], list[list[Any]]]]:
    """One boundary table per group of comparisons with the same boundaries:
    ``(title, headers, rows)``."""
    groups: dict[tuple, list[Any]] = {}
    for c in plan.comparisons:
        key = (c.role, round(c.level, 15), tuple(c.plan.efficacy_z.round(12)),
               None if c.plan.futility_z is None else tuple(c.plan.futility_z.round(12)))
        groups.setdefault(key, []).append(c)
    out = []
    for cs in groups.values():
        c = cs[0]
        p = c.plan
        who = ", ".join(x.label for x in cs)
        what = ("guardrail harm test" if c.role == "guardrail" else
                "common Dunnett-type boundaries" if plan.dunnett is not None
                else "primary hypotheses")
        title = f"{what}: {who} (level {c.level:.6g})"
        headers = ["look", "information_fraction", "efficacy_z", "p_threshold",
                   "cumulative_alpha", "futility_z"]
        rows = []
        for k in range(plan.looks):
            rows.append([k + 1, plan.info_fractions[k], p.efficacy_z[k], p.p_threshold[k],
                         p.cumulative_alpha[k],
                         None if p.futility_z is None else p.futility_z[k]])
        out.append((title, headers, rows))
    return out


def size_rows(plan: Any) -> tuple[list[str], list[list[Any]]]:
    headers = ["metric", "look", *plan.arms]
    rows = []
    seen: dict[tuple, str] = {}
    for m in plan.metrics:
        key = tuple(tuple(int(x) for x in plan.sizes[m.name][a]) for a in plan.arms)
        if key in seen:
            continue
        seen[key] = m.name
        for k in range(plan.looks):
            rows.append([m.name, k + 1, *[int(plan.sizes[m.name][a][k]) for a in plan.arms]])
    return headers, rows


def plan_text(plan: Any) -> str:
    parts = [plan.summary(), ""]
    for title, headers, rows in plan_rows(plan):
        parts += [title, table(headers, rows), ""]
    headers, rows = size_rows(plan)
    parts += ["users (exposure for rates) per arm, cumulative", table(headers, rows), ""]
    pw = [[c.label, c.role, c.level, c.planned_power] for c in plan.comparisons]
    parts += [table(["comparison", "role", "level", "planned_power"], pw), ""]
    parts.append(f"Note: {CAUTION}")
    return "\n".join(parts)


def cmd_plan(args: argparse.Namespace, metric: dict | None,
             fractions: list[float] | None) -> int:
    """``seqtest plan`` for an experiment (``metric``, ``fractions``: see
    :func:`make_plan`)."""
    if args.kind == "mixture":
        raise UsageError("--arms: experiments are group-sequential plans (--kind "
                         "group_sequential)")
    plan = make_plan(args, metric, fractions)
    if args.json:
        write(json.dumps(plan.to_dict(), indent=2, allow_nan=False), args.json)
    if args.csv:
        import csv
        import io
        buf = io.StringIO()
        w = csv.writer(buf)
        w.writerow(["arm", "metric", "role", "level", "look", "information_fraction",
                    "efficacy_z", "p_threshold", "cumulative_alpha", "futility_z"])
        for c in plan.comparisons:
            p = c.plan
            for k in range(plan.looks):
                row = [c.arm, c.metric, c.role, c.level, k + 1, plan.info_fractions[k],
                       p.efficacy_z[k], p.p_threshold[k], p.cumulative_alpha[k],
                       None if p.futility_z is None else p.futility_z[k]]
                w.writerow(["" if v is None else (repr(float(v)) if isinstance(v, float)
                                                  else v) for v in row])
        write(buf.getvalue(), args.csv)
    if args.json != "-" and args.csv != "-":
        print(plan_text(plan))
    return 0


# -- analyze --------------------------------------------------------------------------------

def _wrap(text: str, indent: str = "  ") -> str:
    return textwrap.fill(text, width=88, initial_indent=indent, subsequent_indent=indent,
                         break_on_hyphens=False)


def analysis_text(an: Any) -> str:
    """What ``seqtest analyze`` prints for an experiment."""
    out: list[str] = []
    mism = an.sample_ratio_mismatch
    if mism:
        out.append("SAMPLE-RATIO MISMATCH: read this before the decisions")
        out += [_wrap(w) for w in an.warnings if "sample ratio mismatch" in w]
        out.append("")
    rows = []
    for c in an.comparisons:
        if not c.looks:
            continue
        x = c.looks[-1]
        rows.append([c.arm, c.metric, c.role, x.look, x.estimate, x.z, x.efficacy_z,
                     c.level, x.interval_lower, x.interval_upper, c.decision.value])
    out.append(table(["arm", "metric", "role", "look", "estimate", "z", "efficacy_z",
                      "level", "interval_lower", "interval_upper", "decision"], rows))
    out.append("")
    out.append(table(["arm", "decision", "stopped_at", "winner"],
                     [[a.arm, a.decision.value, a.stopped_at, "yes" if a.winner else "no"]
                      for a in an.arms]))
    out.append("")
    out.append(f"Decision: {an.decision.value}")
    out.append(_wrap(an.reason_text))
    for a in an.arms:
        out.append(_wrap(a.reason))
    fin = [[c.arm, c.metric, c.final.p_value, c.adjusted_p, c.final.ci_lower,
            c.final.ci_upper, c.final.median_unbiased, c.inference_level]
           for c in an.comparisons if c.final is not None]
    if fin:
        out += ["", "adjusted inference at each arm's stop",
                table(["arm", "metric", "stagewise_p", "adjusted_p", "ci_lower", "ci_upper",
                       "median_unbiased", "level"], fin)]
    notes = [w for w in an.warnings if "sample ratio mismatch" not in w]
    if notes:
        out.append("")
        out += [_wrap(f"warning: {w}", "") for w in notes]
    out += ["", _wrap(f"Note: {an.caution}", "")]
    return "\n".join(out)


def read_looks(args: argparse.Namespace, plan: Any, read_table: Any) -> Any:
    """The looks of an experiment: a JSON file (a list of looks, any number of metrics)
    or a table in either layout (one metric), read by ``read_table`` (that of
    ``seqtest analyze``)."""
    if args.looks is not None and str(args.looks).lower().endswith(".json"):
        data = _read_file(args.looks, "looks")
        if not isinstance(data, list):
            raise UsageError("looks: a JSON file of looks holds a list, one entry per look "
                             "({arm: totals} or {metric: {arm: totals}})")
        return data
    if len(plan.metrics) != 1:
        raise UsageError("looks: a table holds one metric; give the looks of an experiment "
                         "with several metrics as a JSON file")
    return read_table(args, plan.metrics[0].kind, control=args.control or plan.control)


def exit_status(an: Any) -> int:
    """The exit status of an experiment's analysis: :func:`seqtest.reporting.exit_status`
    (one table for every command that reports a decision)."""
    from seqtest.reporting.status import exit_status as status_of
    return int(status_of(an))


def cmd_analyze(args: argparse.Namespace, plan: Any, read_table: Any) -> int:
    """``seqtest analyze`` with an experiment plan (``read_table``: how ``seqtest
    analyze`` reads a table of looks)."""
    from seqtest.monitoring.experiment import analyze_experiment
    for opt in ("metric", "max_n", "daily_traffic", "plot"):
        if getattr(args, opt, None) is not None:
            raise UsageError(f"--{opt.replace('_', '-')}: does not apply to an experiment "
                             "plan (its metrics and sizes are the plan's)")
    if getattr(args, "fraction_basis", "sample") != "sample":
        raise UsageError("--fraction-basis: an experiment measures fractions by sample")
    looks = read_looks(args, plan, read_table)
    an = analyze_experiment(plan, looks, final=args.final)
    if args.json:
        write(json.dumps(an.to_dict(), indent=2, allow_nan=False), args.json)
    if args.json != "-":
        print(analysis_text(an))
    return exit_status(an)


# -- simulate -------------------------------------------------------------------------------

def cmd_simulate(args: argparse.Namespace, plan: Any, progress: Any, client: Any) -> Any:
    """Run ``seqtest simulate`` for an experiment plan (the scenario must be one)."""
    from seqtest.simulation.experiment import (
        experiment_scenario_from_dict,
        is_experiment_scenario,
        simulate_experiment,
    )
    from seqtest.simulation.scenarios import read_document
    try:
        doc = read_document(args.scenario)
        if not is_experiment_scenario(doc):
            raise ValueError("an experiment plan needs an experiment scenario (with "
                             "[[metrics]]: name, data, effects per arm)")
        scenario = experiment_scenario_from_dict(doc)
    except ValueError as exc:
        raise ValueError(f"--scenario: {exc}") from None
    if args.plot is not None:
        raise UsageError("--plot: not available for experiments; use --json")
    return simulate_experiment(plan, scenario, args.reps, seed=args.seed,
                               workers=args.workers, chunk_size=args.chunk_size,
                               confidence=args.confidence, progress=progress, client=client)


