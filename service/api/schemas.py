"""Request and response bodies (pydantic) of the HTTP service.

These check the *shape* of requests (types, finite numbers, lengths, known
keys). Whether totals make sense for a metric, and everything statistical, is
checked by the seqtest library, whose messages the service passes on.
"""

from __future__ import annotations

import math
from typing import Annotated, Any, Literal

from pydantic import (
    AllowInfNan,
    BaseModel,
    ConfigDict,
    Field,
    PlainValidator,
    Strict,
    StringConstraints,
    WithJsonSchema,
    field_validator,
    model_validator,
)

from service.library import (
    DESIGN_INPUTS,
    DOCUMENT_KINDS,
    FRACTION_BASES,
    MAX_LOOKS,
    METRIC_KINDS,
    NAME_PATTERN,
)

MetricKind = Literal[METRIC_KINDS]  # type: ignore[valid-type]
FractionBasis = Literal[FRACTION_BASES]  # type: ignore[valid-type]
PlanKind = Literal[DOCUMENT_KINDS]  # type: ignore[valid-type]

ArmName = Annotated[
    str,
    StringConstraints(pattern=NAME_PATTERN),
    Field(description="1 to 64 letters, digits, '_', '.', '-', starting with a letter or digit"),
]
FieldName = Annotated[str, StringConstraints(min_length=1, max_length=64)]
# JSON numbers only (no strings, no booleans), and never NaN or Infinity.
Number = Annotated[float, Strict(), AllowInfNan(False)]


_JSON_TYPES = {
    bool: "true/false", str: "text", type(None): "null", list: "a list", dict: "an object"
}


def _total(value: Any) -> int | float:
    """A total as posted: whole numbers stay whole; never NaN, Infinity or text."""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        got = _JSON_TYPES.get(type(value), type(value).__name__)
        raise ValueError(f"a total must be a JSON number, got {got}")
    if isinstance(value, int):
        if abs(value) <= 10**15:
            return value
        try:
            value = float(value)
        except OverflowError:
            raise ValueError("the number is too large for a total") from None
    if not math.isfinite(value):
        raise ValueError("a total must be a finite number (NaN and Infinity are not allowed)")
    return value


Total = Annotated[int | float, PlainValidator(_total), WithJsonSchema({"type": "number"})]


def _total_or_arm(value: Any) -> int | float | dict[str, int | float]:
    """A total, or (a look of an experiment with several metrics) an arm's totals."""
    if not isinstance(value, dict):
        return _total(value)
    if len(value) > 16:
        raise ValueError(f"got {len(value)} totals; allowed is at most 16 per arm")
    out: dict[str, int | float] = {}
    for name, v in value.items():
        if not 1 <= len(name) <= 64:
            raise ValueError(f"{name[:64]!r}: a total's name has 1 to 64 characters")
        try:
            out[name] = _total(v)
        except ValueError as exc:
            raise ValueError(f"{name}: {exc}") from None
    return out


TotalOrArm = Annotated[
    int | float | dict[str, int | float], PlainValidator(_total_or_arm),
    WithJsonSchema({"oneOf": [{"type": "number"}, {
        "type": "object", "additionalProperties": {"type": "number"}, "maxProperties": 16,
        "description": "an arm's totals, in a look of an experiment given per metric"}]})]

STATES = ("planned", "running", "stopped", "completed")
State = Literal[STATES]  # type: ignore[valid-type]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid")


class Arms(_Strict):
    """Names of the two arms; totals are posted under these names."""

    control: ArmName = "control"
    treatment: ArmName = "treatment"

    @model_validator(mode="after")
    def _distinct(self) -> Arms:
        if self.control == self.treatment:
            raise ValueError(
                f"arms: control and treatment are both named {self.control!r}; "
                "give two different names"
            )
        return self


