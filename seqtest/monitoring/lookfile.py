"""Tables of looks: CSV files, DataFrames and query results, in two layouts.

A table holds the cumulative totals of each arm at each look. Two layouts are read:

**wide**: one row per look, one column per arm and total, named ``<arm>_<total>``::

    control_n, control_successes, rank_v1_n, rank_v1_successes

**long**: one row per look and arm, with an ``arm`` column naming the arm and one
column per total::

    look, arm,     n,    successes
    1,    control, 1000, 100
    1,    rank_v1, 1000, 112

The totals of each metric kind are those of
:data:`seqtest.monitoring.metrics.METRIC_FIELDS` (binary: ``n``, ``successes``;
continuous: ``n``, ``sum``, ``sum_sq`` or ``n``, ``mean``, ``sd``; rate: ``exposure``,
``events`` and optionally ``events_sq``; ratio: ``n``, ``numerator``, ``denominator``,
``numerator_sq``, ``denominator_sq``, ``cross``; adjusted: ``n``, ``sum``, ``sum_sq``,
``covariate``, ``covariate_sq``, ``cross``; count: ``n``, ``events``, ``events_sq``).
Names are read in any letter case with ``_``, ``.``, ``-`` or a space
between words; the wide layout also takes ``<total>_<arm>``. Other names accepted for a
total are in :data:`FIELD_ALIASES` (``users`` for ``n``, ``conversions`` for
``successes``, ...), and in the wide layout ``c`` and ``t`` for ``control`` and
``treatment`` when those are the only arms. Optional columns ``look``, ``date`` and
``note`` are kept aside; in the wide layout ``look`` must count 1, 2, 3, ... row by row,
in the long layout it groups the rows into looks (numbered 1, 2, 3, ... without gaps,
rows in any order), or, without a ``look`` column, the sorted distinct values of
``date`` do.

**Arms** are named by the data: the column names (wide) or the values of the ``arm``
column (long). The control is the arm named ``control`` unless ``control=`` names
another. **Other column names** are mapped with ``columns={column: target}``, a target
being ``"ARM.TOTAL"`` (wide layout, e.g. ``"control.n"``), a total alone (long layout,
e.g. ``"n"``), ``"look"``, ``"arm"``, ``"date"``, ``"note"``, or ``None`` / ``"-"`` to
ignore the column. On the command line the same mapping is ``--column NAME=TARGET``
(repeatable) and ``--control ARM`` (see :func:`column_mapping`).

:func:`read_arm_looks` returns an :class:`ArmLooks`: the looks keyed by arm name, for
any number of arms. Two-arm analyses take :meth:`ArmLooks.two_arm`, the looks keyed by
the roles ``control`` and ``treatment`` (:func:`looks_from_frame` and
:func:`read_looks_csv` do both steps); an experiment plan (many arms) takes the table
itself, or :meth:`ArmLooks.by_arm`. Every refusal names the look, the arm, the total
and the column at fault and says what is allowed; nothing is returned half-read.
"""

from __future__ import annotations

import decimal
import numbers
import re
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from seqtest.core.errors import InputError, LookDataError
from seqtest.core.vocabulary import ARMS
from seqtest.monitoring.metrics import (
    ALTERNATIVE_FIELDS,
    METRIC_FIELDS,
    OPTIONAL_FIELDS,
    validate_looks,
)

__all__ = [
    "FIELD_ALIASES",
    "LAYOUTS",
    "ArmLooks",
    "column_mapping",
    "columns_help",
    "expected_columns",
    "frame_from_csv",
    "looks_from_frame",
    "read_arm_looks",
    "read_looks_csv",
]

#: The layouts of a table of looks.
LAYOUTS: tuple[str, ...] = ("wide", "long")

#: Every name accepted for a total -> the total (the canonical names map to themselves).
FIELD_ALIASES: dict[str, str] = {
    **{f: f for fields in (*METRIC_FIELDS.values(), *ALTERNATIVE_FIELDS.values(),
                           *OPTIONAL_FIELDS.values())
       for f in fields},
    "users": "n",
    "conversions": "successes",
    "sumsq": "sum_sq",
    "sum_squares": "sum_sq",
    "std": "sd",
}

# Columns kept aside (not totals), and the column naming the arm in the long layout.
_EXTRA = ("look", "date", "note")
_ARM_COLUMN = "arm"
# Short arm names of the wide layout, read as the roles when they are the only arms.
_SHORT_ARMS = {"c": "control", "t": "treatment"}
_IGNORE = "-"
# Dates written as text order the looks only when written year first.
_ISO_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}([ T][0-9:.+\-Z]*)?$")


# ---------------------------------------------------------------------------
# Names
# ---------------------------------------------------------------------------

