"""``seqtest report``: one self-contained page (HTML, and Markdown) from a plan and its
looks, for a decision record or an email.

It reads the same inputs as ``seqtest analyze`` and writes what
:func:`seqtest.reporting.report_html` and :func:`seqtest.reporting.report_markdown`
make: the decision in plain words, the charts, the looks, the plan and the caution.
The HTML page loads nothing from anywhere; the Markdown file links the charts as SVG
files written beside it. The exit status is 0 once the files are written (2 for bad
input); the decision's own status is ``seqtest analyze``'s.
"""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from seqtest.cli.common import UsageError, read_plan
from seqtest.core.vocabulary import METRIC_KINDS

__all__ = ["register"]


def register(sub: Any) -> None:
    """Add the ``report`` subcommand."""
    r = sub.add_parser("report", help="write a one-page report (HTML, Markdown) of the "
                                      "looks so far")
    r.add_argument("looks", help="CSV file, one row per look (as for 'seqtest analyze')")
    r.add_argument("--plan", required=True, help="plan document from 'seqtest plan --json'")
    r.add_argument("--trust-plan", action="store_true", dest="trust_plan",
                   help="skip checking the plan's computed numbers against its inputs")
    r.add_argument("--metric", choices=METRIC_KINDS, default=None,
                   help="metric kind when the plan has none")
    r.add_argument("--final", action="store_true",
                   help="declare the last look final (spend all remaining alpha)")
    r.add_argument("--max-n", type=float, default=None, dest="max_n",
                   help="maximum total over both arms, when the plan has no metric")
    r.add_argument("--fraction-basis", choices=("sample", "information"), default="sample",
                   dest="fraction_basis",
                   help="measure information fractions by sample size (default) or by "
                        "statistical information")
    r.add_argument("--daily-traffic", type=float, default=None, dest="daily_traffic",
                   help="users per day over both arms, to project days to the next look")
    r.add_argument("--html", metavar="FILE.html", default=None,
                   help="write the self-contained HTML page to FILE.html")
    r.add_argument("--markdown", metavar="FILE.md", default=None,
                   help="write the report as Markdown to FILE.md, with its charts as "
                        "FILE-z.svg and FILE-effect.svg beside it")
    r.add_argument("--title", default=None,
                   help="the experiment's name, for the title (default: the looks file's)")
    r.add_argument("--metric-name", default=None, dest="metric_name",
                   help="what to call the metric in sentences, e.g. 'the conversion rate'")
    r.set_defaults(func=cmd_report)


def _target(path: str, option: str) -> Path:
    p = Path(path)
    if not p.parent.is_dir():
        raise UsageError(f"{option}: the folder of {path!r} does not exist")
    return p


def cmd_report(args: argparse.Namespace) -> int:
    if not args.html and not args.markdown:
        raise UsageError("give --html FILE.html, --markdown FILE.md, or both")
    html_path = _target(args.html, "--html") if args.html else None
    md_path = _target(args.markdown, "--markdown") if args.markdown else None
    from seqtest.monitoring.analysis import analyze
    from seqtest.monitoring.lookfile import read_looks_csv
    from seqtest.reporting import effect_svg, report_html, report_markdown, z_path_svg
    plan = read_plan(args.plan, trust=args.trust_plan)
    kind = (getattr(plan, "metric", None) or {}).get("kind") or args.metric
    looks = read_looks_csv(args.looks, kind)
    analysis = analyze(plan, looks, metric=args.metric, final=args.final, max_n=args.max_n,
                       daily_traffic=args.daily_traffic, fraction_basis=args.fraction_basis)
    title = args.title or Path(args.looks).stem.replace("_", " ")
    noun = args.metric_name
    if html_path is not None:
        html_path.write_text(report_html(analysis, plan, title=title, noun=noun),
                             encoding="utf-8")
        print(f"wrote {html_path}")
    if md_path is not None:
        z_file = md_path.with_name(md_path.stem + "-z.svg")
        e_file = md_path.with_name(md_path.stem + "-effect.svg")
        z_file.write_text(z_path_svg(analysis, plan, title=title) + "\n", encoding="utf-8")
        e_file.write_text(effect_svg(analysis, title=title) + "\n", encoding="utf-8")
        charts = {"z statistic against the boundaries": z_file.name,
                  "effect at each look": e_file.name}
        md_path.write_text(report_markdown(analysis, plan, title=title, noun=noun,
                                           charts=charts), encoding="utf-8")
        print(f"wrote {md_path}, {z_file.name}, {e_file.name}")
    return 0