class DesignInputs(_Strict):
    """Inputs from which the library designs the plan; omitted fields take its defaults.

    ``kind`` "group_sequential" (default) calls ``seqtest.design``; "mixture" calls
    ``seqtest.mixture.mixture_plan`` (continuous monitoring by the mixture SPRT).
    """

    kind: PlanKind | None = Field(
        default=None, description="group_sequential (default; for an amendment: the "
        "current version's kind), mixture, or experiment (`seqtest.experiment_plan`: many "
        "arms, several metrics)")
    alpha: Number | None = None
    sides: Annotated[int, Strict()] | None = None
    power: Number | None = None
    looks: Annotated[int, Strict(), Field(ge=1, le=MAX_LOOKS)] | None = Field(
        default=None, description=f"number of equally spaced looks, 1 to {MAX_LOOKS}")
    information_fractions: Annotated[list[Number], Field(min_length=1,
                                                         max_length=MAX_LOOKS)] | None = None
    info_fractions: Annotated[list[Number], Field(min_length=1, max_length=MAX_LOOKS)] | None = \
        Field(default=None, deprecated=True,
              description="deprecated name of information_fractions (one release)")
    efficacy: Annotated[str, StringConstraints(max_length=100)] | dict[str, Any] | None = Field(
        default=None,
        description="spending function or boundary name, e.g. 'obrien-fleming-type', "
        "'pocock-type', 'hsd:-4', 'power:3', 'pocock', 'obrien-fleming', "
        "'wang-tsiatis:0.25', 'haybittle-peto'",
    )
    futility: Annotated[str, StringConstraints(max_length=100)] | dict[str, Any] | None = Field(
        default=None, description="beta-spending function name for a futility boundary"
    )
    binding: Annotated[bool, Strict()] | None = None
    metric: dict[str, Any] | None = Field(
        default=None,
        description="metric for the sample size, e.g. "
        "{'kind': 'binary', 'baseline': 0.12, 'mde': 0.015}",
    )
    mde: Number | None = Field(default=None, description="mixture: minimum detectable effect")
    max_n_per_arm: Annotated[int, Strict()] | None = Field(
        default=None, description="mixture: planned cap on the larger arm"
    )
    unit_variance: Number | None = Field(default=None, description="mixture only")
    tau2: Number | None = Field(default=None, description="mixture: mixing variance")
    scale: Literal["difference", "relative"] | None = Field(
        default=None, description="mixture only"
    )
    arms: Annotated[list[ArmName], Field(min_length=2, max_length=9)] | \
        Annotated[int, Strict(), Field(ge=2, le=9)] | None = Field(
        default=None, description="experiment: the arms' names, the control first (2 to "
        "9), or their number")
    metrics: Annotated[list[dict[str, Any]], Field(min_length=1, max_length=10)] | \
        dict[str, Any] | None = Field(
        default=None, description="experiment: the metrics, each with name, role (primary "
        "or guardrail), the direction in which it is better, and its sizing description "
        "(kind, baseline, mde, ...)")
    allocations: Annotated[list[Number], Field(min_length=1, max_length=8)] | Number | \
        dict[str, Number] | None = Field(
        default=None, description="experiment: users per control user of each treatment")
    method: Literal["graphical", "dunnett"] | None = Field(
        default=None, description="experiment: how the primaries' family-wise error is split")
    weights: Annotated[list[Number], Field(max_length=80)] | dict[str, Number] | None = Field(
        default=None, description="experiment: the graph's weight of each hypothesis")
    transitions: Annotated[list[Annotated[list[Number], Field(max_length=80)]],
                           Field(max_length=80)] | None = Field(
        default=None, description="experiment: the graph's transition matrix")
    power_for: Literal["each", "any"] | None = Field(
        default=None, description="experiment: power for each comparison, or for any arm")

    @model_validator(mode="after")
    def _fields_of_kind(self) -> DesignInputs:
        if "info_fractions" in self.model_fields_set:
            if "information_fractions" in self.model_fields_set:
                raise ValueError("design: give information_fractions only (info_fractions "
                                 "is its deprecated name)")
        if self.kind is None:
            return self  # checked against the kind it ends up with, by the library
        allowed = DESIGN_INPUTS[self.kind]
        given = {"information_fractions" if f == "info_fractions" else f
                 for f in self.model_fields_set}
        wrong = [f for f in given if f != "kind" and f not in allowed]
        if wrong:
            raise ValueError(
                f"design: {', '.join(sorted(wrong))} does not apply to a {self.kind} plan; "
                f"its inputs are {', '.join(allowed)}"
            )
        return self

    def arguments(self) -> dict[str, Any]:
        """Keyword arguments for the library's design function (only the fields given;
        the deprecated ``info_fractions`` under its new name)."""
        args = self.model_dump(exclude_unset=True, exclude={"kind"})
        if "info_fractions" in args:
            args["information_fractions"] = args.pop("info_fractions")
        return args

    def deprecations(self) -> list[str]:
        if "info_fractions" in self.model_fields_set:
            return ["design.info_fractions: deprecated name; use design.information_fractions "
                    "(the old name is accepted for one release)"]
        return []


class _PlanChoice(_Strict):
    plan: dict[str, Any] | None = Field(
        default=None, description="a plan document as written by `seqtest plan --json` "
        "(kind group_sequential, mixture, or experiment: many arms and several metrics, "
        "from `seqtest.experiment_plan(...).to_dict()`)"
    )
    design: DesignInputs | None = Field(
        default=None, description="inputs from which the service designs the plan"
    )

    @model_validator(mode="after")
    def _one_plan(self) -> _PlanChoice:
        if (self.plan is None) == (self.design is None):
            raise ValueError(
                "give exactly one of 'plan' (a plan document) or 'design' (inputs to design it)"
            )
        return self


