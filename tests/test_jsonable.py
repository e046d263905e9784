"""The one conversion to plain JSON types (``seqtest.core.jsonable.plain``).

JSON (RFC 8259, an open standard) has no NaN or Infinity, so non-finite floats become
``null``; numpy scalars and arrays become Python numbers and lists; enums their
values; dataclasses their fields. The fast paths for exact built-in types must give
what the general rules give, for the types' subclasses too.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from enum import Enum

import numpy as np
import pytest

from seqtest.core.jsonable import plain
from seqtest.core.vocabulary import Decision


class Colour(str, Enum):
    RED = "red"


class Level(Enum):
    LOW = 1


@dataclass(frozen=True)
class Inner:
    x: float
    tags: tuple


@dataclass
class Outer:
    inner: Inner
    values: np.ndarray
    decision: Decision


@pytest.mark.parametrize("value, expected", [
    (1.5, 1.5), (math.inf, None), (-math.inf, None), (math.nan, None),
    (np.float64(2.5), 2.5), (np.float64(np.inf), None), (np.float32(0.5), 0.5),
    (np.int64(7), 7), (np.bool_(True), True), (True, True), (3, 3), ("a", "a"), (None, None),
    (Colour.RED, "red"), (Level.LOW, 1),
])
def test_scalars(value: object, expected: object) -> None:
    out = plain(value)
    assert out == expected
    assert type(out) is type(expected) or (isinstance(value, np.floating)
                                            and isinstance(out, float))


def test_containers_and_dataclasses_nest() -> None:
    obj = Outer(Inner(math.nan, (1, np.float64(math.inf), "b")),
                np.array([1.0, np.inf, -2.0]), Decision.CONTINUE)
    out = plain({"o": obj, 5: [obj.inner], "t": (1.0,)})
    assert out == {"o": {"inner": {"x": None, "tags": [1, None, "b"]},
                         "values": [1.0, None, -2.0], "decision": "continue"},
                   "5": [{"x": None, "tags": [1, None, "b"]}], "t": [1.0]}
    # it is JSON as it stands (no NaN, no Infinity, no numpy types)
    json.dumps(out, allow_nan=False)


def test_unknown_types_are_refused() -> None:
    with pytest.raises(TypeError, match="cannot write a object"):
        plain(object())
