"""``seqtest analyze``: the decision on the looks so far, with adjusted inference.

The exit status tells a pipeline what was decided (:mod:`seqtest.reporting.status`):
0 continue, 3 stop (efficacy or futility), 4 sample-ratio mismatch, 5 complete without
significance, 2 usage or input error.
"""

from __future__ import annotations

import argparse
import json
import textwrap
from typing import Any

from seqtest.cli.common import UsageError, read_plan, table, write
from seqtest.core.vocabulary import EXPERIMENT_KIND, METRIC_KINDS

__all__ = ["analysis_text", "read_looks", "register"]


#: The epilog of ``seqtest analyze --help``: the accepted columns, generated from the
#: library's metric field table when the help is shown (not at start-up).
_COLUMNS_EPILOG = "(the accepted columns)"

#: Environment variable read when --database-url is not given (keeps a password out of
#: the command line).
DATABASE_URL_ENV = "SEQTEST_LOOKS_DATABASE_URL"


class _HelpWithColumns(argparse.RawDescriptionHelpFormatter):
    """Help formatter that writes the accepted columns in place of the epilog marker."""

    def add_text(self, text: str | None) -> None:
        if text is _COLUMNS_EPILOG:
            from seqtest.monitoring.lookfile import columns_help
            text = columns_help()
        super().add_text(text)


def register(sub: Any) -> None:
    """Add the ``analyze`` subcommand."""
    a = sub.add_parser("analyze", help="analyse the looks so far and give the decision",
                       description="Analyse the looks so far under a plan and give the "
                                   "decision.\nThe looks come from a CSV file or from a "
                                   "database query (--sql).",
                       epilog=_COLUMNS_EPILOG, formatter_class=_HelpWithColumns)
    add_look_inputs(a)
    a.add_argument("--json", metavar="FILE", default=None,
                   help="write the analysis (JSON) to FILE ('-' for stdout)")
    a.add_argument("--plot", metavar="FILE.png", default=None,
                   help="draw the z path against the boundaries")
    a.set_defaults(func=cmd_analyze)


def add_look_inputs(p: argparse.ArgumentParser) -> None:
    """The options that name the plan and the looks (``analyze`` and ``report``)."""
    p.add_argument("looks", nargs="?", default=None,
                   help="CSV file of looks (layouts below); or give --sql")
    p.add_argument("--column", action="append", default=[], metavar="NAME=TARGET",
                   dest="columns",
                   help="read column NAME as TARGET: ARM.TOTAL (wide layout), TOTAL (long "
                        "layout), look, arm, date, note, or - to ignore it; repeatable")
    p.add_argument("--control", metavar="ARM", default=None,
                   help="name of the control arm (default: the arm named 'control')")
    p.add_argument("--sql", metavar="QUERY", default=None,
                   help="read the looks from a database: a SELECT returning the looks in "
                        "either layout (needs --database-url)")
    p.add_argument("--sql-file", metavar="FILE", default=None, dest="sql_file",
                   help="like --sql, the query read from FILE")
    p.add_argument("--database-url", metavar="URL", default=None, dest="database_url",
                   help="database for --sql, e.g. postgresql://user@host/db or "
                        f"sqlite:///looks.db (default: ${DATABASE_URL_ENV})")
    p.add_argument("--plan", required=True, help="plan document from 'seqtest plan --json'")
    p.add_argument("--trust-plan", action="store_true", dest="trust_plan",
                   help="skip checking the plan's computed numbers against its inputs")
    p.add_argument("--metric", choices=METRIC_KINDS, default=None,
                   help="metric kind when the plan has none")
    p.add_argument("--final", action="store_true",
                   help="declare the last look final (spend all remaining alpha)")
    p.add_argument("--max-n", type=float, default=None, dest="max_n",
                   help="maximum total over both arms, when the plan has no metric")
    p.add_argument("--fraction-basis", "--fraction", choices=("sample", "information"),
                   default="sample", dest="fraction_basis",
                   help="measure information fractions by sample size (default) or by "
                        "statistical information (--fraction: the first release's name)")
    p.add_argument("--daily-traffic", type=float, default=None, dest="daily_traffic",
                   help="users per day over both arms, to project days to the next look")


_HEADS = {
    "continue": "CONTINUE",
    "stop_efficacy": "STOP for efficacy",
    "stop_futility": "STOP for futility",
    "complete_not_significant": "COMPLETE without significance",
}


def _wrap(text: str, indent: str = "  ") -> str:
    return textwrap.fill(text, width=88, initial_indent=indent, subsequent_indent=indent,
                         break_on_hyphens=False)


