"""Reading plan documents of either kind (group-sequential or mixture SPRT)."""

from __future__ import annotations

from typing import Any

__all__ = ["plan_from_dict", "check_document", "PLAN_KINDS"]

PLAN_KINDS = ("group_sequential", "mixture")


def plan_from_dict(d: dict) -> Any:
    """Read a plan document written by ``Plan.to_dict`` or ``MixturePlan.to_dict``.

    Raises
    ------
    ValueError
        When the document is not a mapping, has an unknown ``kind`` or lacks a field.
    """
    if not isinstance(d, dict):
        raise ValueError(f"plan: got {type(d).__name__}; allowed is a plan document "
                         "(a JSON object with a 'kind')")
    kind = d.get("kind")
    if kind == "group_sequential":
        from seqtest.design import Plan
        return Plan.from_dict(d)
    if kind == "mixture":
        from seqtest.mixture import MixturePlan
        return MixturePlan.from_dict(d)
    raise ValueError(f"plan.kind: got {kind!r}; allowed are {', '.join(PLAN_KINDS)}")


def check_document(d: Any, kind: str) -> None:
    """Refuse anything but a plan document of the given kind."""
    if not isinstance(d, dict) or d.get("kind") != kind:
        got = d.get("kind") if isinstance(d, dict) else type(d).__name__
        raise ValueError(f"plan: expected a document with kind {kind!r}, got {got!r}")