class ExperimentCreate(_PlanChoice):
    name: Annotated[str, StringConstraints(min_length=1, max_length=200, strip_whitespace=True)]
    description: Annotated[str, StringConstraints(max_length=2000)] = ""
    metric_kind: MetricKind | None = Field(
        default=None,
        description="kind of metric the totals describe: binary, continuous or rate "
        "(default: the plan's metric kind)",
    )
    metric: MetricKind | None = Field(
        default=None, deprecated=True,
        description="deprecated name of metric_kind (accepted for one release; the answer "
        "then carries a Deprecation header and a note in 'deprecations')",
    )
    arms: Arms | Annotated[list[ArmName], Field(min_length=2, max_length=9)] = Field(
        default_factory=Arms,
        description="the arms' names: {control, treatment}, or a list with the control "
        "first; an experiment plan names its arms itself (given, they must be the plan's)")
    allocation: Number = Field(
        default=1.0,
        gt=0,
        le=100,
        description="planned ratio of treatment to control units (1 = equal split)",
    )
    max_n: Number | None = Field(
        default=None,
        gt=0,
        description="maximum total sample over both arms (exposure for rates); needed "
        "when the plan has no metric to size it",
    )
    fraction_basis: FractionBasis | None = Field(
        default=None,
        description="how information fractions are measured: by sample (default) or by "
        "statistical information",
    )
    fraction: FractionBasis | None = Field(
        default=None, deprecated=True,
        description="deprecated name of fraction_basis (accepted for one release)")

    @model_validator(mode="after")
    def _old_names(self) -> ExperimentCreate:
        for old, new in (("metric", "metric_kind"), ("fraction", "fraction_basis")):
            if old in self.model_fields_set and new in self.model_fields_set:
                raise ValueError(f"give {new} only ({old} is its deprecated name)")
        return self

    def deprecations(self) -> list[str]:
        notes = []
        for old, new in (("metric", "metric_kind"), ("fraction", "fraction_basis")):
            if old in self.model_fields_set:
                notes.append(f"{old}: deprecated name; use {new} (the old name is accepted "
                             "for one release)")
        if self.design is not None:
            notes += self.design.deprecations()
        return notes


class AmendmentCreate(_PlanChoice):
    reason: Annotated[str, StringConstraints(min_length=1, max_length=2000, strip_whitespace=True)]
    max_n: Number | None = Field(
        default=None,
        gt=0,
        description="a new maximum total sample over both arms (exposure for rates), for "
        "plans without a metric to size them; default: the experiment's",
    )

    def deprecations(self) -> list[str]:
        return self.design.deprecations() if self.design is not None else []


class LookCreate(_Strict):
    totals: Annotated[
        dict[ArmName, Annotated[dict[FieldName, TotalOrArm], Field(max_length=16)]],
        Field(max_length=10),
    ] = Field(description="cumulative totals per arm name, since the start of the "
              "experiment: {arm: {total: number}}; for an experiment plan (many arms) "
              "{arm: totals} with one metric, or {metric: {arm: totals}}")
    final: Annotated[bool, Strict()] = Field(
        default=False,
        description="true for the last look: it spends whatever error is left",
    )
    daily_traffic: Number | None = Field(
        default=None,
        gt=0,
        description="units (or exposure) per day over both arms, for the projection in days",
    )

    @field_validator("totals")
    @classmethod
    def _non_empty(cls, v: dict) -> dict:
        if not v:
            raise ValueError("totals: give the cumulative totals of both arms")
        return v


# ----------------------------------------------------------------- responses


class BoundaryRow(BaseModel):
    look: int
    information_fraction: float | None = None
    efficacy_z: float | None = None
    futility_z: float | None = None
    p_threshold: float | None = Field(
        default=None, description="the p-value a look must reach to stop for efficacy "
        "(the efficacy boundary on the p scale)")
    nominal_p: float | None = Field(default=None, deprecated=True,
                                    description="deprecated name of p_threshold")
    cumulative_alpha: float | None = None
    n_control: int | None = Field(default=None, description="users (exposure for rates) "
                                  "in the control arm the plan expects by this look")
    n_treatment: int | None = Field(default=None, description="the same for the treatment")
    arm: str | None = Field(default=None, description="experiment plans: the treatment arm "
                            "of the comparison (null for two-arm plans)")
    metric: str | None = Field(default=None, description="experiment plans: its metric")
    role: Literal["primary", "guardrail"] | None = Field(
        default=None, description="experiment plans: what the metric is for")