def analysis_text(analysis: Any) -> str:
    """What ``seqtest analyze`` prints: a sample-ratio mismatch first, the looks table
    (relative effects in percent, beside the arms' own values), the decision in plain
    words (:func:`seqtest.reporting.summarize`), the adjusted inference, the other
    warnings and the caution."""
    from seqtest.reporting import final_rows, look_rows, summarize
    from seqtest.reporting.summary import analysis_record
    s = summarize(analysis)
    out: list[str] = []
    if s.alerts:
        out.append("SAMPLE-RATIO MISMATCH: read this before the decision")
        out += [_wrap(w) for w in s.alerts]
        out.append("")
    out += [table(*look_rows(analysis)), ""]
    d = analysis_record(analysis)
    line = f"Decision at look {d['looks'][-1]['look']}: {_HEADS.get(s.decision, s.decision)}"
    if d.get("direction"):
        line += f" ({d['direction'].replace('_', ' ')})"
    out.append(line)
    out.append(_wrap(" ".join(x for x in (s.headline, s.effect, s.outlook, s.caveat) if x)))
    fin = final_rows(analysis)
    if fin:
        out += ["", table(*fin)]
    if s.notes:
        out.append("")
        out += [_wrap(f"warning: {w}", "") for w in s.notes]
    out += ["", _wrap(f"Note: {s.caution}", "")]
    return "\n".join(out)


def looks_frame(args: argparse.Namespace) -> Any:
    """The table of looks that a looks file, ``--sql`` or ``--sql-file`` names (the
    caller has checked that exactly one of them is given)."""
    import os
    from pathlib import Path

    from seqtest.monitoring.lookfile import frame_from_csv
    if args.looks is not None:
        if args.database_url:
            raise UsageError("--database-url: given with a looks file; allowed only with "
                             "--sql or --sql-file")
        return frame_from_csv(args.looks)
    url = args.database_url or os.environ.get(DATABASE_URL_ENV)
    if not url:
        raise UsageError(f"--database-url: missing; --sql needs the database (or set "
                         f"{DATABASE_URL_ENV})")
    query = args.sql
    if args.sql_file is not None:
        path = Path(args.sql_file)
        if not path.is_file():
            raise UsageError(f"--sql-file: {path} does not exist")
        query = path.read_text()
    from seqtest.monitoring.sqllooks import frame_from_sql
    return frame_from_sql(query, url)


def read_table(args: argparse.Namespace, kind: str | None, *, control: str | None = None
               ) -> Any:
    """The table of looks the options name (a CSV file or a query), keyed by arm name
    (:class:`~seqtest.monitoring.lookfile.ArmLooks`, any number of arms)."""
    from seqtest.monitoring.lookfile import column_mapping, read_arm_looks
    sources = [s for s, given in (("a looks file", args.looks), ("--sql", args.sql),
                                  ("--sql-file", args.sql_file)) if given is not None]
    if len(sources) != 1:
        raise UsageError(f"looks: got {' and '.join(sources) or 'none'}; allowed is one of "
                         "a looks file, --sql QUERY or --sql-file FILE")
    return read_arm_looks(looks_frame(args), kind, columns=column_mapping(args.columns),
                          control=args.control if control is None else control)


def read_looks(args: argparse.Namespace, kind: str | None) -> list[dict]:
    """The looks the options name (a CSV file or a query), keyed by role for the
    two-arm analysis."""
    return read_table(args, kind).two_arm()


def analysis_of(args: argparse.Namespace, plan: Any = None) -> tuple[Any, Any]:
    """The plan and the analysis of the looks the options of :func:`add_look_inputs`
    name (``plan``: the plan already read from ``--plan``)."""
    from seqtest.monitoring.analysis import analyze
    if plan is None:
        plan = read_plan(args.plan, trust=args.trust_plan)
    if getattr(plan, "kind", None) == EXPERIMENT_KIND:
        raise UsageError(f"--plan: {args.plan} is an experiment plan (several arms or "
                         "metrics); 'seqtest analyze' analyses it, this command takes a "
                         "two-arm plan")
    kind = (getattr(plan, "metric", None) or {}).get("kind") or args.metric
    looks = read_looks(args, kind)
    analysis = analyze(plan, looks, metric=args.metric, final=args.final, max_n=args.max_n,
                       daily_traffic=args.daily_traffic, fraction_basis=args.fraction_basis)
    return plan, analysis


def cmd_analyze(args: argparse.Namespace) -> int:
    plan = read_plan(args.plan, trust=args.trust_plan)
    if getattr(plan, "kind", None) == EXPERIMENT_KIND:
        from seqtest.cli import experiment
        return experiment.cmd_analyze(args, plan, read_table)
    plan, analysis = analysis_of(args, plan)
    if args.json:
        write(json.dumps(analysis.to_dict(), indent=2, allow_nan=False), args.json)
    if args.json != "-":
        print(analysis_text(analysis))
    if args.plot:
        from seqtest.plotting import plot_analysis
        plot_analysis(analysis, plan, args.plot)
        if args.json != "-":
            print(f"plot written to {args.plot}")
    from seqtest.reporting.status import exit_status
    return int(exit_status(analysis))
