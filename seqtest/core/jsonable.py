"""One conversion to plain JSON types, used by every ``to_dict`` and writer.

numpy scalars and arrays become Python numbers and lists, non-finite floats become
``None`` (JSON has no NaN or Infinity), enums their values, dataclasses their fields
(shallowly, without :func:`dataclasses.asdict`'s deep copies), tuples lists.
"""

from __future__ import annotations

import math
from dataclasses import fields, is_dataclass
from enum import Enum
from typing import Any

import numpy as np

__all__ = ["plain", "floats_or_none"]


def plain(value: Any) -> Any:
    """``value`` as plain JSON types (see the module docstring)."""
    kind = type(value)
    # the exact built-in types first (most of an analysis), each as the general
    # rules below would give it; subclasses (numpy floats, str enums) go on to those
    if kind is float:
        return value if math.isfinite(value) else None
    if kind is str or kind is int or kind is bool or value is None:
        return value
    if kind is dict:
        return {str(k): plain(v) for k, v in value.items()}
    if kind is list or kind is tuple:
        return [plain(v) for v in value]
    if isinstance(value, (str, bool)):
        return value.value if isinstance(value, Enum) else value
    if isinstance(value, Enum):
        return plain(value.value)
    if isinstance(value, int):
        return value
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {str(k): plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return [plain(v) for v in value.tolist()]
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating):
        return plain(float(value))
    if is_dataclass(value) and not isinstance(value, type):
        names = _FIELDS.get(kind)
        if names is None:
            names = _FIELDS[kind] = tuple(f.name for f in fields(value))
        return {name: plain(getattr(value, name)) for name in names}
    raise TypeError(f"cannot write a {type(value).__name__} as JSON")


_FIELDS: dict[type, tuple[str, ...]] = {}  # field names of each dataclass met


def floats_or_none(values: Any) -> list[float | None]:
    """A float array as a JSON list (non-finite entries as ``None``)."""
    return [float(x) if math.isfinite(x) else None for x in np.asarray(values, float).ravel()]