class PlanOut(BaseModel):
    version: int
    kind: str
    document: dict[str, Any]
    boundaries: list[BoundaryRow] | None
    source: dict[str, Any]
    reason: str | None
    after_look: int = Field(description="looks already recorded when this version was made")
    recorded_at: str
    recorded_by: str


class ExperimentMetric(BaseModel):
    """A metric of an experiment plan."""

    name: str
    role: Literal["primary", "guardrail"]
    metric_kind: str


class ExperimentSummary(BaseModel):
    id: str
    name: str
    description: str
    metric_kind: str = Field(description="the kind of the metric the totals describe (an "
                             "experiment plan: its first primary metric's; see metrics)")
    metric: str = Field(deprecated=True, description="deprecated name of metric_kind")
    arms: Arms | list[str] = Field(description="two-arm plans: {control, treatment}; "
                                   "experiment plans: the arms' names, the control first")
    allocations: dict[str, float] | None = Field(
        default=None, description="experiment plans: users per control user of each "
        "treatment (null for two-arm plans)")
    metrics: list[ExperimentMetric] | None = Field(
        default=None, description="experiment plans: the metrics, primaries and guardrails "
        "(null for two-arm plans)")
    allocation: float | None = Field(description="planned treatment units per control "
                                     "unit (an experiment plan: the treatments' common "
                                     "allocation, null when they differ)")
    max_n: float | None
    fraction_basis: str | None
    fraction: str | None = Field(deprecated=True,
                                 description="deprecated name of fraction_basis")
    state: State
    decision: str | None
    look_count: int = Field(description="number of looks recorded")
    looks: int = Field(deprecated=True, description="deprecated name of look_count")
    plan_version: int
    created_at: str
    created_by: str
    updated_at: str


LookTotals = dict[str, dict[str, int | float]] | dict[str, dict[str, dict[str, int | float]]]


class LookOut(BaseModel):
    experiment_id: str
    look: int
    plan_version: int
    final: bool
    totals: LookTotals = Field(description="as posted: per arm name; an experiment plan's "
                               "per arm, or per metric and arm")
    decision: str
    state: State
    recorded_at: str
    recorded_by: str
    result: dict[str, Any] | None = Field(
        description="the monitor's row for this look; an experiment plan's: one row per "
        "comparison still analysed, keyed 'arm/metric'")
    analysis: dict[str, Any] = Field(
        description="everything the monitor computed at this look; an experiment plan's: "
        "decision, reason, reason_text, arms (per-arm decision and state), comparisons "
        "(each with its looks), srm, warnings, caution")
    arm_states: dict[str, State] | None = Field(
        default=None, description="experiment plans: each treatment arm's state after this "
        "look (running, stopped, completed); null for two-arm plans")


class LookSummary(BaseModel):
    look: int
    plan_version: int
    final: bool
    totals: LookTotals
    decision: str
    recorded_at: str
    recorded_by: str
    result: dict[str, Any] | None


class Page(BaseModel):
    offset: int
    limit: int
    total: int


class ExperimentOut(ExperimentSummary):
    plan: PlanOut = Field(description="the plan version in force")
    plan_versions: list[PlanOut] = Field(
        description="the versions of the plan on this page (versions_offset, versions_limit), "
        "oldest first; versions after the first are amendments, each with its reason, who "
        "recorded it and when"
    )
    plan_versions_page: Page
    looks_recorded: list[LookSummary] = Field(
        description="the looks on this page (looks_offset, looks_limit), in order")
    looks_page: Page
    analysis: dict[str, Any] | None = Field(
        description="the analysis at the latest look (null before the first): the library's "
        "fields as they are, its 'looks' holding the stored rows of the looks on this page"
    )
    current: dict[str, Any] | None = Field(
        deprecated=True, description="deprecated name of analysis (kept one release)")
    arm_states: dict[str, State] | None = Field(
        default=None, description="experiment plans: each treatment arm's state after the "
        "latest look (running, stopped, completed); null for two-arm plans and before the "
        "first look")


class ExperimentCreated(ExperimentSummary):
    plan: PlanOut
    deprecations: list[str] | None = None


class ExperimentList(BaseModel):
    experiments: list[ExperimentSummary]
    total: int
    limit: int
    offset: int


class AmendmentOut(BaseModel):
    experiment_id: str
    state: State
    max_n: float | None
    plan: PlanOut
    deprecations: list[str] | None = None


class Health(BaseModel):
    status: Literal["ok"]
    database: str
    writable: bool
    schema_version: int
    version: str


class ErrorDetail(BaseModel):
    location: list[str | int]
    message: str
    look: int | None = None
    arm: str | None = None
    metric: str | None = None
    field: str | None = None


class ErrorBody(BaseModel):
    code: str
    message: str
    details: list[ErrorDetail] | None = None


class Error(BaseModel):
    error: ErrorBody
