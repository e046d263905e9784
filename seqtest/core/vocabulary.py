"""The words every layer shares: decisions, plan kinds, metric kinds, scales, arms.

One concept has one name in Python, on the command line, in JSON and over HTTP; the
glossary in DEVELOPERS.md lists them with the old names still accepted.
"""

from __future__ import annotations

from enum import Enum
from typing import SupportsInt

__all__ = [
    "ARMS",
    "CAUTION",
    "BETTER",
    "DECISIONS",
    "Decision",
    "EXPERIMENT_KIND",
    "HYPOTHESES",
    "METRIC_KINDS",
    "PLAN_KINDS",
    "SCALES",
    "decision_from_code",
]


class Decision(str, Enum):
    """What a look (or an experiment) decides.

    The members compare equal to their values (``Decision.CONTINUE == "continue"``) and
    serialise as them, so JSON, the command line and the service carry the plain words.
    Vectorised code (the simulator, the stopping rule over many paths) uses the member's
    :attr:`code`, its position in :data:`DECISIONS`.
    """

    CONTINUE = "continue"
    STOP_EFFICACY = "stop_efficacy"
    STOP_FUTILITY = "stop_futility"
    COMPLETE = "complete_not_significant"
    #: An arm of an experiment crossed a guardrail's harm boundary (appended last so
    #: that the codes of the first release keep their meaning).
    STOP_HARM = "stop_harm"

    def __str__(self) -> str:
        return self.value

    @property
    def code(self) -> int:
        """Position in :data:`DECISIONS` (0 continue, 1 efficacy, 2 futility, 3 complete,
        4 harm)."""
        return _CODES[self]

    @property
    def terminal(self) -> bool:
        """Whether the experiment ends here whatever the plan's futility rule."""
        return self in (Decision.STOP_EFFICACY, Decision.COMPLETE, Decision.STOP_HARM)


DECISIONS: tuple[Decision, ...] = tuple(Decision)
_CODES = {d: i for i, d in enumerate(DECISIONS)}


def decision_from_code(code: SupportsInt) -> Decision:
    """The decision of a vectorised code (see :attr:`Decision.code`)."""
    return DECISIONS[int(code)]


#: Plan kinds, as written in plan documents, on the command line and in the service.
PLAN_KINDS: tuple[str, ...] = ("group_sequential", "mixture")
#: The kind of an experiment plan document (one control, 1 to 8 treatments, metrics with
#: roles); its comparisons are group-sequential plans (see
#: :mod:`seqtest.planning.experiment`). Kept apart from :data:`PLAN_KINDS`, the kinds of
#: a two-arm plan.
EXPERIMENT_KIND = "experiment"
#: Metric kinds: what the per-arm totals describe (binary: units with the outcome;
#: continuous: values per unit; rate: Poisson events over exposure; ratio: a sum over a
#: sum per unit, by the delta method; adjusted: a continuous metric adjusted for a
#: pre-period covariate; count: events per unit with a variance that does not assume
#: Poisson).
METRIC_KINDS: tuple[str, ...] = ("binary", "continuous", "rate", "ratio", "adjusted",
                                 "count")
#: Scales of an effect: treatment minus control, or treatment / control - 1.
SCALES: tuple[str, ...] = ("difference", "relative")
#: Which way of an effect is good for the metric: a higher value (sign-ups, revenue)
#: or a lower one (load time, refunds).
BETTER: tuple[str, str] = ("higher", "lower")
#: What a test against the null value (the margin) is to show: that the treatment is
#: better by more than the margin (superiority; margin 0 is the plain test) or that it
#: is not worse by more than the margin (non-inferiority).
HYPOTHESES: tuple[str, str] = ("superiority", "non_inferiority")
#: The two arms of a two-arm comparison, by role.
ARMS: tuple[str, str] = ("control", "treatment")

#: The caution every output that can lead to a decision carries.
CAUTION = ("seqtest supports, and does not replace, a qualified statistician and the "
           "rules that govern the study (for a medical trial: its protocol and its data "
           "monitoring committee).")
