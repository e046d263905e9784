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

from seqtest.cli.analyze import add_look_inputs, analysis_of
from seqtest.cli.common import UsageError

__all__ = ["register"]


def register(sub: Any) -> None:
    """Add the ``report`` subcommand."""
    r = sub.add_parser("report", help="write a one-page report (HTML, Markdown) of the "
                                      "looks so far")
    add_look_inputs(r)
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
    from seqtest.reporting import effect_svg, report_html, report_markdown, z_path_svg
    plan, analysis = analysis_of(args)
    title = args.title or (Path(args.looks).stem.replace("_", " ") if args.looks
                           else "experiment")
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
