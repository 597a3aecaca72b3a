"""The shape of an observations CSV: its columns, the header's layout, and its problems.

Both CSV paths (:mod:`service.catalogue.csv_columns` and :mod:`service.catalogue.csv_rows`)
read the header into a :class:`Layout` first; problems are gathered with the line and
column they concern, up to :data:`MAX_REPORTED_ERRORS`.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import IO

from service.core.bounds import MAX_COVARIATES_PER_FILE
from service.core.errors import ErrorItem, InvalidInput
from service.core.schemas import NAME_PATTERN

REQUIRED_COLUMNS = ("sku", "period", "price", "units")
OPTIONAL_COLUMNS = ("unit_cost", "in_stock")
MAX_REPORTED_ERRORS = 100
_NAME_RE = re.compile(NAME_PATTERN)


class CsvErrors:
    def __init__(self) -> None:
        self.items: list[ErrorItem] = []
        self.truncated = False

    def add(self, line: int, column: str | None, message: str) -> None:
        if len(self.items) < MAX_REPORTED_ERRORS:
            self.items.append(ErrorItem(line=line, column=column, message=message))
        else:
            self.truncated = True

    @property
    def full(self) -> bool:
        return self.truncated

    def raise_if_any(self) -> None:
        if self.items:
            more = " (only the first 100 problems are listed)" if self.truncated else ""
            raise InvalidInput(
                f"the file has {len(self.items)} problem(s){more}; nothing was written",
                errors=self.items,
            )


@dataclass(frozen=True)
class Layout:
    width: int
    sku: int
    period: int
    price: int
    units: int
    unit_cost: int | None
    in_stock: int | None
    covariates: tuple[tuple[int, str], ...]


def _hint(name: str, names: list[str], by_lower: dict[str, str]) -> str:
    """Why a required column may look missing: another separator, or another case."""
    if len(names) == 1 and ";" in names[0]:
        return "; the file looks semicolon-separated: separate columns with commas"
    if len(names) == 1 and "\t" in names[0]:
        return "; the file looks tab-separated: separate columns with commas"
    found = by_lower.get(name)
    if found is not None and found != name:
        return f"; column names are lower case: write {name!r}, not {found!r}"
    return ""


def read_header(names: list[str], errors: CsvErrors) -> Layout | None:
    seen: set[str] = set()
    for name in names:
        if name in seen:
            errors.add(1, name, f"column {name!r} appears more than once")
        seen.add(name)
    by_lower = {n.strip().lower(): n for n in names}
    for name in REQUIRED_COLUMNS:
        if name not in seen:
            errors.add(
                1, name, f"required column {name!r} is missing" + _hint(name, names, by_lower)
            )
    extra = [n for n in names if n not in REQUIRED_COLUMNS and n not in OPTIONAL_COLUMNS]
    if len(extra) > MAX_COVARIATES_PER_FILE:
        errors.add(
            1,
            None,
            f"a file has at most {MAX_COVARIATES_PER_FILE} covariate columns, "
            f"this one has {len(extra)}",
        )
        return None
    covariates = []
    for index, name in enumerate(names):
        if name in REQUIRED_COLUMNS or name in OPTIONAL_COLUMNS:
            continue
        if not _NAME_RE.match(name):
            errors.add(
                1,
                name or f"#{index + 1}",
                "covariate column names start with a letter or '_' and use letters, "
                "digits, '_', '.', '-' (at most 64)",
            )
        covariates.append((index, name))
    if errors.items:
        return None
    return Layout(
        width=len(names),
        sku=names.index("sku"),
        period=names.index("period"),
        price=names.index("price"),
        units=names.index("units"),
        unit_cost=names.index("unit_cost") if "unit_cost" in seen else None,
        in_stock=names.index("in_stock") if "in_stock" in seen else None,
        covariates=tuple(covariates),
    )


def bad_utf8_line(raw: IO[bytes], fallback: int) -> int:
    """The line of the first byte that is not UTF-8.

    The decoder reads ahead in blocks, so the CSV reader's position at the error can
    be hundreds of lines early; a second pass over the raw bytes finds the line itself
    (a newline byte is never part of a multi-byte UTF-8 sequence).
    """
    if not raw.seekable():
        return fallback
    raw.seek(0)
    for number, line in enumerate(raw, start=1):
        try:
            line.decode("utf-8")
        except UnicodeDecodeError:
            return number
    return fallback
