"""Per-product periods of [product, ..., period] arrays, and their values as Python lists."""

from __future__ import annotations

import math
from collections import deque
from collections.abc import Sequence
from itertools import repeat
from operator import setitem

import numpy as np

from models._typing import BoolArray, DateArray, FloatArray, IntArray

Rows = slice | IntArray
"""Periods of each product taken by a step: the same slice for all, or indices per product."""


def period_rows(mask: BoolArray, count: int) -> Rows:
    """Periods where ``mask`` holds, ``count`` per product: a slice when the same for all."""
    width = mask.shape[1]
    if count == width or mask[:, :count].all():
        return slice(0, count)
    if mask[:, width - count :].all():
        return slice(width - count, width)
    return np.nonzero(mask)[1].reshape(mask.shape[0], count)


def gather(values: np.ndarray, members: IntArray, rows: Rows) -> np.ndarray:
    """``values`` (periods on the last axis) of the given members at the given periods."""
    picked = values if members.size == values.shape[0] else values[members]  # members sorted
    if isinstance(rows, slice):
        return picked[..., rows]
    index = rows.reshape(rows.shape[0], *([1] * (values.ndim - 2)), rows.shape[1])
    return np.take_along_axis(picked, index, axis=-1)


def row_ends(rows: Rows, width: int, count: int) -> tuple[IntArray, IntArray]:
    """Positions of each member's first and last gathered period."""
    if isinstance(rows, slice):
        start, stop, _ = rows.indices(width)
        return np.full(count, start), np.full(count, stop - 1)
    return rows[:, 0], rows[:, -1]


def day_strings(days: DateArray) -> list[str]:
    """ISO dates, formatted once per distinct day (members mostly share their dates)."""
    distinct, where = np.unique(days, return_inverse=True)
    text: list[str] = np.datetime_as_string(distinct).tolist()
    return [text[j] for j in where.tolist()]


def row_mappings(names: Sequence[str], values: FloatArray) -> list[dict[str, float]]:
    """One name-to-value dict per row of ``values``, filled column by column from a template."""
    dicts: list[dict[str, float]] = list(
        map(dict.copy, repeat(dict.fromkeys(names, 0.0), values.shape[0]))
    )
    for name, column in zip(names, values.T.tolist(), strict=True):
        deque(map(setitem, dicts, repeat(name), column), maxlen=0)
    return dicts


def finite_rows(*arrays: FloatArray) -> BoolArray:
    """Per member (first axis): whether every value of every array is finite."""
    finite = np.ones(arrays[0].shape[0], dtype=bool)
    for values in arrays:
        finite &= np.isfinite(values.reshape(values.shape[0], -1)).all(axis=1)
    return finite


def optional_floats(values: FloatArray) -> list[float | None]:
    listed: list[float | None] = values.tolist()
    if np.isfinite(values).all():
        return listed
    return [_finite_or_none(v) for v in listed]


def _finite_or_none(value: float | None) -> float | None:
    return value if value is not None and math.isfinite(value) else None
