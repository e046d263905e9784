"""The exceptions seqtest raises: one tree, rooted at :class:`SeqtestError`.

Every error about something the caller gave is an :class:`InputError`, which is also a
``ValueError`` so that ``except ValueError`` keeps working; its message names the
argument or field, what was given and what is allowed.
"""

from __future__ import annotations

__all__ = ["InputError", "LookDataError", "PlanDocumentError", "SeqtestError"]


class SeqtestError(Exception):
    """Base of every exception seqtest raises on purpose."""


class InputError(SeqtestError, ValueError):
    """An argument, file or document the caller must change."""


class PlanDocumentError(InputError):
    """A plan document that cannot be used: malformed, or its numbers disagree with
    its inputs.

    Attributes
    ----------
    field : str or None
        Dotted path of the field at fault, e.g. ``"computed.efficacy_z[2]"``.
    """

    def __init__(self, message: str, *, field: str | None = None) -> None:
        super().__init__(message)
        self.field = field


class LookDataError(InputError):
    """Refused look data.

    Attributes
    ----------
    look : int or None
        1-based number of the look at fault (None when not about one look).
    arm : str or None
        Arm at fault (its role or the name given).
    field : str or None
        Total at fault, e.g. ``"successes"``.
    metric : str or None
        Metric at fault, for an experiment with named metrics (None otherwise).
    detail : str
        What is wrong, without the location prefix.
    """

    def __init__(
        self,
        detail: str,
        *,
        look: int | None = None,
        arm: str | None = None,
        field: str | None = None,
        metric: str | None = None,
    ) -> None:
        self.look = look
        self.arm = arm
        self.field = field
        self.metric = metric
        self.detail = detail
        where = []
        if look is not None:
            where.append(f"look {look}")
        if arm is not None:
            where.append(f"arm {arm}")
        if field is not None:
            where.append(f"field {field}")
        super().__init__(f"{', '.join(where)}: {detail}" if where else detail)