def name_key(name: object) -> str:
    """A name compared without letter case and with one separator between words."""
    key = re.sub(r"[\s.\-_]+", "_", str(name).strip().lower())
    return key.strip("_")


def _fields_of(kind: str) -> tuple[str, ...]:
    return METRIC_FIELDS[kind] + tuple(f for f in (*ALTERNATIVE_FIELDS.get(kind, ()),
                                                   *OPTIONAL_FIELDS.get(kind, ()))
                                       if f not in METRIC_FIELDS[kind])


def _totals_text(kind: str) -> str:
    text = ", ".join(METRIC_FIELDS[kind])
    if kind in ALTERNATIVE_FIELDS:
        text += f" (or {', '.join(ALTERNATIVE_FIELDS[kind])})"
    if kind in OPTIONAL_FIELDS:
        text += f", and optionally {', '.join(OPTIONAL_FIELDS[kind])}"
    return text


def expected_columns(kind: str, arms: Sequence[str] = ARMS, layout: str = "wide"
                     ) -> list[str]:
    """Canonical column names for a metric kind.

    ``layout="wide"``: ``<arm>_<total>`` for each of `arms` (default: control and
    treatment); ``layout="long"``: ``look, arm`` and the totals.
    """
    if kind not in METRIC_FIELDS:
        raise InputError(f"kind: got {kind!r}; allowed is one of {', '.join(METRIC_FIELDS)}")
    if layout == "long":
        return ["look", _ARM_COLUMN, *METRIC_FIELDS[kind]]
    if layout != "wide":
        raise InputError(f"layout: got {layout!r}; allowed is one of {', '.join(LAYOUTS)}")
    return [f"{arm}_{f}" for arm in arms for f in METRIC_FIELDS[kind]]


def columns_help(width: int = 79) -> str:
    """The accepted columns, as the command line's help shows them, generated from
    :data:`~seqtest.monitoring.metrics.METRIC_FIELDS`,
    :data:`~seqtest.monitoring.metrics.ALTERNATIVE_FIELDS` and :data:`FIELD_ALIASES`."""
    import textwrap

    label = max(len(k) for k in METRIC_FIELDS) + 4

    def rows(layout: str) -> list[str]:
        out = []
        for kind in METRIC_FIELDS:
            line = ", ".join(expected_columns(kind, layout=layout))
            if kind in ALTERNATIVE_FIELDS:
                line += f" (or {', '.join(ALTERNATIVE_FIELDS[kind])} for "
                line += f"{', '.join(METRIC_FIELDS[kind])})"
            if kind in OPTIONAL_FIELDS:
                line += f" (optional: {', '.join(OPTIONAL_FIELDS[kind])})"
            out.append(textwrap.fill(line, width, initial_indent=f"  {kind:<{label - 2}}",
                                     subsequent_indent=" " * label))
        return out

    def para(text: str) -> str:
        return textwrap.fill(text, width)

    aliases: dict[str, list[str]] = {}
    for alias, f in FIELD_ALIASES.items():
        if alias != f:
            aliases.setdefault(f, []).append(alias)
    alias_text = "; ".join(f"{' or '.join(v)} for {f}" for f, v in aliases.items())
    return "\n".join([
        "looks: cumulative totals of each arm at each look, in one of two layouts.",
        "",
        "wide layout: one row per look, a column <arm>_<total> per arm and total",
        *rows("wide"),
        "  (any arm names, e.g. rank_v1_n; <total>_<arm> is read too)",
        "long layout: one row per look and arm, the arm named in the column 'arm'",
        *rows("long"),
        "",
        para("optional columns: look (wide layout: 1, 2, 3, ... row by row; long layout: "
             "groups the rows into looks, or without it the dates do), date, note"),
        para("names are read in any letter case, with _ . - or a space between words; "
             f"also accepted: {alias_text}; arms c and t for control and treatment"),
        para("arms: the control is the arm named 'control', or the one given with "
             "--control ARM; a two-arm plan takes one treatment, an experiment plan "
             "(several treatments) all of its arms"),
        para("other names: --column NAME=ARM.TOTAL (wide), --column NAME=TOTAL (long), "
             "--column NAME=look|arm|date|note, --column NAME=- to ignore a column; "
             "repeat --column for each"),
    ])


