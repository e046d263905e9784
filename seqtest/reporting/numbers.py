"""Numbers for people: significant digits, signs, percent, p-values, counts.

Every place that shows a result to a person (the summary sentence, the command line's
tables, the charts, the report, the notebook) formats through these functions, so the
same number reads the same everywhere.

Rule for decimals (common practice for reported effects): a group of related numbers
(an estimate and its interval) shares one number of decimals, chosen so that the
largest of them shows ``digits`` significant digits; the integer part is never
rounded away (``123%`` stays ``123%``).
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from typing import Any

__all__ = [
    "MAX_DECIMALS",
    "count",
    "days",
    "decimals_for",
    "fixed",
    "is_number",
    "level_text",
    "p_value",
    "percent",
    "probability",
    "signed",
]

#: Never more decimals than this (beyond it a number is shown in e-notation).
MAX_DECIMALS = 6


def is_number(x: Any) -> bool:
    """A finite real number (``None``, ``nan`` and infinities are not)."""
    if x is None or isinstance(x, bool):
        return False
    try:
        return math.isfinite(float(x))
    except (TypeError, ValueError):
        return False


def decimals_for(values: Iterable[Any], digits: int = 2) -> int:
    """Decimals that give the largest finite ``|value|`` ``digits`` significant digits.

    Zero, or no finite value, gives ``digits - 1`` decimals. The result is between 0
    and :data:`MAX_DECIMALS`.
    """
    finite = [abs(float(v)) for v in values if is_number(v)]
    top = max(finite, default=0.0)
    if top == 0.0:
        return max(0, min(MAX_DECIMALS, digits - 1))
    d = digits - 1 - math.floor(math.log10(top))
    return max(0, min(MAX_DECIMALS, d))


def _tiny(x: float, decimals: int) -> bool:
    return x != 0.0 and abs(x) < 0.5 * 10.0 ** (-decimals) and decimals >= MAX_DECIMALS


def fixed(x: Any, decimals: int) -> str:
    """``x`` with ``decimals`` decimals (``-`` for a missing number; e-notation when it
    would round to zero at :data:`MAX_DECIMALS`); ``-0.0`` is shown as ``0.0``."""
    if not is_number(x):
        return "-" if x is None or (isinstance(x, float) and math.isnan(x)) else (
            "inf" if float(x) > 0 else "-inf")
    v = float(x)
    if _tiny(v, decimals):
        return f"{v:.1e}"
    text = f"{v:.{decimals}f}"
    if text.startswith("-") and float(text) == 0.0:
        text = text[1:]
    return text


def signed(x: Any, decimals: int) -> str:
    """``x`` with an explicit sign (``+1.5``, ``-0.3``, ``0``)."""
    text = fixed(x, decimals)
    if is_number(x) and not text.startswith("-") and float(text.replace("e", "E")) != 0.0:
        return "+" + text
    return text


def percent(x: Any, decimals: int, *, sign: bool = False) -> str:
    """A fraction as percent (``0.0815`` with 1 decimal is ``8.1%``)."""
    if not is_number(x):
        return fixed(x, decimals)
    v = 100.0 * float(x)
    return (signed(v, decimals) if sign else fixed(v, decimals)) + "%"


def p_value(p: Any, *, exact: bool = False) -> str:
    """A p-value with two significant digits; below 0.0001 as ``< 0.0001`` (or, with
    ``exact``, in e-notation: ``1.0e-06``, for thresholds in tables)."""
    if not is_number(p):
        return "-"
    v = float(p)
    if v < 1e-4:
        return f"{v:.1e}" if exact else "< 0.0001"
    if v >= 0.995:
        return "1"
    return fixed(v, decimals_for([v], 2))


def probability(x: Any) -> str:
    """A chance in percent for people: ``over 99%``, ``under 1%``, else whole percent."""
    if not is_number(x):
        return "-"
    v = float(x)
    if v > 0.99:
        return "over 99%"
    if v < 0.01:
        return "under 1%"
    return f"{100.0 * v:.0f}%"


def count(x: Any) -> str:
    """Users (or exposure) still needed: rounded up, with thousands separators."""
    if not is_number(x):
        return "-"
    return f"{math.ceil(float(x) - 1e-9):,}"


def days(x: Any) -> str:
    """Days: one decimal below 10, whole days from 10."""
    if not is_number(x):
        return "-"
    v = float(x)
    text = f"{v:.1f}" if v < 10 else f"{v:.0f}"
    return f"{text} day" + ("" if text in ("1", "1.0") else "s")


def level_text(alpha: Any) -> str | None:
    """The level of an interval at error ``alpha`` (``0.05`` gives ``95%``)."""
    if not is_number(alpha):
        return None
    return f"{100.0 * (1.0 - float(alpha)):.10g}%"
