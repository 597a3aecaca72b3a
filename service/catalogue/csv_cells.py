"""Reading the cells of an observations CSV: numbers, in-stock words and covariates.

Column-wise readers return None at the first cell they cannot take, which sends the
rows to the row-by-row checks that name the problem.
"""

from __future__ import annotations

import math
import re
from collections.abc import Sequence

import numpy as np

from service.catalogue.csv_layout import Layout
from service.core.bounds import NUMBER_LINES, number_or_none

TRUE_WORDS = frozenset({"1", "true", "t", "yes", "y"})
FALSE_WORDS = frozenset({"0", "false", "f", "no", "n"})


BAD_FLAG = object()


def in_stock_value(word: str) -> object:
    """True, False, None for an empty cell, or BAD_FLAG."""
    word = word.strip().lower()
    if not word:
        return None
    if word in TRUE_WORDS:
        return True
    if word in FALSE_WORDS:
        return False
    return BAD_FLAG


def finite_number(text: str) -> float | None:
    """A cell's finite number under the documented grammar (:mod:`service.core.bounds`)."""
    return number_or_none(text)


def finite_column(cells: Sequence[str], *, minimum: float, strict: bool) -> np.ndarray | None:
    if NUMBER_LINES.fullmatch("\n".join(cells) + "\n") is None:
        return None
    values = np.fromiter(map(float, cells), np.float64, len(cells))
    ok = np.isfinite(values) & ((values > minimum) if strict else (values >= minimum))
    return values + 0.0 if bool(ok.all()) else None


def optional_column(cells: Sequence[str], *, minimum: float) -> list[float | None] | None:
    full = finite_column(cells, minimum=minimum, strict=False)
    if full is not None:
        return full.tolist()  # type: ignore[no-any-return]
    out: list[float | None] = []
    for cell in cells:
        if not cell.strip():
            out.append(None)
            continue
        value = number_or_none(cell)
        if value is None or value < minimum:
            return None
        out.append(value)
    return out


# JSON numbers that are surely finite doubles (at most 15 integer digits, 17 fraction
# digits and two exponent digits) and not a minus zero: copied as sent. Others go
# through float().
_JSON_NUMBERS = re.compile(
    r"(?:(?!-0(?:\.0+)?(?:[eE][+-]?[0-9]+)?\n)-?(?:0|[1-9][0-9]{0,14})(?:\.[0-9]{1,17})?"
    r"(?:[eE][+-]?[0-9]{1,2})?\n)*"
)


def covariate_json_column(
    columns: list[tuple[str, ...]], layout: Layout, n: int
) -> list[str | None] | None:
    if not layout.covariates:
        return [None] * n
    ordered = sorted(layout.covariates, key=lambda c: c[1])
    heads = [("{" if i == 0 else ",") + f'"{name}":' for i, (_, name) in enumerate(ordered)]
    # Columns whose cells are all JSON numbers (one regex pass a column) are copied as
    # text: no conversion needed, and the value is exactly what the client sent.
    texts = [columns[index] for index, _ in ordered]
    if all(_JSON_NUMBERS.fullmatch("\n".join(column) + "\n") for column in texts):
        if len(ordered) == 1:
            return [heads[0] + a + "}" for a in texts[0]]
        if len(ordered) == 2:
            return [heads[0] + a + heads[1] + b + "}" for a, b in zip(*texts, strict=True)]
        return [
            "".join(h + t for h, t in zip(heads, row, strict=True)) + "}"
            for row in zip(*texts, strict=True)
        ]
    values = []
    for index, _name in ordered:
        column = optional_column(columns[index], minimum=-math.inf)
        if column is None:
            return None
        values.append(column)
    names = [name for _, name in ordered]
    out: list[str | None] = []
    for row in zip(*values, strict=True):
        parts = [f'"{k}":{v!r}' for k, v in zip(names, row, strict=True) if v is not None]
        out.append("{" + ",".join(parts) + "}" if parts else None)
    return out
