"""The design page's form: fields, reading them, and the library's messages per field.

The form is sent with GET (designing stores nothing, and the URL of a design can be
shared). Each field is read as text and turned into the library's argument; a value
that is not a number is refused here, in the project's message style; everything
else (ranges, combinations, names of spending functions) is checked by the library,
whose message is shown next to the field it names.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

from service import library
from service.errors import InvalidPlan

MAX_TEXT = 100


@dataclass(frozen=True)
class Field:
    name: str
    label: str
    kind: str  # number, whole, text, choice, check, list
    default: str
    help: str = ""
    choices: tuple[tuple[str, str], ...] = ()
    suggestions: tuple[str, ...] = ()


FIELDS: tuple[Field, ...] = (
    Field("alpha", "Alpha (type I error)", "number", "0.05",
          "overall, over both tails of a two-sided plan"),
    Field("sides", "Sides", "choice", "2", choices=(("2", "two-sided"), ("1", "one-sided"))),
    Field("power", "Power", "number", "0.9", "at the minimum detectable effect"),
    Field("looks", "Looks", "whole", "5", "equally spaced, 1 to 50"),
    Field("fractions", "Information fractions", "list", "",
          "optional, e.g. 0.25, 0.5, 0.75, 1; when given they set the looks"),
    Field("efficacy", "Efficacy boundary", "text", "obrien-fleming-type",
          "a spending function or a classical boundary",
          suggestions=("obrien-fleming-type", "pocock-type", "hsd:-4", "power:3",
                       "obrien-fleming", "pocock", "wang-tsiatis:0.25", "haybittle-peto")),
    Field("futility", "Futility boundary", "text", "",
          "optional beta-spending function, e.g. obrien-fleming-type",
          suggestions=("obrien-fleming-type", "pocock-type", "hsd:-2", "power:2")),
    Field("binding", "Binding futility", "check", "",
          "the efficacy boundaries assume every futility stop is obeyed"),
    Field("metric_kind", "Metric", "choice", "binary", "for the users per look",
          choices=(("binary", "binary (a rate of successes)"),
                   ("continuous", "continuous (a mean)"),
                   ("rate", "rate (events per unit of exposure)"),
                   ("", "none (boundaries only)"))),
    Field("baseline", "Baseline", "number", "0.1",
          "the control arm's rate or mean"),
    Field("mde", "Minimum detectable effect", "number", "0.01",
          "absolute, or relative to the baseline when 'relative' is ticked"),
    Field("relative", "Relative effect", "check", "",
          "the effect is a share of the baseline"),
    Field("sd", "Standard deviation", "number", "", "continuous metrics only"),
    Field("allocation", "Allocation", "number", "1", "treatment users per control user"),
)
_BY_NAME = {f.name: f for f in FIELDS}


@dataclass
class DesignForm:
    values: dict[str, str]
    errors: dict[str, str] = field(default_factory=dict)
    problem: str | None = None  # a message that names no field of the form
    submitted: bool = False


def empty_form() -> DesignForm:
    return DesignForm({f.name: f.default for f in FIELDS})


def _number(f: Field, text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        raise ValueError(f"{f.name}: got {text!r}; allowed is a number") from None
    if not math.isfinite(v):
        raise ValueError(f"{f.name}: got {text!r}; allowed is a finite number")
    return v


def _whole(f: Field, text: str) -> int:
    try:
        return int(text)
    except ValueError:
        raise ValueError(f"{f.name}: got {text!r}; allowed is a whole number") from None


def read_form(query: Mapping[str, str]) -> DesignForm:
    """The form as submitted (absent check boxes are unticked)."""
    values = {}
    for f in FIELDS:
        raw = query.get(f.name, "")
        values[f.name] = ("on" if raw else "") if f.kind == "check" else raw.strip()
    form = DesignForm(values, submitted=True)
    for f in FIELDS:
        if len(values[f.name]) > MAX_TEXT:
            form.errors[f.name] = (f"{f.name}: got {len(values[f.name])} characters; allowed "
                                   f"are at most {MAX_TEXT}")
            values[f.name] = values[f.name][:MAX_TEXT]
    return form


def inputs_of(form: DesignForm) -> dict[str, Any]:
    """The library's design arguments; a value that cannot be read is recorded in
    ``form.errors`` under its field."""
    v = form.values
    out: dict[str, Any] = {}

    def take(name: str) -> Any:
        f = _BY_NAME[name]
        text = v[name]
        if text == "":
            return None
        try:
            if f.kind == "number":
                return _number(f, text)
            if f.kind == "whole":
                return _whole(f, text)
            if f.kind == "list":
                parts = [p.strip() for p in text.replace(";", ",").split(",") if p.strip()]
                return [_number(f, p) for p in parts] or None
        except ValueError as exc:
            form.errors.setdefault(name, str(exc))
            return None
        return text

    for name in ("alpha", "power"):
        if (x := take(name)) is not None:
            out[name] = x
    out["sides"] = 1 if v["sides"] == "1" else 2
    fractions = take("fractions")
    if fractions is not None:
        out["information_fractions"] = fractions
    elif (k := take("looks")) is not None:
        out["looks"] = k
    for name in ("efficacy", "futility"):
        if v[name]:
            out[name] = v[name]
    out["binding"] = v["binding"] == "on"
    kind = v["metric_kind"]
    if kind:
        if kind not in ("binary", "continuous", "rate"):
            form.errors["metric_kind"] = (f"metric_kind: got {kind!r}; allowed are binary, "
                                          "continuous, rate, or none")
        else:
            metric: dict[str, Any] = {"kind": kind}
            for name in ("baseline", "mde", "allocation") + (("sd",) if kind == "continuous"
                                                             else ()):
                if (x := take(name)) is not None:
                    metric[name] = x
            if v["relative"] == "on":
                metric["relative"] = True
            out["metric"] = metric
    return out


def _field_of(location: list[Any]) -> str | None:
    """The form field a library message's location names (``["design", "metric",
    "baseline"]`` is the field ``baseline``)."""
    parts = [str(p) for p in location[1:]]
    if not parts:
        return None
    if parts[0] == "metric":
        if len(parts) == 1 or parts[1] == "kind":
            return "metric_kind"
        return parts[1] if parts[1] in _BY_NAME else "metric_kind"
    if parts[0] in ("information_fractions", "info_fractions"):
        return "fractions"
    return parts[0] if parts[0] in _BY_NAME else None


@dataclass(frozen=True)
class DesignResult:
    display: library.PlanDisplay
    inputs: dict[str, Any]


def design(form: DesignForm) -> DesignResult | None:
    """Design the plan of a submitted form; ``None`` with the messages in the form
    when an input is refused (here, or by the library)."""
    inputs = inputs_of(form)
    if form.errors:
        return None
    try:
        info = library.design_plan("group_sequential", inputs, ["design"])
    except InvalidPlan as exc:
        detail = (exc.details or [{}])[0]
        message = str(detail.get("message") or exc.message)
        name = _field_of(list(detail.get("location") or []))
        if name is None:
            form.problem = message
        else:
            form.errors[name] = message
        return None
    return DesignResult(library.plan_display(info), inputs)
