"""Exit statuses of the commands that report a decision, for pipelines.

One table, used by ``seqtest analyze`` and ``seqtest post`` (and meant for every
command that reads a decision):

====  ====================================================================
code  meaning
====  ====================================================================
0     continue: no boundary crossed, keep collecting data
2     usage or input error (bad option, unreadable file, invalid totals)
3     stop: efficacy or futility (binding, or advised when non-binding); for an
      experiment with several arms: an arm won, an arm stopped for harm, or all
      arms stopped
4     sample-ratio mismatch at a look: find the cause before acting
5     complete: the final look was reached without significance
6     service error: the service could not be reached, timed out, or failed
      (5xx) through the retries; looks acknowledged before it are stored, and
      running the same command again posts nothing twice
====  ====================================================================

A sample-ratio mismatch (4) takes precedence over the decision, because the decision
rests on arms that may not be comparable. Status 1 is left to unexpected failures
(Python's own), and 130 means interrupted.
"""

from __future__ import annotations

from enum import IntEnum
from typing import Any

from seqtest.core.vocabulary import EXPERIMENT_KIND
from seqtest.reporting.summary import analysis_record, sample_ratio_looks

__all__ = ["ExitStatus", "exit_status"]


class ExitStatus(IntEnum):
    """Exit statuses of commands that report a decision (see the module docstring)."""

    CONTINUE = 0
    USAGE_ERROR = 2
    STOP = 3
    SAMPLE_RATIO_MISMATCH = 4
    COMPLETE = 5
    SERVICE_ERROR = 6


_STOPS = ("stop_efficacy", "stop_futility", "stop_harm")


def _mismatch_looks(r: dict) -> list[int]:
    if r.get("kind") == EXPERIMENT_KIND:
        # an experiment's check is one chi-square over all its arms per look
        return [int(s["look"]) for s in r.get("srm") or [] if s.get("mismatch")]
    return sample_ratio_looks(r)


def exit_status(analysis: Any) -> ExitStatus:
    """The exit status of an analysis (an ``Analysis``, an ``ExperimentAnalysis`` or
    the ``to_dict()`` of either)."""
    r = analysis_record(analysis)
    if _mismatch_looks(r):
        return ExitStatus.SAMPLE_RATIO_MISMATCH
    decision = r.get("decision")
    if decision in _STOPS:
        return ExitStatus.STOP
    if decision == "complete_not_significant":
        return ExitStatus.COMPLETE
    return ExitStatus.CONTINUE