def column_mapping(specs: Iterable[str]) -> dict[str, str | None]:
    """Read ``--column NAME=TARGET`` options into a ``columns`` mapping.

    The target is ``ARM.TOTAL``, a total, ``look``, ``arm``, ``date``, ``note`` or ``-``
    (ignore the column); it is checked when the table is read. The last ``=`` separates
    the name from the target, so a column name may contain ``=``.
    """
    out: dict[str, str | None] = {}
    for spec in specs:
        name, sep, target = str(spec).rpartition("=")
        name, target = name.strip(), target.strip()
        if not sep or not name or not target:
            raise InputError(f"--column: got {spec!r}; allowed is NAME=ARM.TOTAL, "
                             "NAME=TOTAL, NAME=look|arm|date|note or NAME=-")
        if name in out:
            raise InputError(f"--column: got column {name!r} twice; allowed is one "
                             "target per column")
        out[name] = None if target == _IGNORE else target
    return out


# ---------------------------------------------------------------------------
# What each column holds
# ---------------------------------------------------------------------------

@dataclass(frozen=True)
class _Role:
    what: str                 # "skip", "look", "date", "note", "arm", "total"
    arm: str | None = None    # wide layout totals
    field: str | None = None  # totals


def _target_role(column: str, target: object) -> _Role:
    """The role of a mapped column, from its target."""
    allowed = ("ARM.TOTAL (wide layout), a total (long layout: "
               f"{', '.join(FIELD_ALIASES)}), look, arm, date, note, or - (None) to "
               "ignore the column")
    if target is None or (isinstance(target, str) and target.strip() == _IGNORE):
        return _Role("skip")
    if not isinstance(target, str) or not target.strip():
        raise InputError(f"columns[{column!r}]: got {target!r}; allowed is {allowed}")
    key = name_key(target)
    if key in _EXTRA or key == _ARM_COLUMN:
        return _Role(key)
    if key in FIELD_ALIASES and "." not in target:
        return _Role("total", None, FIELD_ALIASES[key])
    arm, dot, total = target.strip().rpartition(".")
    if dot and name_key(arm) and name_key(total) in FIELD_ALIASES:
        return _Role("total", name_key(arm), FIELD_ALIASES[name_key(total)])
    raise InputError(f"columns[{column!r}]: got {target!r}; allowed is {allowed}")


def _wide_candidates(key: str) -> set[tuple[str, str]]:
    """(arm, total) readings of a wide-layout column name: <arm>_<total>, <total>_<arm>."""
    found = set()
    for alias, f in FIELD_ALIASES.items():
        if key.endswith("_" + alias) and len(key) > len(alias) + 1:
            found.add((key[: -len(alias) - 1], f))
        if key.startswith(alias + "_") and len(key) > len(alias) + 1:
            found.add((key[len(alias) + 1:], f))
    return found


def _expected_text(kind: str | None, layout: str, arms: Sequence[str]) -> str:
    kinds = [kind] if kind else list(METRIC_FIELDS)
    parts = []
    for k in kinds:
        cols = expected_columns(k, arms=arms, layout=layout)
        if k in ALTERNATIVE_FIELDS:
            alt = ALTERNATIVE_FIELDS[k]
            cols_alt = (["look", _ARM_COLUMN, *alt] if layout == "long"
                        else [f"{a}_{f}" for a in arms for f in alt])
            parts.append(f"{k}: {', '.join(cols)} (or {', '.join(cols_alt)})" if not kind
                         else f"{', '.join(cols)} (or {', '.join(cols_alt)})")
        else:
            parts.append(f"{k}: {', '.join(cols)}" if not kind else ", ".join(cols))
    return "; ".join(parts)


