"""The one-page report (HTML and Markdown) and the notebook displays.

:func:`report_html` writes one self-contained HTML page for a decision record or an
email: the summary (sample-ratio alert first), the warnings, the charts as inline SVG
(:mod:`seqtest.reporting.svg`), the adjusted inference at a stop, the looks, the plan
and the caution. Styles are inline; nothing is loaded from anywhere (no script, no
font, no image file). :func:`report_markdown` writes the same content as Markdown,
with the charts as image links to SVG files written beside it.

:func:`analysis_html` and :func:`plan_html` are the notebook displays
(``Analysis._repr_html_``, ``Plan._repr_html_``): the same sentences and tables,
without the page around them.
"""

from __future__ import annotations

import datetime as _dt
from collections.abc import Mapping, Sequence
from html import escape
from typing import Any

from seqtest.core.version import __version__
from seqtest.core.vocabulary import CAUTION
from seqtest.reporting import svg
from seqtest.reporting.summary import Summary, analysis_record, plan_summary, summarize
from seqtest.reporting.tables import final_rows, look_rows, plan_table_rows

__all__ = ["analysis_html", "plan_html", "report_html", "report_markdown", "table_html"]

_STYLE = """
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,"DejaVu Sans",Arial,sans-serif;
color:#1a1a1a;background:#fff;margin:0;padding:16px;line-height:1.45}
main{max-width:920px;margin:0 auto}
h1{font-size:1.5rem;margin:0 0 4px}
h2{font-size:1.15rem;margin:28px 0 8px;border-bottom:1px solid #ddd;padding-bottom:4px}
.meta{color:#555;font-size:.9rem;margin:0 0 16px}
.seqtest-alert{border-left:6px solid #D55E00;background:#fff3ea;padding:10px 14px;margin:12px 0}
.seqtest-decision{font-size:1.08rem;border-left:6px solid #0072B2;background:#eef6fb;
padding:10px 14px;margin:12px 0}
.seqtest-decision .headline{font-weight:700}
.seqtest-caution{border:1px solid #999;background:#f7f7f7;padding:10px 14px;margin:20px 0;
font-size:.92rem}
.seqtest-scroll{overflow-x:auto;-webkit-overflow-scrolling:touch}
table.seqtest{border-collapse:collapse;font-size:.88rem;margin:6px 0 12px}
table.seqtest th,table.seqtest td{border-bottom:1px solid #ddd;padding:4px 8px;
text-align:right;white-space:nowrap}
table.seqtest th{background:#f2f2f2;font-weight:600}
table.seqtest td:last-child,table.seqtest th:last-child{text-align:left}
ul.seqtest-warnings li{margin-bottom:6px}
figure{margin:12px 0}
figure svg{width:100%;height:auto}
pre.seqtest-plan{white-space:pre-wrap;font-size:.88rem;background:#fafafa;padding:8px}
@media (max-width:600px){body{padding:8px}table.seqtest{font-size:.8rem}}
"""


def table_html(headers: Sequence[str], rows: Sequence[Sequence[str]], *,
               caption: str | None = None) -> str:
    """A table of strings, escaped, in a block that scrolls sideways on a narrow screen."""
    head = "".join(f'<th scope="col">{escape(h)}</th>' for h in headers)
    body = "".join("<tr>" + "".join(f"<td>{escape(c)}</td>" for c in row) + "</tr>"
                   for row in rows)
    cap = f"<caption>{escape(caption)}</caption>" if caption else ""
    return (f'<div class="seqtest-scroll"><table class="seqtest">{cap}<thead><tr>{head}'
            f"</tr></thead><tbody>{body}</tbody></table></div>")


def _summary_html(s: Summary) -> str:
    out = []
    if s.alert:
        out.append(f'<div class="seqtest-alert" role="alert"><strong>Check first.</strong> '
                   f"{escape(s.alert)}</div>")
    body = f'<span class="headline">{escape(s.headline)}</span> {escape(s.effect)}'
    for extra in (s.outlook, s.caveat):
        if extra:
            body += f" {escape(extra)}"
    out.append(f'<p class="seqtest-decision">{body}</p>')
    return "".join(out)


def _warnings_html(s: Summary) -> str:
    items = [*s.alerts, *s.notes]
    if not items:
        return ""
    lis = "".join(f"<li>{escape(w)}</li>" for w in items)
    return f'<ul class="seqtest-warnings">{lis}</ul>'


def _caution_html(text: str) -> str:
    return f'<p class="seqtest-caution"><strong>Caution.</strong> {escape(text)}</p>'


def analysis_html(analysis: Any, *, noun: str | None = None) -> str:
    """The notebook display of an analysis: the summary, the warnings, the looks table,
    the adjusted inference at a stop, and the caution."""
    s = summarize(analysis, noun=noun)
    parts = ['<div class="seqtest-analysis">', _summary_html(s), _warnings_html(s),
             table_html(*look_rows(analysis))]
    fin = final_rows(analysis)
    if fin:
        parts.append(table_html(*fin))
    parts += [_caution_html(s.caution), "</div>"]
    return "".join(parts)


