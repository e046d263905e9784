"""``seqtest post``: post looks to the seqtest service and print its decision.

The looks come from a CSV file or a database query, read as ``seqtest analyze`` reads
them (either layout, ``--column`` and ``--control``), or one look from the command line
(``--total ARM.TOTAL=VALUE``). They go to an experiment of the service (``--experiment
ID``), created first from a plan document with ``--create``.

Running the same command again posts nothing twice: the looks already stored are read
first and compared with the data (a difference is refused), the others are posted in
order, one at a time, each with an idempotency key derived from the experiment, the
look's number and its totals (:mod:`seqtest.client`), so a look whose answer was lost
in a crash is answered from the service's record instead of being stored again.

Exit statuses (:mod:`seqtest.reporting.status`): 0 continue, 3 stop, 4 sample-ratio
mismatch, 5 complete, 2 bad input or a request the service refused (4xx), 6 the
service could not be reached or failed (the looks acknowledged before are stored; run
the command again).
"""

from __future__ import annotations

import argparse
import json
import math
import re
import sys
from pathlib import Path
from typing import Any

from seqtest.cli.common import UsageError, write
from seqtest.core.vocabulary import METRIC_KINDS

__all__ = ["register"]

_NUMBER = re.compile(r"^[+-]?(\d+(\.\d*)?|\.\d+)([eE][+-]?\d+)?$")


def register(sub: Any) -> None:
    """Add the ``post`` subcommand."""
    from seqtest.cli.analyze import DATABASE_URL_ENV
    p = sub.add_parser(
        "post", help="post looks to the seqtest service and print its decision",
        description="Post looks to an experiment of the seqtest service and print the "
                    "decision. The looks come from a CSV file (the layouts of 'seqtest "
                    "analyze --help'), a database query (--sql), or the command line "
                    "(--total). Running the same command again posts nothing twice.",
        epilog="The service and key: --url or $SEQTEST_URL, the key in $SEQTEST_API_KEY "
               "or --api-key-file. Exit status: 0 continue, 3 stop, 4 sample-ratio "
               "mismatch, 5 complete, 2 bad input or a request the service refused, 6 the "
               "service could not be reached or failed (run the command again).")
    p.add_argument("looks", nargs="?", default=None,
                   help="CSV file of cumulative looks, row k being look k (see --first-look)")
    src = p.add_argument_group("looks")
    src.add_argument("--column", action="append", default=[], metavar="NAME=TARGET",
                     dest="columns",
                     help="read column NAME as TARGET: ARM.TOTAL (wide layout), TOTAL (long "
                          "layout), look, arm, date, note, or - to ignore it; repeatable")
    src.add_argument("--control", metavar="ARM", default=None,
                     help="name of the control arm in the data (default: the experiment's "
                          "control arm, or the arm named 'control')")
    src.add_argument("--sql", metavar="QUERY", default=None,
                     help="read the looks from a database (needs --database-url)")
    src.add_argument("--sql-file", metavar="FILE", default=None, dest="sql_file",
                     help="like --sql, the query read from FILE")
    src.add_argument("--database-url", metavar="URL", default=None, dest="database_url",
                     help=f"database for --sql (default: ${DATABASE_URL_ENV})")
    src.add_argument("--total", action="append", default=[], metavar="ARM.TOTAL=VALUE",
                     dest="totals",
                     help="one look on the command line: a cumulative total of an arm, e.g. "
                          "--total classic.n=1500 --total classic.successes=180; repeat for "
                          "every total of both arms")
    src.add_argument("--look", type=int, default=None, metavar="N",
                     help="with --total: the look's number (default: the stored look with "
                          "the same totals, else the next look)")
    src.add_argument("--first-look", type=int, default=1, metavar="N", dest="first_look",
                     help="the number of the data's first look (default 1)")
    src.add_argument("--final", action="store_true",
                     help="post the last look as final (it spends whatever error is left)")
    src.add_argument("--daily-traffic", type=float, default=None, dest="daily_traffic",
                     help="units per day over both arms, for the projection in days")
    exp = p.add_argument_group("experiment")
    which = exp.add_mutually_exclusive_group(required=True)
    which.add_argument("--experiment", metavar="ID", default=None,
                       help="the experiment's id (exp_...)")
    which.add_argument("--create", action="store_true",
                       help="create the experiment first, from --plan and --name (the same "
                            "command run again finds it instead of creating another)")
    exp.add_argument("--plan", metavar="FILE", default=None,
                     help="with --create: plan document from 'seqtest plan --json'")
    exp.add_argument("--name", default=None, help="with --create: the experiment's name")
    exp.add_argument("--description", default=None, help="with --create")
    exp.add_argument("--arms", metavar="CONTROL,TREATMENT", default=None,
                     help="with --create: the arms' names (default: the data's)")
    exp.add_argument("--metric", choices=METRIC_KINDS, default=None,
                     help="with --create: metric kind when the plan has none")
    exp.add_argument("--max-n", type=float, default=None, dest="max_n",
                     help="with --create: maximum total over both arms, when the plan has "
                          "no metric")
    exp.add_argument("--allocation", type=float, default=None,
                     help="with --create: treatment units per control unit (default 1)")
    exp.add_argument("--fraction-basis", choices=("sample", "information"), default=None,
                     dest="fraction_basis",
                     help="with --create: measure information fractions by sample size "
                          "(the service's default) or by statistical information")
    svc = p.add_argument_group("service")
    svc.add_argument("--url", default=None,
                     help="the service (default: $SEQTEST_URL, else http://127.0.0.1:8000)")
    svc.add_argument("--api-key-file", metavar="FILE", default=None, dest="api_key_file",
                     help="read the API key from FILE (default: $SEQTEST_API_KEY); keys are "
                          "never taken on the command line")
    svc.add_argument("--timeout", type=float, default=30.0,
                     help="seconds to wait for each answer (default 30)")
    svc.add_argument("--deadline", type=float, default=60.0,
                     help="seconds for each request, retries included (default 60)")
    svc.add_argument("--retries", type=int, default=4,
                     help="retries of a request after a connection error, timeout or 5xx "
                          "answer (default 4; 4xx answers are never retried)")
    p.add_argument("--json", metavar="FILE", default=None,
                   help="write what was done and the analysis (JSON) to FILE ('-' for "
                        "stdout)")
    p.set_defaults(func=cmd_post)