def _roles(columns: Sequence[str], mapping: Mapping[str, Any], control: str | None,
           kind: str | None) -> tuple[str, dict[str, _Role]]:
    """The layout and the role of every column."""
    names = [str(c) for c in columns]
    roles: dict[str, _Role] = {}
    for given, target in mapping.items():
        matches = [c for c in names if c == str(given)]
        if not matches:
            matches = [c for c in names if name_key(c) == name_key(given)]
        if len(matches) != 1:
            raise InputError(
                f"columns: got {str(given)!r}; allowed is a column of the data "
                f"({', '.join(names)})" if not matches else
                f"columns: got {str(given)!r}, which matches columns "
                f"{', '.join(matches)}; allowed is one column (give its exact name)")
        roles[matches[0]] = _target_role(matches[0], target)
    for c in names:
        if c not in roles and (name_key(c) in _EXTRA or name_key(c) == _ARM_COLUMN):
            roles[c] = _Role(name_key(c))
    long = any(r.what == _ARM_COLUMN for r in roles.values())
    layout = "long" if long else "wide"
    for c, r in roles.items():
        if long and r.what == "total" and r.arm is not None:
            raise InputError(f"columns[{c!r}]: got arm {r.arm!r} with total {r.field}; "
                             "allowed in the long layout (the data has an arm column) is "
                             "the total alone, e.g. 'n'")
        if not long and r.what == "total" and r.arm is None:
            raise InputError(f"columns[{c!r}]: got total {r.field} without an arm; allowed "
                             f"in the wide layout is ARM.{r.field}, e.g. 'control.{r.field}'"
                             " (or map a column to 'arm' for the long layout)")
    for k in ("look", "date", "note", _ARM_COLUMN):
        same = [c for c, r in roles.items() if r.what == k]
        if len(same) > 1:
            raise InputError(f"columns: got {', '.join(same)} all as the {k} column; "
                             "allowed is one")
    rest = [c for c in names if c not in roles]
    unknown: list[str] = []
    if long:
        for c in rest:
            if name_key(c) in FIELD_ALIASES:
                roles[c] = _Role("total", None, FIELD_ALIASES[name_key(c)])
            else:
                unknown.append(c)
    else:
        candidates = {c: _wide_candidates(name_key(c)) for c in rest}
        known = {r.arm for r in roles.values() if r.arm}
        known |= {a for cands in candidates.values() if len(cands) == 1 for a, _ in cands}
        known |= set(ARMS) | set(_SHORT_ARMS)
        if control:
            known.add(name_key(control))
        for c in rest:
            cands = candidates[c]
            if len(cands) > 1:
                cands = {x for x in cands if x[0] in known} or cands
            if not cands:
                unknown.append(c)
            elif len(cands) > 1:
                readings = " or ".join(f"arm {a!r} with total {f}" for a, f in sorted(cands))
                raise LookDataError(
                    f"column {c!r} could be {readings}; name it with "
                    f"columns={{{c!r}: 'ARM.TOTAL'}} (--column '{c}=ARM.TOTAL')",
                    field=c)
            else:
                arm, f = next(iter(cands))
                roles[c] = _Role("total", arm, f)
    if unknown:
        found = list(dict.fromkeys(r.arm for r in roles.values() if r.arm))
        if set(found) <= {*ARMS, *_SHORT_ARMS}:
            found = list(dict.fromkeys(_SHORT_ARMS.get(a, a) for a in found))
        arms = found if len(found) > 1 else list(ARMS)
        if long:
            exp = ("(long layout) " + _expected_text(kind, "long", arms)
                   + ", plus optional date, note")
        else:
            exp = ("(wide layout, any arm names) " + _expected_text(kind, "wide", arms)
                   + ", plus optional look, date, note; or (long layout, with an arm "
                   "column) " + _expected_text(kind, "long", arms))
        raise LookDataError(
            f"unknown column{'s' if len(unknown) > 1 else ''} {', '.join(unknown)}; "
            f"expected {exp}; name other columns with columns={{NAME: TARGET}} "
            "(--column NAME=TARGET) or ignore them with the target '-'",
            field=unknown[0])
    return layout, {c: roles[c] for c in names if c in roles}   # in the data's order


# ---------------------------------------------------------------------------
# The table of looks
# ---------------------------------------------------------------------------

@dataclass(frozen=True)
class ArmLooks:
    """Looks read from a table, keyed by arm name.

    Attributes
    ----------
    control : str
        Name of the control arm.
    treatments : tuple of str
        Names of the other arms, in the order the data gives them.
    looks : list of dict
        One mapping per look, in order: ``{arm name: {total: value}}`` with the totals
        as given (names made canonical, e.g. ``users`` -> ``n``).
    layout : {"wide", "long"}
    columns : dict
        ``{arm name: {total: column}}``: the column each total came from.
    dates, notes : list or None
        The ``date`` and ``note`` of each look, when the table has them.
    kind : str or None
        The metric kind the totals were checked against (None: not checked yet).
    """

    control: str
    treatments: tuple[str, ...]
    looks: list[dict[str, dict[str, Any]]]
    layout: str
    columns: dict[str, dict[str, str]] = field(default_factory=dict)
    dates: list[Any] | None = None
    notes: list[Any] | None = None
    kind: str | None = None

    @property
    def arms(self) -> tuple[str, ...]:
        """All arm names, the control first."""
        return (self.control, *self.treatments)

    def column(self, arm: str, total: str) -> str | None:
        """The column of an arm's total."""
        return self.columns.get(arm, {}).get(total)

    def roles(self) -> dict[str, str]:
        """``{"control": name, "treatment": name}`` for a two-arm table.

        Raises
        ------
        LookDataError
            With more than one treatment arm: a two-arm analysis of one treatment
            against a shared control would not hold the family-wise error rate.
        """
        if len(self.treatments) != 1:
            raise LookDataError(
                f"the data has {len(self.arms)} arms ({', '.join(self.arms)}), the control "
                f"{self.control!r} and {len(self.treatments)} treatments; a two-arm plan "
                "compares one treatment with the control (analysing each treatment in its "
                "own two-arm plan would not hold the family-wise error rate): analyse the "
                "table with an experiment plan for these arms (seqtest.experiment_plan, "
                "'seqtest plan --arms'), or keep one treatment's rows or columns",
                arm=self.treatments[1])
        return {ARMS[0]: self.control, ARMS[1]: self.treatments[0]}

    def by_arm(self) -> list[dict[str, dict[str, Any]]]:
        """The looks keyed by arm name, ``[{arm: {...}, ...}, ...]``, for any number of
        arms: what :func:`seqtest.analyze` takes with an experiment plan (the table
        itself is taken as well)."""
        return [{arm: dict(look[arm]) for arm in self.arms if arm in look}
                for look in self.looks]

    def two_arm(self) -> list[dict[str, dict[str, Any]]]:
        """The looks keyed by role, ``[{"control": {...}, "treatment": {...}}, ...]``,
        as :func:`seqtest.analyze` takes them (see :meth:`roles`)."""
        names = self.roles()
        return [{role: dict(look[name]) for role, name in names.items()}
                for look in self.looks]