def plan_html(plan: Any) -> str:
    """The notebook display of a plan: its summary and, for a group-sequential plan, the
    table of its looks with the users per arm."""
    parts = ['<div class="seqtest-plan">',
             f'<pre class="seqtest-plan">{escape(plan_summary(plan))}</pre>']
    rows = plan_table_rows(plan)
    if rows:
        parts.append(table_html(*rows))
    parts += [_caution_html(CAUTION), "</div>"]
    return "".join(parts)


def _generated(when: _dt.date | str | None) -> str:
    if when is None:
        when = _dt.date.today()
    return when if isinstance(when, str) else when.isoformat()


def report_html(analysis: Any, plan: Any = None, *, title: str | None = None,
                noun: str | None = None, generated: _dt.date | str | None = None) -> str:
    """One self-contained HTML page: the decision record of an experiment.

    Parameters
    ----------
    analysis : Analysis or dict
        The analysis (or its ``to_dict()``).
    plan : Plan or MixturePlan, optional
        Adds the plan's table and the planned boundaries to the z chart.
    title : str, optional
        The experiment's name (default ``"Experiment"``).
    noun : str, optional
        What to call the metric in sentences (see :func:`summarize`).
    generated : date or str, optional
        The date printed on the page (default: today).

    Returns
    -------
    str
        The page; it loads nothing from anywhere.
    """
    name = title or "Experiment"
    s = summarize(analysis, noun=noun)
    r = analysis_record(analysis)
    kind = "mixture (look at any time)" if r.get("plan_kind") == "mixture" \
        else "group-sequential"
    parts = ["<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
             '<meta name="viewport" content="width=device-width, initial-scale=1">',
             f"<title>{escape(name)}: decision record</title>",
             f"<style>{_STYLE}</style></head><body><main>",
             f"<h1>{escape(name)}</h1>",
             f'<p class="meta">Decision record of a {escape(kind)} experiment, '
             f"{escape(str(r.get('metric_kind') or ''))} metric on the "
             f"{escape(str(r.get('scale') or 'difference'))} scale; written by seqtest "
             f"{escape(__version__)} on {escape(_generated(generated))}.</p>",
             "<h2>Decision</h2>", _summary_html(s)]
    if s.alerts or s.notes:
        parts += ["<h2>Warnings</h2>", _warnings_html(s)]
    parts += ["<h2>Charts</h2>",
              f"<figure>{svg.z_path_svg(analysis, plan, title=name)}</figure>",
              f"<figure>{svg.effect_svg(analysis, title=name)}</figure>"]
    fin = final_rows(analysis)
    if fin:
        parts += ["<h2>Inference at the stop</h2>", table_html(*fin)]
    parts += ["<h2>Looks</h2>", table_html(*look_rows(analysis))]
    if plan is not None:
        parts += ["<h2>Plan</h2>", f'<pre class="seqtest-plan">{escape(plan_summary(plan))}'
                  "</pre>"]
        rows = plan_table_rows(plan)
        if rows:
            parts.append(table_html(*rows))
    parts += [_caution_html(s.caution), "</main></body></html>"]
    return "\n".join(parts) + "\n"


def _md_cell(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", " ")


def _md_table(headers: Sequence[str], rows: Sequence[Sequence[str]]) -> str:
    lines = ["| " + " | ".join(_md_cell(h) for h in headers) + " |",
             "|" + "|".join("---" if i == 0 else "---:" for i in range(len(headers))) + "|"]
    lines += ["| " + " | ".join(_md_cell(c) for c in row) + " |" for row in rows]
    return "\n".join(lines)


def report_markdown(analysis: Any, plan: Any = None, *, title: str | None = None,
                    noun: str | None = None, charts: Mapping[str, str] | None = None,
                    generated: _dt.date | str | None = None) -> str:
    """The report of :func:`report_html` as Markdown.

    ``charts`` maps a caption to an image path (e.g. the SVG files written beside the
    Markdown file by ``seqtest report``); they are linked as images, in order."""
    name = title or "Experiment"
    s = summarize(analysis, noun=noun)
    out = [f"# {name}", "",
           f"Decision record written by seqtest {__version__} on {_generated(generated)}.",
           "", "## Decision", ""]
    if s.alert:
        out += [f"> **Check first.** {s.alert}", ""]
    out += [" ".join([f"**{s.headline}**", s.effect, *(x for x in (s.outlook, s.caveat) if x)]),
            ""]
    if s.alerts or s.notes:
        out += ["## Warnings", ""] + [f"- {w}" for w in (*s.alerts, *s.notes)] + [""]
    if charts:
        out += ["## Charts", ""] + [f"![{cap}]({path})" for cap, path in charts.items()]
        out.append("")
    fin = final_rows(analysis)
    if fin:
        out += ["## Inference at the stop", "", _md_table(*fin), ""]
    out += ["## Looks", "", _md_table(*look_rows(analysis)), ""]
    if plan is not None:
        out += ["## Plan", "", "```", plan_summary(plan), "```", ""]
        rows = plan_table_rows(plan)
        if rows:
            out += [_md_table(*rows), ""]
    out += [f"> **Caution.** {s.caution}", ""]
    return "\n".join(out)
