"""seqtest: sequential testing for controlled experiments.

Group-sequential plans with error spending, monitoring of interim looks with adjusted
inference, always-valid inference by the mixture SPRT, experiments with many arms and
several metrics (:func:`experiment_plan`), and simulation of a plan's error rates. This
module is the public surface; the layout behind it is described in DEVELOPERS.md
(``core`` computes, ``planning`` designs plans, ``monitoring`` analyses looks,
``simulation`` checks plans, ``cli`` is the command line). Names are loaded on first
use, so that ``import seqtest`` (and the command line) starts fast.

    >>> import seqtest
    >>> plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=5)
    >>> plan.efficacy_z.round(3).tolist()
    [4.877, 3.357, 2.68, 2.29, 2.031]
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

from seqtest.core.version import __version__

if TYPE_CHECKING:  # the names below, for type checkers and readers
    from seqtest import mixture, spending
    from seqtest.client import Client
    from seqtest.core.errors import InputError, LookDataError, PlanDocumentError, SeqtestError
    from seqtest.core.vocabulary import CAUTION, DECISIONS, Decision
    from seqtest.monitoring.analysis import Analysis, LookResult, analyze
    from seqtest.monitoring.experiment import ExperimentAnalysis
    from seqtest.monitoring.lookfile import ArmLooks, read_arm_looks, read_looks_csv
    from seqtest.monitoring.sqllooks import arm_looks_from_sql, looks_from_sql
    from seqtest.planning.design import Plan, design
    from seqtest.planning.documents import plan_from_dict
    from seqtest.planning.experiment import ExperimentPlan, experiment_plan
    from seqtest.planning.mixture import MixturePlan, mixture_plan
    from seqtest.plotting import plot_analysis, plot_simulation
    from seqtest.reporting import ExitStatus, Summary, report_html, report_markdown, summarize

#: public name -> the module that defines it
_WHERE = {
    "CAUTION": "seqtest.core.vocabulary",
    "Client": "seqtest.client",
    "DECISIONS": "seqtest.core.vocabulary",
    "Decision": "seqtest.core.vocabulary",
    "InputError": "seqtest.core.errors",
    "LookDataError": "seqtest.core.errors",
    "PlanDocumentError": "seqtest.core.errors",
    "SeqtestError": "seqtest.core.errors",
    "Analysis": "seqtest.monitoring.analysis",
    "LookResult": "seqtest.monitoring.analysis",
    "analyze": "seqtest.monitoring.analysis",
    "ExperimentAnalysis": "seqtest.monitoring.experiment",
    "ExperimentPlan": "seqtest.planning.experiment",
    "experiment_plan": "seqtest.planning.experiment",
    "ArmLooks": "seqtest.monitoring.lookfile",
    "read_arm_looks": "seqtest.monitoring.lookfile",
    "read_looks_csv": "seqtest.monitoring.lookfile",
    "arm_looks_from_sql": "seqtest.monitoring.sqllooks",
    "looks_from_sql": "seqtest.monitoring.sqllooks",
    "Plan": "seqtest.planning.design",
    "design": "seqtest.planning.design",
    "plan_from_dict": "seqtest.planning.documents",
    "MixturePlan": "seqtest.planning.mixture",
    "mixture_plan": "seqtest.planning.mixture",
    "plot_analysis": "seqtest.plotting",
    "plot_simulation": "seqtest.plotting",
    "ExitStatus": "seqtest.reporting",
    "Summary": "seqtest.reporting",
    "report_html": "seqtest.reporting",
    "report_markdown": "seqtest.reporting",
    "summarize": "seqtest.reporting",
}
_MODULES = {"mixture", "spending"}

__all__ = [
    "CAUTION",
    "DECISIONS",
    "Analysis",
    "ArmLooks",
    "Client",
    "Decision",
    "ExitStatus",
    "ExperimentAnalysis",
    "ExperimentPlan",
    "InputError",
    "LookDataError",
    "LookResult",
    "MixturePlan",
    "Plan",
    "PlanDocumentError",
    "SeqtestError",
    "Summary",
    "__version__",
    "analyze",
    "arm_looks_from_sql",
    "design",
    "experiment_plan",
    "looks_from_sql",
    "mixture",
    "mixture_plan",
    "plan_from_dict",
    "plot_analysis",
    "plot_simulation",
    "read_arm_looks",
    "read_looks_csv",
    "report_html",
    "report_markdown",
    "spending",
    "summarize",
]
assert set(__all__) == {"__version__", *_WHERE, *_MODULES}


def __getattr__(name: str) -> Any:
    if name in _MODULES:
        module = importlib.import_module(f"seqtest.{name}")
        globals()[name] = module
        return module
    if name in _WHERE:
        value = getattr(importlib.import_module(_WHERE[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'seqtest' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))