def _plain(value: Any) -> Any:
    """A cell as a plain Python value (numpy scalars and decimals become numbers)."""
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, decimal.Decimal):
        if not value.is_finite():
            return float(value)
        return int(value) if value == value.to_integral_value() else float(value)
    return value


def _missing(value: Any) -> bool:
    if value is None:
        return True
    try:
        import pandas as pd
        return bool(pd.isna(value)) if np.ndim(value) == 0 else False
    except (TypeError, ValueError):
        return False


def _cell(value: Any, look: int, arm: str, total: str, column: str) -> Any:
    """A total's cell, checked to be a number."""
    if _missing(value):
        raise LookDataError(f"column {column!r} is empty; every arm needs every total at "
                            "every look", look=look, arm=arm, field=total)
    v = _plain(value)
    if isinstance(v, bool) or not isinstance(v, numbers.Real):
        raise LookDataError(f"column {column!r} holds {v!r}, which is not a number; "
                            "allowed is a number (no thousands separators or units)",
                            look=look, arm=arm, field=total)
    return v


def _control_of(arms: Sequence[str], control: str | None) -> str:
    by_key: dict[str, list[str]] = {}
    for a in arms:
        by_key.setdefault(name_key(a), []).append(a)
    for names in by_key.values():
        if len(names) > 1:
            raise LookDataError(f"arms {', '.join(repr(n) for n in names)} differ only in "
                                "letter case or separators; allowed is one name per arm",
                                arm=names[0])
    want = control if control is not None else ARMS[0]
    if control is not None and (not isinstance(control, str) or not control.strip()):
        raise InputError(f"control: got {control!r}; allowed is the name of an arm in the "
                         f"data ({', '.join(arms)})")
    found = by_key.get(name_key(want))
    if found:
        return found[0]
    if control is not None:
        raise LookDataError(f"control: got {control!r}; allowed is an arm of the data "
                            f"({', '.join(arms)})", arm=control)
    raise LookDataError(f"no arm is named 'control' (the arms are {', '.join(arms)}); "
                        "name the control arm with control='NAME' (--control NAME)")


