"""One bounded, thread-safe memo: the most recently used entries, at most ``size``.

Used for the looks already solved (:data:`seqtest.core.boundaries.SOLVED`) and, through
the service's library module, for the plans a service process has read. Values must not
change once stored (every user stores immutable results), so a lock around the
dictionary is all the safety needed.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from collections.abc import Hashable
from typing import Generic, TypeVar

__all__ = ["Recent"]

K = TypeVar("K", bound=Hashable)
V = TypeVar("V")


class Recent(Generic[K, V]):
    """At most ``size`` entries, the least recently used dropped first; ``hits`` and
    ``misses`` count the lookups."""

    def __init__(self, size: int) -> None:
        if size < 1:
            raise ValueError(f"size: got {size!r}; allowed is a whole number >= 1")
        self.size = size
        self._items: OrderedDict[K, V] = OrderedDict()
        self._lock = threading.Lock()
        self.hits = 0
        self.misses = 0

    def get(self, key: K) -> V | None:
        with self._lock:
            value = self._items.get(key)
            if value is None:
                self.misses += 1
                return None
            self._items.move_to_end(key)
            self.hits += 1
            return value

    def put(self, key: K, value: V) -> None:
        with self._lock:
            self._items[key] = value
            self._items.move_to_end(key)
            while len(self._items) > self.size:
                self._items.popitem(last=False)

    def clear(self) -> None:
        with self._lock:
            self._items.clear()
            self.hits = self.misses = 0

    def __len__(self) -> int:
        with self._lock:
            return len(self._items)
