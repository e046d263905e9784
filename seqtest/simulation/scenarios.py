"""Simulation scenarios: the data, traffic and looks a plan will meet, as a document.

A scenario is a small TOML (or JSON) document; ``simulations/README.md`` describes
the format with examples. It says how the data of each arm are generated (the
metric and its parameters, the true effect, the allocation), how users arrive
between looks (as planned, unevenly, or at random from day to day), which extra
looks are taken that the plan did not foresee, and how the decision rule is
followed (futility boundaries obeyed or ignored). :func:`load_scenario` reads a
file, :func:`scenario_from_dict` a parsed document; both validate every field and
raise ``ValueError`` naming the field, the value given and what is allowed.

Data models (``[data] kind``) and the analysis metric they are read with:

``"binary"``
    Each user converts with probability ``rate``. Analysed as ``binary``.
``"normal"``
    Values ``N(mean, sd**2)`` (``sd_treatment`` may differ). Analysed as
    ``continuous`` (Welch's statistic).
``"lognormal"``
    Revenue-like values: a share ``zero_share`` of users spend nothing, the others
    spend a log-normal amount whose mean and standard deviation are ``mean`` and
    ``sd``. Analysed as ``continuous``.
``"counts"``
    Events per unit of exposure (one unit per user), Poisson with mean ``rate``;
    with ``dispersion = k`` the count is gamma-mixed Poisson (negative binomial,
    variance ``m + m**2 / k``). Analysed as ``rate`` (Poisson variance), or as
    ``count`` (the per-unit counts' own variance) when the plan's metric or
    ``[analysis] kind`` says so.
``"ratio"``
    A ratio metric per user (e.g. clicks per session): each user has ``1 +
    Poisson(denominator_mean - 1)`` sessions and a clicks rate ``rate`` times a gamma
    multiplier of mean 1 and shape ``dispersion`` (users differ; none without it), and
    Poisson clicks given both. The metric is clicks over sessions, ``rate`` in the
    control arm. Analysed as ``ratio``.
``"pre_period"``
    Normal values ``N(mean, sd**2)`` with a pre-period value per user from the same
    distribution, correlated ``correlation`` with it (the treatment moves the value, not
    the pre-period one). Analysed as ``adjusted`` (or ``continuous``, to see the
    variance the covariate removes).

The true effect moves the treatment arm's mean: ``difference`` (treatment mean
minus control mean), ``relative`` (treatment mean / control mean - 1) or
``mde_multiple`` (a multiple of the effect the plan is powered for). For the
log-normal model the treatment's positive amounts are the control's scaled by the
ratio of the means (same shape); for the others only the mean moves (``sd`` stays).
"""

from __future__ import annotations

import json
import math
import numbers
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

__all__ = [
    "ANALYSIS_KIND",
    "ANALYSIS_KINDS",
    "DATA_KINDS",
    "TRAFFIC_MODES",
    "Scenario",
    "load_scenario",
    "read_document",
    "scenario_from_dict",
]

#: Data models and the metric kind of :mod:`seqtest.monitoring.metrics` each is analysed with.
ANALYSIS_KIND: dict[str, str] = {
    "binary": "binary",
    "normal": "continuous",
    "lognormal": "continuous",
    "counts": "rate",
    "ratio": "ratio",
    "pre_period": "adjusted",
}
#: Every metric kind a data model may be analysed with (the first is the default).
ANALYSIS_KINDS: dict[str, tuple[str, ...]] = {
    "binary": ("binary",),
    "normal": ("continuous",),
    "lognormal": ("continuous",),
    "counts": ("rate", "count"),
    "ratio": ("ratio",),
    "pre_period": ("adjusted", "continuous"),
}
DATA_KINDS: tuple[str, ...] = tuple(ANALYSIS_KIND)
TRAFFIC_MODES: tuple[str, ...] = ("fixed", "uneven", "random")
EFFECT_TYPES: tuple[str, ...] = ("difference", "relative", "mde_multiple")

_DATA_FIELDS: dict[str, dict[str, bool]] = {
    # field -> required
    "binary": {"rate": True},
    "normal": {"mean": True, "sd": True, "sd_treatment": False},
    "lognormal": {"mean": True, "sd": True, "zero_share": False},
    "counts": {"rate": True, "dispersion": False},
    "ratio": {"rate": True, "denominator_mean": True, "dispersion": False},
    "pre_period": {"mean": True, "sd": True, "correlation": True},
}
_TOP_FIELDS = {"name", "description", "data", "effect", "allocation", "traffic", "analysis"}
_TRAFFIC_FIELDS = {
    "fixed": {"mode", "extra_looks", "looks", "max_total"},
    "uneven": {"mode", "fractions", "extra_looks", "max_total"},
    "random": {"mode", "extra_looks", "looks", "max_total", "days", "cv", "cap", "final"},
}
_ANALYSIS_FIELDS = {"futility", "naive", "kind"}
FINAL_RULES: tuple[str, ...] = ("at_max", "scheduled")