def read_arm_looks(frame: Any, kind: str | None = None, *,
                   columns: Mapping[str, str | None] | None = None,
                   control: str | None = None) -> ArmLooks:
    """Read a table of looks (a pandas DataFrame) in the wide or the long layout.

    Parameters
    ----------
    frame : pandas.DataFrame or ArmLooks
        The table (layouts in the module docstring). An :class:`ArmLooks` is returned
        as it is (checked against `kind` if it was not yet).
    kind : {"binary", "continuous", "rate"}, optional
        The metric kind. When given, the totals are checked as
        :func:`seqtest.monitoring.metrics.validate_looks` checks them (whole counts,
        cumulative, ...), and errors name the column as well; otherwise only the
        layout and that every total is a number.
    columns : mapping, optional
        ``{column: target}`` for columns with other names; a target is ``"ARM.TOTAL"``
        (wide layout), a total (long layout), ``"look"``, ``"arm"``, ``"date"``,
        ``"note"``, or ``None`` / ``"-"`` to ignore the column.
    control : str, optional
        The control arm's name (default: the arm named ``control``).

    Returns
    -------
    ArmLooks

    Raises
    ------
    LookDataError
        Naming the look, arm, total and column: unknown, ambiguous, duplicated or
        missing columns; empty or non-numeric cells; looks missing, repeated or out of
        order; an arm missing or repeated at a look; fewer than two arms; no control.
    InputError
        A bad `columns` mapping or `control`.
    """
    if isinstance(frame, ArmLooks):
        if kind is not None and frame.kind != kind:
            _check_totals(frame, kind)
            frame = ArmLooks(frame.control, frame.treatments, frame.looks, frame.layout,
                             frame.columns, frame.dates, frame.notes, kind)
        return frame
    if kind is not None and kind not in METRIC_FIELDS:
        raise InputError(f"kind: got {kind!r}; allowed is one of {', '.join(METRIC_FIELDS)}")
    if not hasattr(frame, "columns") or not hasattr(frame, "itertuples"):
        raise InputError(f"looks: got {type(frame).__name__}; allowed is a pandas DataFrame "
                         "of looks, or a list of looks")
    if columns is not None and not isinstance(columns, Mapping):
        raise InputError(f"columns: got {columns!r}; allowed is a mapping "
                         "{column: 'ARM.TOTAL' | 'TOTAL' | 'look' | 'arm' | 'date' | 'note' "
                         "| None}")
    if len(frame) == 0:
        raise LookDataError("the table has no rows; give one row per look (wide layout) or "
                            "per look and arm (long layout)")
    frame = frame.reset_index(drop=True)
    names = [str(c) for c in frame.columns]
    if len(set(names)) != len(names):
        dup = sorted({n for n in names if names.count(n) > 1})
        raise LookDataError(f"column{'s' if len(dup) > 1 else ''} {', '.join(dup)} appear "
                            "more than once; allowed is one column per name", field=dup[0])
    frame.columns = names
    layout, roles = _roles(names, columns or {}, control, kind)
    if layout == "long":
        result = _read_long(frame, roles, control, kind)
    else:
        result = _read_wide(frame, roles, control, kind)
    if kind is not None:
        _check_totals(result, kind)
    return result


def _check_fields(kind: str | None, layout: str, arm_fields: Mapping[str, Mapping[str, str]],
                  arms: Sequence[str]) -> None:
    """Every arm has the totals of the kind and no other (the columns named when not)."""
    if kind is None:
        return
    allowed = set(_fields_of(kind))
    for arm in arms:
        for f, col in arm_fields[arm].items():
            if f not in allowed:
                raise LookDataError(f"column {col!r} gives {f}, which is not a total of a "
                                    f"{kind} metric; a {kind} metric has "
                                    f"{_totals_text(kind)}",
                                    arm=arm if layout == "wide" else None, field=f)
    canonical = METRIC_FIELDS[kind]
    alternative = ALTERNATIVE_FIELDS.get(kind, ())
    missing: list[tuple[str, str]] = []
    for arm in arms:
        have = set(arm_fields[arm])
        uses_alternative = bool(alternative) and bool(have - set(canonical))
        want = alternative if uses_alternative else canonical
        missing += [(arm, f) for f in want if f not in have]
    if not missing:
        return
    if layout == "long":
        names = list(dict.fromkeys(f for _, f in missing))
        exp = _expected_text(kind, "long", arms)
        arm_at_fault = None
    else:
        names = [f"{a}_{f}" for a, f in missing]
        exp = _expected_text(kind, "wide", arms)
        arm_at_fault = missing[0][0]
    raise LookDataError(f"missing column{'s' if len(names) > 1 else ''} {', '.join(names)}; "
                        f"expected {exp}", arm=arm_at_fault, field=missing[0][1])


def _read_wide(frame: Any, roles: Mapping[str, _Role], control: str | None,
               kind: str | None) -> ArmLooks:
    arm_cols: dict[str, dict[str, str]] = {}
    for col, r in roles.items():
        if r.what != "total":
            continue
        assert r.arm is not None and r.field is not None
        fields = arm_cols.setdefault(r.arm, {})
        if r.field in fields:
            raise LookDataError(f"columns {fields[r.field]} and {col} both give the "
                                f"{r.field} total; keep one of them", arm=r.arm, field=r.field)
        fields[r.field] = col
    # the short names c and t stand for the roles when they are the only arms
    if arm_cols and set(arm_cols) <= {*ARMS, *_SHORT_ARMS}:
        merged: dict[str, dict[str, str]] = {}
        for arm, fields in arm_cols.items():
            role = _SHORT_ARMS.get(arm, arm)
            into = merged.setdefault(role, {})
            for f, col in fields.items():
                if f in into:
                    raise LookDataError(f"columns {into[f]} and {col} both give the {f} "
                                        "total; keep one of them", arm=role, field=f)
                into[f] = col
        arm_cols = merged
    arms = list(arm_cols)
    if not arms:
        raise LookDataError("no column of totals; expected "
                            + _expected_text(kind, "wide", list(ARMS)))
    ctrl = _control_of(arms, control)
    treatments = tuple(a for a in arms if a != ctrl)
    ordered = [ctrl, *treatments]
    _check_fields(kind, "wide", arm_cols, ordered)
    if not treatments:
        raise LookDataError(f"only one arm ({ctrl}) in the data; a look needs the control "
                            "and at least one treatment", arm=ctrl)
    extra = {r.what: c for c, r in roles.items() if r.what in _EXTRA}
    if "look" in extra:
        vals = [_plain(v) for v in frame[extra["look"]]]
        if vals != list(range(1, len(vals) + 1)):
            raise LookDataError(f"column {extra['look']}: got {vals}; looks must be numbered "
                                "1, 2, 3, ... in order, one row each", field="look")
    looks = []
    for i, row in enumerate(frame.to_dict("records"), start=1):
        looks.append({arm: {f: _cell(row[col], i, arm, f, col)
                            for f, col in arm_cols[arm].items()} for arm in ordered})
    return ArmLooks(ctrl, treatments, looks, "wide",
                    {a: dict(arm_cols[a]) for a in ordered},
                    _column_values(frame, extra.get("date")),
                    _column_values(frame, extra.get("note")), None)