# ---------------------------------------------------------------------------
# Reading the looks
# ---------------------------------------------------------------------------

def _value(text: str, spec: str) -> int | float:
    t = text.strip()
    if not _NUMBER.match(t):
        raise UsageError(f"--total: got {spec!r}; allowed is ARM.TOTAL=NUMBER, e.g. "
                         "classic.n=1500 (no thousands separators or units)")
    v = float(t)
    if not math.isfinite(v):
        raise UsageError(f"--total: got {spec!r}; allowed is a finite number")
    return int(t) if re.fullmatch(r"[+-]?\d+", t) else v


def _frame_of_totals(specs: list[str]) -> tuple[Any, dict[str, str]]:
    """One look given as ``ARM.TOTAL=VALUE`` options: a one-row wide table, and the
    column mapping that reads each column as its ARM.TOTAL."""
    import pandas as pd
    row: dict[str, Any] = {}
    for spec in specs:
        name, sep, value = spec.rpartition("=")
        name = name.strip()
        arm, dot, total = name.rpartition(".")
        if not sep or not dot or not arm.strip() or not total.strip():
            raise UsageError(f"--total: got {spec!r}; allowed is ARM.TOTAL=NUMBER, e.g. "
                             "classic.n=1500")
        if name in row:
            raise UsageError(f"--total: got {name} twice; allowed is one value per total")
        row[name] = _value(value, spec)
    return pd.DataFrame([row], dtype=object), {c: c for c in row}


def _source(args: argparse.Namespace) -> tuple[Any, dict[str, Any]]:
    """The table the options name, and its column mapping."""
    from seqtest.monitoring.lookfile import column_mapping
    sources = [s for s, given in (("a looks file", args.looks is not None),
                                  ("--sql", args.sql is not None),
                                  ("--sql-file", args.sql_file is not None),
                                  ("--total", bool(args.totals))) if given]
    if len(sources) != 1:
        raise UsageError(f"looks: got {' and '.join(sources) or 'none'}; allowed is one of "
                         "a looks file, --sql QUERY, --sql-file FILE or --total "
                         "ARM.TOTAL=VALUE ...")
    if args.look is not None and not args.totals:
        raise UsageError("--look: given without --total; allowed only with one look on "
                         "the command line (a file's looks are numbered by --first-look)")
    if args.first_look != 1 and args.totals:
        raise UsageError("--first-look: given with --total; the number of a look on the "
                         "command line is --look")
    columns: dict[str, Any] = column_mapping(args.columns)
    if args.totals:
        if columns:
            raise UsageError("--column: given with --total; --total names each total as "
                             "ARM.TOTAL already")
        return _frame_of_totals(args.totals)
    from seqtest.cli.analyze import looks_frame
    return looks_frame(args), columns


# ---------------------------------------------------------------------------
# The service
# ---------------------------------------------------------------------------