# ---------------------------------------------------------------------------
# Field checks
# ---------------------------------------------------------------------------


def _number(where: str, value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise ValueError(f"{where}: got {value!r}; allowed is a finite number")
    x = float(value)
    if not math.isfinite(x):
        raise ValueError(f"{where}: got {value!r}; allowed is a finite number")
    return x


def _positive(where: str, value: Any) -> float:
    x = _number(where, value)
    if not x > 0:
        raise ValueError(f"{where}: got {value!r}; allowed is a number > 0")
    return x


def _mapping(where: str, value: Any) -> Mapping:
    if not isinstance(value, Mapping):
        raise ValueError(f"{where}: got {value!r}; allowed is a table of fields")
    return value


def _no_extra(where: str, d: Mapping, allowed: set[str]) -> None:
    extra = sorted(str(k) for k in set(d) - allowed)
    if extra:
        raise ValueError(f"{where}: unknown field{'s' if len(extra) > 1 else ''} "
                         f"{', '.join(extra)}; allowed are {', '.join(sorted(allowed))}")


def _fractions(where: str, value: Any, *, strictly_positive: bool = True) -> tuple[float, ...]:
    if isinstance(value, (str, bytes)) or not isinstance(value, (list, tuple)):
        raise ValueError(f"{where}: got {value!r}; allowed is a list of numbers")
    out = tuple(_number(f"{where}[{i}]", v) for i, v in enumerate(value))
    for i, v in enumerate(out):
        if strictly_positive and not v > 0:
            raise ValueError(f"{where}[{i}]: got {v!r}; allowed are fractions > 0")
    return out


# ---------------------------------------------------------------------------
# The scenario
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class Traffic:
    """How users arrive and when the looks are taken.

    Attributes
    ----------
    mode : {"fixed", "uneven", "random"}
        ``fixed``: at the plan's looks, exactly the planned number of users per arm;
        ``uneven``: at the looks given in `fractions` (of the maximum sample), exact
        counts; ``random``: users arrive as a gamma-mixed Poisson process (day-to-day
        variation of the traffic rate with coefficient of variation `cv`), split
        between the arms at random with the allocation's share.
    fractions : tuple of float
        ``uneven`` only: the look times as fractions of the maximum sample (may end
        below or above 1: under- or over-running).
    extra_looks : tuple of float
        Unplanned looks, as fractions of the maximum sample, inserted in time order.
    looks : int or None
        Number of equally spaced looks for a mixture (continuous-monitoring) plan,
        which has no looks of its own (default 100).
    max_total : int or None
        Maximum total sample over both arms (exposure, for counts); defaults to the
        plan's.
    days : float
        ``random``: planned duration in days (only the product with `cv` matters).
    cv : float
        ``random``: coefficient of variation of the daily traffic rate (0: Poisson
        arrivals).
    cap : bool
        ``random``: no users are taken beyond the maximum; the look that reaches it
        is the final look, its totals cut to exactly the maximum.
    final : {"at_max", "scheduled"}
        ``random``: ``at_max`` (default) waits at the last look until the maximum is
        reached; ``scheduled`` analyses the last look on schedule with whatever
        arrived (under-running information).
    """

    mode: str = "fixed"
    fractions: tuple[float, ...] = ()
    extra_looks: tuple[float, ...] = ()
    looks: int | None = None
    max_total: int | None = None
    days: float = 28.0
    cv: float = 0.0
    cap: bool = True
    final: str = "at_max"


@dataclass(frozen=True)
class Scenario:
    """A validated scenario document (see the module docstring).

    Attributes
    ----------
    name, description : str
    data_kind : str
        One of :data:`DATA_KINDS`.
    data : dict
        The data model's parameters for the control arm (see the module docstring).
    effect_type : {"difference", "relative", "mde_multiple"}
    effect : float
        The true effect (0 for a scenario under the null).
    allocation : float or None
        Treatment users per control user; ``None`` takes the plan's (else 1).
    traffic : Traffic
    futility : {"obey", "ignore"}
        Whether paths stop at the futility boundary. ``ignore`` shows the type I
        error of a non-binding plan whose futility stops are not followed.
    naive : bool
        Also report the naive baseline (nominal alpha at every look).
    kind : str or None
        The metric kind the data are analysed with (one of
        :data:`ANALYSIS_KINDS` for the data model); None: the plan's metric kind when
        the data allow it, else :data:`ANALYSIS_KIND`'s.
    """

    name: str
    data_kind: str
    data: dict
    effect_type: str = "difference"
    effect: float = 0.0
    allocation: float | None = None
    traffic: Traffic = field(default_factory=Traffic)
    futility: str = "obey"
    naive: bool = True
    description: str = ""
    kind: str | None = None

    @property
    def analysis_kind(self) -> str:
        """The :mod:`seqtest.monitoring.metrics` kind the data are analysed with when no
        plan says otherwise (see :meth:`analysis_kind_for`)."""
        return self.kind or ANALYSIS_KIND[self.data_kind]

    def analysis_kind_for(self, plan_kind: str | None) -> str:
        """The kind the data are analysed with under a plan whose metric is of kind
        ``plan_kind`` (None: no metric): the scenario's own, else the plan's when the
        data allow it, else the default."""
        if self.kind is not None:
            return self.kind
        if plan_kind in ANALYSIS_KINDS[self.data_kind]:
            return str(plan_kind)
        return ANALYSIS_KIND[self.data_kind]

    @property
    def is_null(self) -> bool:
        """True when there is no true effect (the rejection rate is the type I error)."""
        return self.effect == 0.0

    def control_mean(self) -> float:
        """Mean of one control user's value (binary: the rate)."""
        d = self.data
        if self.data_kind == "lognormal":
            return (1.0 - d.get("zero_share", 0.0)) * d["mean"]
        return d["rate"] if self.data_kind in ("binary", "counts", "ratio") else d["mean"]

    def to_dict(self) -> dict:
        """The scenario as a plain document (what :func:`scenario_from_dict` reads)."""
        t = self.traffic
        traffic: dict[str, Any] = {"mode": t.mode}
        if t.mode == "uneven":
            traffic["fractions"] = list(t.fractions)
        if t.extra_looks:
            traffic["extra_looks"] = list(t.extra_looks)
        if t.looks is not None:
            traffic["looks"] = t.looks
        if t.max_total is not None:
            traffic["max_total"] = t.max_total
        if t.mode == "random":
            traffic.update(days=t.days, cv=t.cv, cap=t.cap, final=t.final)
        out: dict[str, Any] = {
            "name": self.name,
            "description": self.description,
            "data": {"kind": self.data_kind, **self.data},
            "effect": {self.effect_type: self.effect},
            "traffic": traffic,
            "analysis": {"futility": self.futility, "naive": self.naive},
        }
        if self.kind is not None:
            out["analysis"]["kind"] = self.kind
        if self.allocation is not None:
            out["allocation"] = self.allocation
        return out


def _data(d: Any) -> tuple[str, dict]:
    d = _mapping("data", d)
    kind = d.get("kind")
    if kind not in _DATA_FIELDS:
        raise ValueError(f"data.kind: got {kind!r}; allowed are {', '.join(DATA_KINDS)}")
    fields = _DATA_FIELDS[kind]
    _no_extra("data", d, set(fields) | {"kind"})
    out: dict[str, float] = {}
    for name, required in fields.items():
        if name not in d:
            if required:
                raise ValueError(f"data.{name}: missing; a {kind} data model needs "
                                 f"{', '.join(f for f, r in fields.items() if r)}")
            continue
        out[name] = _number(f"data.{name}", d[name])
    if kind == "binary" and not 0 < out["rate"] < 1:
        raise ValueError(f"data.rate: got {out['rate']!r}; allowed is a rate in (0, 1)")
    if kind in ("normal", "lognormal"):
        for name in ("sd", "sd_treatment"):
            if name in out and not out[name] > 0:
                raise ValueError(f"data.{name}: got {out[name]!r}; allowed is a number > 0")
    if kind == "lognormal":
        if not out["mean"] > 0:
            raise ValueError(f"data.mean: got {out['mean']!r}; the mean amount of a "
                             "log-normal model must be > 0")
        z = out.get("zero_share", 0.0)
        if not 0 <= z < 1:
            raise ValueError(f"data.zero_share: got {z!r}; allowed is a share in [0, 1)")
    if kind == "counts":
        if not out["rate"] > 0:
            raise ValueError(f"data.rate: got {out['rate']!r}; allowed is a rate > 0")
        if "dispersion" in out and not out["dispersion"] > 0:
            raise ValueError(f"data.dispersion: got {out['dispersion']!r}; allowed is a "
                             "gamma shape > 0 (leave it out for Poisson counts)")
    if kind == "ratio":
        if not out["rate"] > 0:
            raise ValueError(f"data.rate: got {out['rate']!r}; allowed is a rate > 0")
        if not out["denominator_mean"] >= 1:
            raise ValueError(f"data.denominator_mean: got {out['denominator_mean']!r}; "
                             "allowed is a mean >= 1 (every user has at least one)")
        if "dispersion" in out and not out["dispersion"] > 0:
            raise ValueError(f"data.dispersion: got {out['dispersion']!r}; allowed is a "
                             "gamma shape > 0 (leave it out for users alike)")
    if kind == "pre_period":
        if not out["sd"] > 0:
            raise ValueError(f"data.sd: got {out['sd']!r}; allowed is a number > 0")
        if not -1 < out["correlation"] < 1:
            raise ValueError(f"data.correlation: got {out['correlation']!r}; allowed is a "
                             "correlation in (-1, 1)")
    return kind, out


def _effect(d: Any) -> tuple[str, float]:
    if d is None:
        return "difference", 0.0
    d = _mapping("effect", d)
    _no_extra("effect", d, set(EFFECT_TYPES))
    given = [k for k in EFFECT_TYPES if k in d]
    if len(given) != 1:
        raise ValueError(f"effect: got {sorted(d) or 'no field'}; give exactly one of "
                         f"{', '.join(EFFECT_TYPES)}")
    name = given[0]
    value = _number(f"effect.{name}", d[name])
    if name == "relative" and not value > -1:
        raise ValueError(f"effect.relative: got {value!r}; allowed is a number > -1")
    return name, value


def _traffic(d: Any) -> Traffic:
    if d is None:
        return Traffic()
    d = _mapping("traffic", d)
    mode = d.get("mode", "fixed")
    if mode not in TRAFFIC_MODES:
        raise ValueError(f"traffic.mode: got {mode!r}; allowed are {', '.join(TRAFFIC_MODES)}")
    _no_extra(f"traffic (mode {mode})", d, _TRAFFIC_FIELDS[mode])
    kw: dict[str, Any] = {"mode": mode}
    if mode == "uneven":
        if "fractions" not in d:
            raise ValueError("traffic.fractions: missing; uneven traffic needs the look "
                             "times as fractions of the maximum, e.g. [0.1, 0.3, 0.8, 1.0]")
        fr = _fractions("traffic.fractions", d["fractions"])
        if not fr or any(b <= a for a, b in zip(fr[:-1], fr[1:], strict=True)):
            raise ValueError(f"traffic.fractions: got {list(fr)}; allowed is a non-empty, "
                             "strictly increasing list of fractions > 0")
        kw["fractions"] = fr
    if "extra_looks" in d:
        ex = _fractions("traffic.extra_looks", d["extra_looks"])
        for i, v in enumerate(ex):
            if not v < 1:
                raise ValueError(f"traffic.extra_looks[{i}]: got {v!r}; allowed are "
                                 "fractions in (0, 1) (the last look is the plan's)")
        kw["extra_looks"] = tuple(sorted(set(ex)))
    if "looks" in d:
        v = d["looks"]
        if isinstance(v, bool) or not isinstance(v, int) or not 1 <= v <= 10_000:
            raise ValueError(f"traffic.looks: got {v!r}; allowed is a whole number from 1 "
                             "to 10000")
        kw["looks"] = int(v)
    if "max_total" in d:
        v = _number("traffic.max_total", d["max_total"])
        if not (v >= 2 and v.is_integer()):
            raise ValueError(f"traffic.max_total: got {d['max_total']!r}; allowed is a "
                             "whole number >= 2")
        kw["max_total"] = int(v)
    if mode == "random":
        if "days" in d:
            kw["days"] = _positive("traffic.days", d["days"])
        if "cv" in d:
            cv = _number("traffic.cv", d["cv"])
            if not 0 <= cv <= 10:
                raise ValueError(f"traffic.cv: got {cv!r}; allowed is a number in [0, 10]")
            kw["cv"] = cv
        if "cap" in d:
            if not isinstance(d["cap"], bool):
                raise ValueError(f"traffic.cap: got {d['cap']!r}; allowed are true and false")
            kw["cap"] = d["cap"]
        if "final" in d:
            if d["final"] not in FINAL_RULES:
                raise ValueError(f"traffic.final: got {d['final']!r}; allowed are "
                                 f"{', '.join(FINAL_RULES)}")
            kw["final"] = d["final"]
    return Traffic(**kw)


def scenario_from_dict(d: Mapping) -> Scenario:
    """Validate a parsed scenario document and return a :class:`Scenario`.

    Raises
    ------
    ValueError
        Naming the field, the value given and what is allowed.
    """
    d = _mapping("scenario", d)
    _no_extra("scenario", d, _TOP_FIELDS)
    name = d.get("name", "scenario")
    if not isinstance(name, str) or not name.strip():
        raise ValueError(f"name: got {name!r}; allowed is a non-empty string")
    desc = d.get("description", "")
    if not isinstance(desc, str):
        raise ValueError(f"description: got {desc!r}; allowed is a string")
    if "data" not in d:
        raise ValueError("data: missing; a scenario needs a [data] table with the kind of "
                         f"data ({', '.join(DATA_KINDS)}) and its parameters")
    kind, data = _data(d["data"])
    etype, evalue = _effect(d.get("effect"))
    alloc = None
    if "allocation" in d:
        alloc = _positive("allocation", d["allocation"])
        if alloc > 100:
            raise ValueError(f"allocation: got {alloc!r}; allowed is a ratio in (0, 100]")
    traffic = _traffic(d.get("traffic"))
    an = _mapping("analysis", d.get("analysis", {}))
    _no_extra("analysis", an, _ANALYSIS_FIELDS)
    fut = an.get("futility", "obey")
    if fut not in ("obey", "ignore"):
        raise ValueError(f"analysis.futility: got {fut!r}; allowed are obey and ignore")
    naive = an.get("naive", True)
    if not isinstance(naive, bool):
        raise ValueError(f"analysis.naive: got {naive!r}; allowed are true and false")
    akind = an.get("kind")
    if akind is not None and akind not in ANALYSIS_KINDS[kind]:
        raise ValueError(f"analysis.kind: got {akind!r}; {kind} data are analysed as "
                         f"{' or '.join(ANALYSIS_KINDS[kind])}")
    sc = Scenario(name=name.strip(), description=desc, data_kind=kind, data=data,
                  effect_type=etype, effect=evalue, allocation=alloc, traffic=traffic,
                  futility=fut, naive=naive, kind=akind)
    if etype != "mde_multiple":
        _check_treatment_mean(sc)
    return sc


def _check_treatment_mean(sc: Scenario) -> None:
    m_c = sc.control_mean()
    m_t = m_c * (1.0 + sc.effect) if sc.effect_type == "relative" else m_c + sc.effect
    if sc.data_kind == "binary" and not 0 < m_t < 1:
        raise ValueError(f"effect.{sc.effect_type}: gives a treatment rate of {m_t:g}; "
                         "allowed effects keep it inside (0, 1)")
    if sc.data_kind in ("counts", "lognormal", "ratio") and not m_t > 0:
        raise ValueError(f"effect.{sc.effect_type}: gives a treatment mean of {m_t:g}; "
                         "allowed effects keep it > 0")


def load_scenario(path: str | Path) -> Scenario:
    """Read and validate a scenario file (``.toml`` or ``.json``).

    Raises
    ------
    ValueError
        For a missing or unreadable file, a syntax error (with its line), or an
        invalid field.
    """
    return scenario_from_dict(read_document(path))


def read_document(path: str | Path) -> Any:
    """The parsed document of a scenario file (``.toml`` or ``.json``), not yet
    validated (:func:`load_scenario` validates it; an experiment scenario is read by
    :func:`seqtest.simulation.experiment.experiment_scenario_from_dict`).

    Raises
    ------
    ValueError
        For a missing or unreadable file, or a syntax error (with its line).
    """
    p = Path(path)
    if not p.is_file():
        raise ValueError(f"scenario: {str(p)!r} does not exist or is not a file")
    try:
        text = p.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise ValueError(f"scenario: cannot read {str(p)!r} ({exc})") from None
    if p.suffix.lower() == ".json":
        try:
            doc = json.loads(text)
        except json.JSONDecodeError as exc:
            raise ValueError(f"scenario: {str(p)!r} is not valid JSON ({exc.msg} at line "
                             f"{exc.lineno})") from None
    elif p.suffix.lower() == ".toml":
        try:
            import tomllib
        except ImportError:  # Python 3.10
            raise ValueError("scenario: reading TOML needs Python 3.11 or later; give the "
                             "scenario as JSON") from None
        try:
            doc = tomllib.loads(text)
        except tomllib.TOMLDecodeError as exc:
            raise ValueError(f"scenario: {str(p)!r} is not valid TOML ({exc})") from None
    else:
        raise ValueError(f"scenario: got {str(p)!r}; allowed are .toml and .json files")
    return doc