def _column_values(frame: Any, col: str | None) -> list[Any] | None:
    return None if col is None else [_plain(v) for v in frame[col]]


def _read_long(frame: Any, roles: Mapping[str, _Role], control: str | None,
               kind: str | None) -> ArmLooks:
    by_role = {r.what: c for c, r in roles.items() if r.what in (*_EXTRA, _ARM_COLUMN)}
    arm_col = by_role[_ARM_COLUMN]
    totals: dict[str, str] = {}
    for col, r in roles.items():
        if r.what != "total":
            continue
        assert r.field is not None
        if r.field in totals:
            raise LookDataError(f"columns {totals[r.field]} and {col} both give the "
                                f"{r.field} total; keep one of them", field=r.field)
        totals[r.field] = col
    if not totals:
        raise LookDataError("no column of totals; expected "
                            + _expected_text(kind, "long", list(ARMS)))
    rows = frame.to_dict("records")
    # the arm of each row
    arm_names: list[str] = []
    for i, row in enumerate(rows, start=1):
        a = _plain(row[arm_col])
        if _missing(a) or not str(a).strip():
            raise LookDataError(f"data row {i}: column {arm_col!r} is empty; every row "
                                "names its arm", field=_ARM_COLUMN)
        if isinstance(a, float) and a.is_integer():
            a = int(a)
        arm_names.append(str(a).strip())
    # the look of each row
    look_of = _long_look_numbers(rows, by_role)
    arms = list(dict.fromkeys(arm_names))
    ctrl = _control_of(arms, control)
    treatments = tuple(a for a in arms if a != ctrl)
    ordered = [ctrl, *treatments]
    arm_fields = {a: dict(totals) for a in ordered}
    _check_fields(kind, "long", arm_fields, ordered)
    if not treatments:
        raise LookDataError(f"only one arm ({ctrl}) in the data; a look needs the control "
                            "and at least one treatment", arm=ctrl)
    n_looks = max(look_of)
    cells: list[dict[str, dict[str, Any]]] = [{} for _ in range(n_looks)]
    first_row: dict[tuple[int, str], int] = {}
    for i, (row, arm, k) in enumerate(zip(rows, arm_names, look_of, strict=True), start=1):
        if (k, arm) in first_row:
            raise LookDataError(f"data rows {first_row[(k, arm)]} and {i} both give the "
                                "totals of this arm at this look; allowed is one row per "
                                "look and arm", look=k, arm=arm)
        first_row[(k, arm)] = i
        cells[k - 1][arm] = {f: _cell(row[col], k, arm, f, col) for f, col in totals.items()}
    for k, look in enumerate(cells, start=1):
        for arm in ordered:
            if arm not in look:
                raise LookDataError(f"no row for this arm at this look; every look needs a "
                                    f"row for each arm ({', '.join(ordered)})",
                                    look=k, arm=arm)
    looks = [{arm: look[arm] for arm in ordered} for look in cells]
    dates = _per_look(rows, look_of, by_role.get("date"), n_looks)
    notes = _per_look(rows, look_of, by_role.get("note"), n_looks)
    return ArmLooks(ctrl, treatments, looks, "long",
                    {a: dict(totals) for a in ordered}, dates, notes, None)


