"""A small thread-safe store of the most recently used results, by key.

For results that depend only on their key (a set of active fits, a catalogue's state):
the newest few are kept, the least recently used dropped first.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from typing import Generic, TypeVar

K = TypeVar("K")
V = TypeVar("V")


class Kept(Generic[K, V]):
    """At most ``size`` results, the least recently used dropped first."""

    def __init__(self, size: int) -> None:
        self.size = size
        self._items: OrderedDict[K, V] = OrderedDict()
        self._lock = threading.Lock()

    def get(self, key: K) -> V | None:
        with self._lock:
            found = self._items.get(key)
            if found is not None:
                self._items.move_to_end(key)
            return found

    def put(self, key: K, value: V) -> None:
        with self._lock:
            self._items[key] = value
            while len(self._items) > self.size:
                self._items.popitem(last=False)

    def clear(self) -> None:
        with self._lock:
            self._items.clear()
