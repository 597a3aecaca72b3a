"""What the service accepts, decided once at the edge: the number grammar of CSV cells,
the range of periods, how deep a JSON document may nest, and how many covariates a
product and a file may have. Values outside are refused with 422 before anything is
stored, so that whatever is accepted can later be read, fitted, charted and reported.

README ("Limits") and the OpenAPI descriptions quote these values.
"""

from __future__ import annotations

import datetime as dt
import re
from typing import Any

# A number in a CSV cell: an optional minus, ASCII digits, an optional point with its
# fraction and an optional exponent ("-12", "0.5", "1.", "2.5e3"). No plus sign, no
# spaces, no "_" between digits, no digits other than 0-9; "nan" and "inf" are not
# numbers.
NUMBER_GRAMMAR = r"-?[0-9]+(?:\.[0-9]*)?(?:[eE][+-]?[0-9]+)?"
NUMBER_TEXT = re.compile(NUMBER_GRAMMAR)
NUMBER_LINES = re.compile(f"(?:{NUMBER_GRAMMAR}\n)*")

# Periods: from 1900-01-01 to 2199-12-31 (dates outside are typing mistakes, and the
# charts' date axes and the days-since-1970 arithmetic stay far from their limits).
FIRST_PERIOD = dt.date(1900, 1, 1)
LAST_PERIOD = dt.date(2199, 12, 31)
PERIOD_RANGE_TEXT = f"{FIRST_PERIOD.isoformat()} to {LAST_PERIOD.isoformat()}"

# Money (prices, unit costs, price bounds): zero or from 1e-6 to 1e12. Smaller or larger
# amounts are not money, and the charts' scales divide by them.
MONEY_MIN = 1e-6
MONEY_MAX = 1e12

# JSON documents sent as specs, scenarios or job options: at most this many levels.
MAX_JSON_DEPTH = 16

# Covariates: columns of a CSV file, and names of one observation sent as JSON.
MAX_COVARIATES_PER_FILE = 50
MAX_COVARIATES_PER_OBSERVATION = 50


def number_or_none(text: str) -> float | None:
    """A CSV cell's finite number under the grammar above (minus zero is zero), or None."""
    if NUMBER_TEXT.fullmatch(text) is None:
        return None
    value = float(text)
    if value != value or value in (float("inf"), float("-inf")):
        return None
    return value + 0.0  # -0.0 becomes 0.0 on both databases (PostgreSQL keeps no sign)


def period_in_range(day: dt.date) -> bool:
    return FIRST_PERIOD <= day <= LAST_PERIOD


def depth(value: Any, limit: int = MAX_JSON_DEPTH) -> int:
    """How deeply ``value`` nests (a scalar: 0), counted up to ``limit + 1`` only."""
    deepest = 0
    stack: list[tuple[Any, int]] = [(value, 0)]
    while stack:
        item, level = stack.pop()
        if isinstance(item, dict | list):
            level += 1
            deepest = max(deepest, level)
            if level > limit:
                return level
            children = item.values() if isinstance(item, dict) else item
            stack.extend((child, level) for child in children)
    return deepest