def _api_key(args: argparse.Namespace) -> str | None:
    if args.api_key_file is None:
        return None            # the client reads $SEQTEST_API_KEY
    path = Path(args.api_key_file)
    try:
        text = path.read_text(encoding="utf-8").strip()
    except (OSError, UnicodeDecodeError) as exc:
        raise UsageError(f"--api-key-file: cannot read {str(path)!r} "
                         f"({type(exc).__name__})") from None
    if not text:
        raise UsageError(f"--api-key-file: {str(path)!r} is empty; allowed is a file holding "
                         "the key 'seqtest keys create' printed")
    return text


def _client(args: argparse.Namespace) -> Any:
    for name in ("timeout", "deadline"):
        v = getattr(args, name)
        if not (math.isfinite(v) and v > 0):
            raise UsageError(f"--{name}: got {v!r}; allowed is a number of seconds > 0")
    if args.retries < 0:
        raise UsageError(f"--retries: got {args.retries}; allowed is a whole number >= 0")
    try:
        from seqtest.client import Client, RetryPolicy
        return Client(args.url, _api_key(args), timeout=args.timeout,
                      connect_timeout=min(5.0, args.timeout),
                      retry=RetryPolicy(attempts=args.retries + 1, deadline=args.deadline))
    except ImportError as exc:
        raise UsageError(str(exc)) from None


def _plan_kind(doc: dict[str, Any]) -> str | None:
    metric = (doc.get("inputs") or {}).get("metric")
    kind = metric.get("kind") if isinstance(metric, dict) else None
    return kind if isinstance(kind, str) else None


def _create(client: Any, args: argparse.Namespace, frame: Any,
            columns: dict[str, Any], say: Any) -> tuple[Any, Any]:
    """Create the experiment of ``--create``; the experiment and the looks' table."""
    from seqtest.monitoring.lookfile import read_arm_looks
    missing = [o for o, v in (("--plan", args.plan), ("--name", args.name)) if v is None]
    if missing:
        raise UsageError(f"{missing[0]}: missing; --create needs --plan FILE and --name NAME")
    from seqtest.cli.common import read_plan_document
    doc = read_plan_document(args.plan)
    arms = None
    if doc.get("kind") == "experiment":       # many arms: the plan names them
        return _create_experiment_plan(client, args, doc, frame, columns, say)
    if args.arms is not None:
        arms = [a.strip() for a in args.arms.split(",")]
        if len(arms) != 2 or not all(arms):
            raise UsageError(f"--arms: got {args.arms!r}; allowed is CONTROL,TREATMENT")
    kind = args.metric or _plan_kind(doc)
    control = args.control or (arms[0] if arms else None)
    table = read_arm_looks(frame, kind, columns=columns, control=control)
    roles = table.roles()
    exp = client.create_experiment(
        args.name, plan=doc, arms=arms or (roles["control"], roles["treatment"]),
        metric_kind=args.metric, max_n=args.max_n, allocation=args.allocation,
        fraction_basis=args.fraction_basis, description=args.description)
    how = "found (created by an earlier run)" if exp.replayed else "created"
    say(f"experiment {exp.id} ({exp.name}): {how}; post later looks with "
        f"--experiment {exp.id}")
    return exp, table


def _create_experiment_plan(client: Any, args: argparse.Namespace, doc: dict[str, Any],
                            frame: Any, columns: dict[str, Any], say: Any
                            ) -> tuple[Any, Any]:
    """``--create`` from an experiment plan (``seqtest.experiment_plan``): the arms and
    metrics are the plan's; a table of looks holds its one metric."""
    from seqtest.monitoring.lookfile import read_arm_looks
    inputs = doc.get("inputs") or {}
    names = [a.get("name") for a in inputs.get("arms") or [] if isinstance(a, dict)]
    metrics = [m for m in inputs.get("metrics") or [] if isinstance(m, dict)]
    if len(metrics) != 1:
        raise UsageError("--create: the plan has several metrics, and a table of looks "
                         "holds one; post its looks with seqtest.client (a list of "
                         "{metric: {arm: totals}})")
    arms = None
    if args.arms is not None:
        arms = [a.strip() for a in args.arms.split(",")]
        if arms != names:
            raise UsageError(f"--arms: got {args.arms!r}; the plan's arms are "
                             f"{','.join(str(n) for n in names)} (leave --arms out)")
    table = read_arm_looks(frame, metrics[0].get("kind"), columns=columns,
                           control=args.control or (names[0] if names else None))
    exp = client.create_experiment(
        args.name, plan=doc, arms=arms, metric_kind=args.metric, max_n=args.max_n,
        allocation=args.allocation, fraction_basis=args.fraction_basis,
        description=args.description)
    how = "found (created by an earlier run)" if exp.replayed else "created"
    say(f"experiment {exp.id} ({exp.name}): {how}; post later looks with "
        f"--experiment {exp.id}")
    return exp, table


