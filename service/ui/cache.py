"""Rendered charts kept in memory, keyed by what they were drawn from.

A chart depends only on the product's record, its history, the fit and the
recommendation it shows; those identify it, so an entry never goes stale and its
ETag can be computed before anything is drawn.
"""

from __future__ import annotations

import hashlib
import threading
from collections import OrderedDict
from dataclasses import dataclass

DEFAULT_BUDGET_BYTES = 64 * 1024 * 1024
RENDER_VERSION = "4"  # bump when the drawing changes, so browsers refetch


@dataclass(frozen=True)
class ChartKey:
    sku: str
    kind: str
    fit_id: int | None
    recommendation_id: int | None
    product_stamp: str

    @property
    def etag(self) -> str:
        text = "|".join(
            str(part)
            for part in (
                RENDER_VERSION,
                self.sku,
                self.kind,
                self.fit_id,
                self.recommendation_id,
                self.product_stamp,
            )
        )
        return '"' + hashlib.sha256(text.encode()).hexdigest()[:32] + '"'


class SvgCache:
    """Least recently used SVG documents within a byte budget (thread-safe)."""

    def __init__(self, budget_bytes: int = DEFAULT_BUDGET_BYTES) -> None:
        self.budget_bytes = budget_bytes
        self._items: OrderedDict[ChartKey, bytes] = OrderedDict()
        self._bytes = 0
        self._lock = threading.Lock()

    def get(self, key: ChartKey) -> bytes | None:
        with self._lock:
            svg = self._items.get(key)
            if svg is not None:
                self._items.move_to_end(key)
            return svg

    def put(self, key: ChartKey, svg: bytes) -> None:
        with self._lock:
            old = self._items.pop(key, None)
            if old is not None:
                self._bytes -= len(old)
            self._items[key] = svg
            self._bytes += len(svg)
            while self._bytes > self.budget_bytes and len(self._items) > 1:
                _, dropped = self._items.popitem(last=False)
                self._bytes -= len(dropped)

    def __len__(self) -> int:
        with self._lock:
            return len(self._items)


chart_cache = SvgCache()
