"""Restored fits, kept in memory: a fit record never changes once written."""

from __future__ import annotations

import datetime as dt
import threading
from collections import OrderedDict

from sqlalchemy import select
from sqlalchemy.orm import Session

from models import DemandFit
from service.core.errors import NotFound
from service.core.tables import FitRow, as_utc

_CACHE_SIZE = 2048


class FitCache:
    """Restored fits, keyed by fit id and creation time.

    Fit records never change, so an entry never goes stale; the creation time guards
    against a database that reuses the id of a deleted record (SQLite can).
    """

    def __init__(self, size: int = _CACHE_SIZE) -> None:
        self.size = size
        self._items: OrderedDict[tuple[int, str], DemandFit] = OrderedDict()
        self._lock = threading.Lock()

    def get(self, session: Session, fit_id: int, created_at: dt.datetime) -> DemandFit:
        key = (fit_id, as_utc(created_at).isoformat())
        with self._lock:
            fit = self._items.get(key)
            if fit is not None:
                self._items.move_to_end(key)
                return fit
        result = session.scalar(select(FitRow.result).where(FitRow.id == fit_id))
        if result is None:
            raise NotFound(f"no fit {fit_id}")
        fit = DemandFit.from_dict(result)
        with self._lock:
            self._items[key] = fit
            while len(self._items) > self.size:
                self._items.popitem(last=False)
        return fit


fit_cache = FitCache()
