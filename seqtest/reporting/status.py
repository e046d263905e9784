"""Exit statuses of the commands that report a decision, for pipelines.

One table, used by ``seqtest analyze`` (and meant for every command that reads a
decision, such as posting a look to the service):

====  ====================================================================
code  meaning
====  ====================================================================
0     continue: no boundary crossed, keep collecting data
2     usage or input error (bad option, unreadable file, invalid totals)
3     stop: efficacy or futility (binding, or advised when non-binding)
4     sample-ratio mismatch at a look: find the cause before acting
5     complete: the final look was reached without significance
====  ====================================================================

A sample-ratio mismatch (4) takes precedence over the decision, because the decision
rests on arms that may not be comparable. Status 1 is left to unexpected failures
(Python's own), and 130 means interrupted.
"""

from __future__ import annotations

from enum import IntEnum
from typing import Any

from seqtest.reporting.summary import analysis_record, sample_ratio_looks

__all__ = ["ExitStatus", "exit_status"]


class ExitStatus(IntEnum):
    """Exit statuses of commands that report a decision (see the module docstring)."""

    CONTINUE = 0
    USAGE_ERROR = 2
    STOP = 3
    SAMPLE_RATIO_MISMATCH = 4
    COMPLETE = 5


def exit_status(analysis: Any) -> ExitStatus:
    """The exit status of an analysis (an ``Analysis`` or its ``to_dict()``)."""
    r = analysis_record(analysis)
    if sample_ratio_looks(r):
        return ExitStatus.SAMPLE_RATIO_MISMATCH
    decision = r.get("decision")
    if decision in ("stop_efficacy", "stop_futility"):
        return ExitStatus.STOP
    if decision == "complete_not_significant":
        return ExitStatus.COMPLETE
    return ExitStatus.CONTINUE
