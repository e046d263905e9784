"""How results are shown: the plain-language summary, tables, SVG charts, the report.

Every door shows a decision through this package, so the command line, the JSON of an
analysis, the notebook, the HTML and Markdown report and the service's pages say the
same thing with the same numbers:

- :func:`summarize` (:mod:`~seqtest.reporting.summary`): the decision in plain
  sentences, with the numbers they show; ``Analysis.to_dict()["summary"]`` is its text;
- :mod:`~seqtest.reporting.tables`: the looks, the inference at a stop, a plan's looks;
- :mod:`~seqtest.reporting.svg`: charts as inline SVG (z path, effect, simulation);
- :mod:`~seqtest.reporting.html`: the one-page report (HTML, Markdown) and the
  notebook displays;
- :mod:`~seqtest.reporting.status`: exit statuses for pipelines;
- :mod:`~seqtest.reporting.numbers` and :mod:`~seqtest.reporting.style`: how numbers
  are written and how series look (colour-blind-safe palette, shapes, dashes).

The package reads analyses, plans and simulation results by their field names (the
objects or their ``to_dict()``) and imports nothing above :mod:`seqtest.core`, so the
planning and monitoring layers can delegate their displays to it.
"""

from __future__ import annotations

from seqtest.reporting.html import (
    analysis_html,
    plan_html,
    report_html,
    report_markdown,
    table_html,
)
from seqtest.reporting.status import ExitStatus, exit_status
from seqtest.reporting.summary import (
    EffectUnits,
    Summary,
    effect_units,
    plan_summary,
    sample_ratio_looks,
    summarize,
)
from seqtest.reporting.svg import effect_svg, simulation_svg, z_path_svg
from seqtest.reporting.tables import final_rows, look_rows, plan_table_rows

__all__ = [
    "EffectUnits",
    "ExitStatus",
    "Summary",
    "analysis_html",
    "effect_svg",
    "effect_units",
    "exit_status",
    "final_rows",
    "look_rows",
    "plan_html",
    "plan_summary",
    "plan_table_rows",
    "report_html",
    "report_markdown",
    "sample_ratio_looks",
    "simulation_svg",
    "summarize",
    "table_html",
    "z_path_svg",
]