def _long_look_numbers(rows: Sequence[Mapping[str, Any]],
                       by_role: Mapping[str, str]) -> list[int]:
    """The look of each row of the long layout: from ``look``, else from ``date``."""
    look_col = by_role.get("look")
    if look_col is not None:
        out = []
        for i, row in enumerate(rows, start=1):
            v = _plain(row[look_col])
            ok = (not _missing(v) and isinstance(v, numbers.Real) and not isinstance(v, bool)
                  and float(v).is_integer() and float(v) >= 1)
            if not ok:
                raise LookDataError(f"data row {i}: column {look_col!r} holds {v!r}; allowed "
                                    "is a look number 1, 2, 3, ...", field="look")
            out.append(int(v))
        present = sorted(set(out))
        gaps = [k for k in range(1, present[-1] + 1) if k not in set(present)]
        if gaps:
            raise LookDataError(f"column {look_col!r} goes {', '.join(map(str, present))}; "
                                f"look {gaps[0]} has no rows; allowed is looks numbered 1, 2, "
                                "3, ... without gaps", look=gaps[0], field="look")
        return out
    date_col = by_role.get("date")
    if date_col is None:
        raise LookDataError("the long layout needs a look column (look numbers 1, 2, 3, ...) "
                            "or a date column to group its rows into looks", field="look")
    dates = []
    for i, row in enumerate(rows, start=1):
        v = _plain(row[date_col])
        if _missing(v):
            raise LookDataError(f"data row {i}: column {date_col!r} is empty; without a look "
                                "column every row needs its date", field="date")
        if isinstance(v, str) and not _ISO_DATE.match(v.strip()):
            raise LookDataError(f"data row {i}: column {date_col!r} holds {v!r}; allowed "
                                "(to order the looks without a look column) is a date "
                                "written year first, e.g. 2026-03-08", field="date")
        dates.append(v.strip() if isinstance(v, str) else v)
    try:
        order = sorted(set(dates))
    except TypeError:
        raise LookDataError(f"column {date_col!r} mixes values that cannot be ordered "
                            f"({', '.join(sorted({type(d).__name__ for d in dates}))}); "
                            "allowed is one type of date", field="date") from None
    number = {d: k for k, d in enumerate(order, start=1)}
    return [number[d] for d in dates]


def _per_look(rows: Sequence[Mapping[str, Any]], look_of: Sequence[int], col: str | None,
              n_looks: int) -> list[Any] | None:
    if col is None:
        return None
    out: list[Any] = [None] * n_looks
    for row, k in zip(rows, look_of, strict=True):
        v = _plain(row[col])
        if out[k - 1] is None and not _missing(v):
            out[k - 1] = v
    return out


def _check_totals(table: ArmLooks, kind: str) -> None:
    """Check every arm's totals with the metric's rules; errors name the column."""
    for treatment in table.treatments:
        names = {ARMS[0]: table.control, ARMS[1]: treatment}
        pairs = [{role: look[name] for role, name in names.items()} for look in table.looks]
        try:
            validate_looks(kind, pairs)
        except LookDataError as exc:
            arm = names.get(exc.arm or "", exc.arm)
            detail = exc.detail
            col = table.column(arm, exc.field) if arm and exc.field else None
            if col is not None:
                detail = f"{detail} (column {col!r})"
            raise LookDataError(detail, look=exc.look, arm=arm, field=exc.field) from None


# ---------------------------------------------------------------------------
# Two-arm doors (the first release's functions)
# ---------------------------------------------------------------------------

def looks_from_frame(frame: Any, kind: str | None = None, *,
                     columns: Mapping[str, str | None] | None = None,
                     control: str | None = None) -> list[dict]:
    """A two-arm table of looks (DataFrame or :class:`ArmLooks`) as the list of per-look
    ``{"control": {...}, "treatment": {...}}`` totals that :func:`seqtest.analyze`
    takes. Options as in :func:`read_arm_looks`; more than two arms are refused (see
    :meth:`ArmLooks.roles`)."""
    return read_arm_looks(frame, kind, columns=columns, control=control).two_arm()


def frame_from_csv(path: str | Path) -> Any:
    """Read a CSV file into a DataFrame, refusing a missing, unreadable or empty file."""
    import pandas as pd
    p = Path(path)
    if not p.exists():
        raise InputError(f"looks file: {p} does not exist")
    if p.is_dir():
        raise InputError(f"looks file: {p} is a directory; allowed is a CSV file")
    try:
        frame = pd.read_csv(p)
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as exc:
        raise InputError(f"looks file: {p} is not a readable CSV ({exc})") from None
    if frame.empty:
        raise InputError(f"looks file: {p} has no rows; give one row per look (wide layout) "
                         "or per look and arm (long layout)")
    return frame


def read_looks_csv(path: str | Path, kind: str | None = None, *,
                   columns: Mapping[str, str | None] | None = None,
                   control: str | None = None) -> list[dict]:
    """Read a two-arm CSV file of looks (layouts in the module docstring) into the
    per-look ``{"control": {...}, "treatment": {...}}`` totals."""
    return looks_from_frame(frame_from_csv(path), kind, columns=columns, control=control)
