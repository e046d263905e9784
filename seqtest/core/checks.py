"""Checks of scalar arguments, with one message style.

Every refusal reads ``"<name>: got <value>; allowed is <what>"`` and raises
:class:`~seqtest.core.errors.InputError` (a ``ValueError``). Values are shown
shortened, so a number with hundreds of digits does not flood a log.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Iterable, Mapping
from typing import Any

import numpy as np

from seqtest.core.errors import InputError

__all__ = [
    "boolean",
    "choice",
    "fail",
    "mapping",
    "number",
    "probability",
    "show",
    "whole",
]

_SHOW_MAX = 80


def show(value: Any) -> str:
    """``repr(value)``, shortened to at most 80 characters."""
    try:
        text = repr(value)
    except Exception:  # a repr that fails must not hide the real message
        text = f"<{type(value).__name__}>"
    if len(text) > _SHOW_MAX:
        text = text[: _SHOW_MAX - 15] + f"... ({len(text)} chars)"
    return text


def fail(name: str, value: Any, allowed: str) -> InputError:
    """The error for ``name`` given ``value``; raise it."""
    return InputError(f"{name}: got {show(value)}; allowed is {allowed}")


def _real(value: Any) -> float | None:
    """``value`` as a float if it is a real number (not a bool), else None."""
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, numbers.Real):
        return None
    try:
        return float(value)
    except (OverflowError, ValueError):
        return None


def number(
    name: str,
    value: Any,
    *,
    lo: float = -math.inf,
    hi: float = math.inf,
    lo_open: bool = False,
    hi_open: bool = False,
    allowed: str | None = None,
) -> float:
    """A finite real number in the given range (bools and text are refused).

    Parameters
    ----------
    name : str
        The argument's name as the caller knows it (e.g. ``"alpha"``,
        ``"metric.baseline"``).
    lo, hi : float
        Range; ``lo_open``/``hi_open`` exclude the end.
    allowed : str, optional
        What is allowed, in words (default: built from the range).
    """
    x = _real(value)
    ok = x is not None and math.isfinite(x)
    if ok:
        assert x is not None
        ok = (x > lo if lo_open else x >= lo) and (x < hi if hi_open else x <= hi)
    if not ok:
        raise fail(name, value, allowed or _range_text(lo, hi, lo_open, hi_open))
    assert x is not None
    return x


def _range_text(lo: float, hi: float, lo_open: bool, hi_open: bool) -> str:
    if lo == -math.inf and hi == math.inf:
        return "a finite number"
    if hi == math.inf:
        return f"a finite number {'>' if lo_open else '>='} {lo:g}"
    if lo == -math.inf:
        return f"a finite number {'<' if hi_open else '<='} {hi:g}"
    return f"a number in {'(' if lo_open else '['}{lo:g}, {hi:g}{')' if hi_open else ']'}"


def probability(name: str, value: Any, *, lo: float = 0.0, hi: float = 1.0,
                allowed: str | None = None) -> float:
    """A probability strictly between ``lo`` and ``hi`` (both open)."""
    return number(name, value, lo=lo, hi=hi, lo_open=True, hi_open=True,
                  allowed=allowed or f"a probability in ({lo:g}, {hi:g})")


def whole(name: str, value: Any, *, lo: int | None = None, hi: int | None = None,
          allowed: str | None = None) -> int:
    """A whole number (an int, or a float with no fractional part) in ``[lo, hi]``."""
    x = _real(value)
    ok = x is not None and math.isfinite(x) and float(x).is_integer()
    if ok and lo is not None:
        ok = x is not None and x >= lo
    if ok and hi is not None:
        ok = x is not None and x <= hi
    if not ok:
        if allowed is None:
            if lo is not None and hi is not None:
                allowed = f"a whole number from {lo} to {hi}"
            elif lo is not None:
                allowed = f"a whole number >= {lo}"
            else:
                allowed = "a whole number"
        raise fail(name, value, allowed)
    assert x is not None
    return int(x)


def choice(name: str, value: Any, allowed: Iterable[Any]) -> Any:
    """One of ``allowed``, compared with ``==`` (bools are refused unless listed)."""
    options = tuple(allowed)
    for option in options:
        if isinstance(value, (bool, np.bool_)) != isinstance(option, bool):
            continue
        try:
            if value == option:
                return option
        except Exception:  # a value whose == fails is not one of the options
            continue
    raise fail(name, value, "one of " + ", ".join(str(o) for o in options))


def boolean(name: str, value: Any) -> bool:
    """``True`` or ``False`` exactly (no 0/1, no text)."""
    if not isinstance(value, (bool, np.bool_)):
        raise fail(name, value, "true or false")
    return bool(value)


def mapping(name: str, value: Any, *, allowed_keys: Iterable[str] | None = None) -> Mapping:
    """A mapping (JSON object), optionally with only the given keys."""
    if not isinstance(value, Mapping):
        raise fail(name, value, "a mapping of fields (a JSON object)")
    if allowed_keys is not None:
        allowed = set(allowed_keys)
        extra = sorted(str(k) for k in value if k not in allowed)
        if extra:
            raise InputError(
                f"{name}: unknown field{'s' if len(extra) > 1 else ''} "
                f"{', '.join(show(e) for e in extra)}; allowed are {', '.join(sorted(allowed))}")
    return value
