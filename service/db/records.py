"""Rows of the service's tables as frozen dataclasses (no statistics here)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any


@dataclass(frozen=True)
class Principal:
    """Who is calling: the team and the API key used."""

    team_id: str
    team_name: str
    key_id: str
    key_label: str


@dataclass(frozen=True)
class KeyRecord:
    id: str
    team_id: str
    team_name: str
    label: str
    created_at: str
    revoked_at: str | None


@dataclass(frozen=True)
class Experiment:
    id: str
    team_id: str
    name: str
    description: str
    metric_kind: str
    control_arm: str
    treatment_arm: str
    allocation: float
    max_n: float | None
    fraction_basis: str | None
    plan_version: int
    look_count: int
    state: str
    decision: str | None
    created_at: str
    created_by: str
    updated_at: str
    # an experiment plan's arms ({"name", "allocation"}, the control first) and metrics
    # ({"name", "role", "metric_kind"}); None for a two-arm experiment
    arms: list[dict[str, Any]] | None = None
    metrics: list[dict[str, Any]] | None = None

    @property
    def is_experiment_plan(self) -> bool:
        """Many arms and several metrics (a plan of kind ``experiment``)."""
        return self.arms is not None


@dataclass(frozen=True)
class PlanVersion:
    version: int
    kind: str
    document: dict[str, Any]
    source: dict[str, Any]
    reason: str | None
    after_look: int
    recorded_at: str
    recorded_by: str
    boundaries: list[dict[str, Any]] | None  # None: not stored (a v2 row) or no looks
    boundaries_stored: bool


@dataclass(frozen=True)
class Look:
    """A stored look: its totals (keyed by role), its own row of the analysis and
    the look-level summary (the analysis without its rows)."""

    number: int
    plan_version: int
    totals: dict[str, Any]
    final: bool
    decision: str
    state: str | None  # the experiment's state after this look (None for v2 rows)
    result: dict[str, Any] | None
    summary: dict[str, Any]
    recorded_at: str
    recorded_by: str


@dataclass(frozen=True)
class Replay:
    """A stored answer to an idempotent request."""

    request_hash: str
    status_code: int
    body: dict[str, Any] | None  # None: rebuild the answer from the look referenced
    experiment_id: str | None
    look_number: int | None
    created_at: str
