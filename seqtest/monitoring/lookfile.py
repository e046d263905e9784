"""The CSV layout of looks: one row per look, per-arm columns of cumulative totals.

Column names are ``<arm>_<field>``, with arms ``control`` and ``treatment`` and the
fields of the metric kind:

=============  =============================================
kind           fields
=============  =============================================
binary         ``n``, ``successes``
continuous     ``n``, ``sum``, ``sum_sq``  (or ``n``, ``mean``, ``sd``)
rate           ``exposure``, ``events``
=============  =============================================

for example ``control_n, control_successes, treatment_n, treatment_successes``.
Also accepted: ``<field>_<arm>`` order, ``.``, ``-`` or a space as separator, any
letter case, and these alternative names: arm ``c``/``t``; ``users`` for ``n``;
``conversions`` for ``successes``; ``sumsq``/``sum_squares`` for ``sum_sq``;
``std`` for ``sd``. Optional columns ``look``, ``date`` and ``note`` are kept aside
(``look`` must then count 1, 2, 3, ...). Any other column is refused, with the list
of expected ones.
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import numpy as np

from seqtest.core.errors import LookDataError
from seqtest.monitoring.metrics import METRIC_FIELDS

__all__ = ["read_looks_csv", "looks_from_frame", "expected_columns"]

_ARMS = {"control": "control", "c": "control", "treatment": "treatment", "t": "treatment"}
_FIELD_ALIASES = {
    "n": "n", "users": "n", "successes": "successes", "conversions": "successes",
    "sum": "sum", "sum_sq": "sum_sq", "sumsq": "sum_sq", "sum_squares": "sum_sq",
    "mean": "mean", "sd": "sd", "std": "sd", "exposure": "exposure", "events": "events",
}
_EXTRA = ("look", "date", "note")
_CONTINUOUS_ALT = ("n", "mean", "sd")


def expected_columns(kind: str) -> list[str]:
    """Canonical column names for a metric kind."""
    if kind not in METRIC_FIELDS:
        raise ValueError(f"kind: got {kind!r}; allowed are {', '.join(METRIC_FIELDS)}")
    return [f"{arm}_{f}" for arm in ("control", "treatment") for f in METRIC_FIELDS[kind]]


def _parse_column(col: str) -> tuple[str, str] | None:
    key = re.sub(r"[\s.\-]+", "_", str(col).strip().lower())
    for arm_key, arm in _ARMS.items():
        if key.startswith(arm_key + "_"):
            f = _FIELD_ALIASES.get(key[len(arm_key) + 1:])
            if f:
                return arm, f
        if key.endswith("_" + arm_key):
            f = _FIELD_ALIASES.get(key[: -len(arm_key) - 1])
            if f:
                return arm, f
    return None


def looks_from_frame(frame: Any, kind: str | None = None) -> list[dict]:
    """Turn a DataFrame in the CSV layout into a list of per-look arm totals."""
    mapping: dict[str, tuple[str, str]] = {}
    unknown = []
    for col in frame.columns:
        if str(col).strip().lower() in _EXTRA:
            continue
        parsed = _parse_column(col)
        if parsed is None:
            unknown.append(str(col))
        elif parsed in mapping.values():
            other = next(c for c, v in mapping.items() if v == parsed)
            raise LookDataError(f"columns {other} and {col} both give the {parsed[1]} total; "
                                "keep one of them", arm=parsed[0], field=parsed[1])
        else:
            mapping[col] = parsed
    if unknown:
        exp = (", ".join(expected_columns(kind)) if kind else
               "; ".join(f"{k}: {', '.join(expected_columns(k))}" for k in METRIC_FIELDS))
        raise LookDataError(f"unknown column(s) {', '.join(unknown)}; expected {exp} "
                            "(plus optional look, date, note)", field=unknown[0])
    if kind is not None:
        fields = {f for _, f in mapping.values()}
        want = set(METRIC_FIELDS[kind])
        if kind == "continuous" and set(_CONTINUOUS_ALT) <= fields:
            want = set(_CONTINUOUS_ALT)
        missing = [(arm, f) for arm in ("control", "treatment") for f in sorted(want)
                   if (arm, f) not in mapping.values()]
        if missing:
            names = ", ".join(f"{a}_{f}" for a, f in missing)
            raise LookDataError(f"missing column(s) {names}; expected "
                                f"{', '.join(expected_columns(kind))}", arm=missing[0][0],
                                field=missing[0][1])
    lookcol = [c for c in frame.columns if str(c).strip().lower() == "look"]
    if lookcol:
        vals = list(frame[lookcol[0]])
        if vals != list(range(1, len(vals) + 1)):
            raise LookDataError(f"column look: got {vals}; looks must be numbered 1, 2, 3, "
                                "... in order, one row each", field="look")
    out = []
    for _, row in frame.iterrows():
        look: dict = {"control": {}, "treatment": {}}
        for col, (arm, f) in mapping.items():
            v = row[col]
            look[arm][f] = v.item() if isinstance(v, np.generic) else v
        out.append(look)
    return out


def read_looks_csv(path: str | Path, kind: str | None = None) -> list[dict]:
    """Read a CSV file of looks (layout in the module docstring)."""
    import pandas as pd
    p = Path(path)
    if not p.exists():
        raise ValueError(f"looks file: {p} does not exist")
    try:
        frame = pd.read_csv(p)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise ValueError(f"looks file: {p} is not a readable CSV ({exc})") from None
    if frame.empty:
        raise ValueError(f"looks file: {p} has no rows; give one row per look")
    return looks_from_frame(frame, kind)