def _status(analysis: dict[str, Any] | None) -> int:
    """The exit status of the service's analysis (two-arm or experiment: one table)."""
    from seqtest.reporting.status import ExitStatus, exit_status
    if not analysis:
        return int(ExitStatus.CONTINUE)
    return int(exit_status(analysis))


def _experiment_text(analysis: dict[str, Any]) -> str:
    """The decision of an experiment with many arms, per arm, and the caution."""
    from seqtest.cli.experiment import _wrap
    out = [f"Decision: {analysis.get('decision')}", _wrap(str(analysis.get("reason_text")))]
    out += [_wrap(str(a.get("reason"))) for a in analysis.get("arms") or []]
    out += [_wrap(f"warning: {w}", "") for w in analysis.get("warnings") or []]
    out += ["", _wrap(f"Note: {analysis.get('caution')}", "")]
    return "\n".join(out)


def _show_look(number: int, answer: Any) -> None:
    if answer is None:
        print(f"look {number}: already stored", flush=True)
    elif answer.replayed:
        print(f"look {number}: stored by an earlier run (answer replayed): "
              f"{answer.decision}", flush=True)
    else:
        print(f"look {number}: posted: {answer.decision}", flush=True)


def cmd_post(args: argparse.Namespace) -> int:
    from seqtest.reporting.status import ExitStatus
    if not args.create:
        stray = [o for o, v in (("--plan", args.plan), ("--name", args.name),
                                ("--arms", args.arms), ("--description", args.description),
                                ("--metric", args.metric), ("--max-n", args.max_n),
                                ("--allocation", args.allocation),
                                ("--fraction-basis", args.fraction_basis)) if v is not None]
        if stray:
            raise UsageError(f"{stray[0]}: given with --experiment; allowed only with "
                             "--create")
    if args.first_look < 1 or (args.look is not None and args.look < 1):
        raise UsageError("--first-look/--look: allowed is a look number 1, 2, 3, ...")
    frame, columns = _source(args)
    client = _client(args)
    from seqtest.client import (
        ClientError,
        ServerError,
        ServiceError,
        ServiceUnreachableError,
    )
    text_out = args.json != "-"

    def say(line: str) -> None:     # progress, on stderr when stdout carries the JSON
        print(line, file=sys.stdout if text_out else sys.stderr, flush=True)
    try:
        with client:
            if args.create:
                exp, looks = _create(client, args, frame, columns, say)
                exp_id = exp.id
            else:
                exp_id, looks = args.experiment, frame
            first = (args.look if args.totals else args.first_look)
            result = client.post_looks(
                exp_id, looks, first=first, final=args.final,
                daily_traffic=args.daily_traffic, columns=columns or None,
                control=args.control, on_look=_show_look if text_out else None)
    except (ServerError, ServiceUnreachableError) as exc:
        print(f"seqtest post: error: {exc}", file=sys.stderr)
        print("seqtest post: the looks acknowledged above are stored; run the same command "
              "again to go on (nothing is posted twice)", file=sys.stderr)
        return int(ExitStatus.SERVICE_ERROR)
    except ClientError as exc:
        print(f"seqtest post: error: {exc}", file=sys.stderr)
        if isinstance(exc, ServiceError) and exc.details:
            for d in exc.details[1:6]:
                where = ".".join(str(x) for x in d.get("location", []))
                print(f"  {where}: {d.get('message')}", file=sys.stderr)
        return int(ExitStatus.USAGE_ERROR)
    status = _status(result.analysis)
    if args.json:
        write(json.dumps({
            "experiment_id": result.experiment_id,
            "already_stored": result.already_stored,
            "posted": [a.look for a in result.posted],
            "replayed": [a.look for a in result.posted if a.replayed],
            "not_posted": result.not_posted,
            "state": result.state,
            "decision": result.decision,
            "look_count": result.look_count,
            "notes": result.notes,
            "exit_status": status,
            "analysis": result.analysis,
        }, indent=2, allow_nan=False), args.json)
    if text_out:
        for note in result.notes:
            print(f"note: {note}")
        print(f"experiment {result.experiment_id}: {result.look_count} look(s) stored, "
              f"state {result.state}")
        if result.analysis and result.analysis.get("kind") == "experiment":
            print()
            print(_experiment_text(result.analysis))
        elif result.analysis:
            from seqtest.cli.analyze import analysis_text
            print()
            print(analysis_text(result.analysis))
    return status
