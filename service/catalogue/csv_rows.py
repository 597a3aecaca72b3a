"""The row-by-row CSV path: rows parsed, checked and written in chunks.

Each chunk is first checked column by column (the common, clean case); a chunk with a
problem is checked again row by row, naming every problem's line and column. Memory stays
bounded: 12 bytes a row are kept for the duplicate check at the end.
"""

from __future__ import annotations

import csv
import datetime as dt
import itertools
import re
from collections.abc import Iterator
from dataclasses import dataclass
from typing import IO, Protocol

import numpy as np
from sqlalchemy.orm import Session

from service.catalogue import products
from service.catalogue.csv_cells import (
    BAD_FLAG,
    FALSE_WORDS,
    TRUE_WORDS,
    covariate_json_column,
    finite_column,
    finite_number,
    in_stock_value,
    optional_column,
)
from service.catalogue.csv_layout import MAX_REPORTED_ERRORS, CsvErrors, Layout, bad_utf8_line
from service.catalogue.observations import ObservationTuple, observation_writer
from service.catalogue.upsert_outcome import UpsertOutcome
from service.core.bounds import PERIOD_RANGE_TEXT, period_in_range
from service.core.schemas import SKU_PATTERN


class CsvReader(Protocol):
    """What ``csv.reader`` gives: rows, and the line the last row ended on."""

    @property
    def line_num(self) -> int: ...

    def __iter__(self) -> Iterator[list[str]]: ...

    def __next__(self) -> list[str]: ...


_SKU_RE = re.compile(SKU_PATTERN)


def stream_rows(
    session: Session,
    reader: CsvReader,
    layout: Layout,
    errors: CsvErrors,
    create_products: bool,
    chunk_rows: int,
    raw: IO[bytes],
) -> UpsertOutcome:
    writer = observation_writer(session)
    sku_ids: dict[str, int] = {}
    sku_codes: dict[str, int] = {}
    unknown_reported: set[str] = set()
    created: list[str] = []
    keys = _GrowingInt64()
    lines = _GrowingInt64()
    n_rows = 0
    try:
        for rows, row_lines in _chunks(reader, chunk_rows):
            if not rows:
                continue
            chunk = _fast_chunk(rows, row_lines, layout) or _checked_chunk(
                rows, row_lines, layout, errors
            )
            n_rows += len(chunk.skus)
            for sku in dict.fromkeys(chunk.skus):
                sku_codes.setdefault(sku, len(sku_codes))
            codes = np.array(list(map(sku_codes.__getitem__, chunk.skus)), dtype=np.int64)
            chunk_keys = (codes << 32) | chunk.ordinals
            keys.extend(chunk_keys)
            lines.extend(chunk.lines)
            _resolve_skus(
                session, chunk, sku_ids, create_products, created, unknown_reported, errors
            )
            # A key repeated inside one statement makes PostgreSQL refuse it; the final
            # duplicate check reports it, so just stop writing.
            repeated = np.unique(chunk_keys).size != chunk_keys.size
            if not errors.items and not repeated:
                writer.write(chunk.tuples(sku_ids))
            if errors.full:
                break
    except UnicodeDecodeError as exc:
        errors.add(bad_utf8_line(raw, reader.line_num + 1), None, f"not valid UTF-8: {exc.reason}")
    except csv.Error as exc:
        errors.add(reader.line_num, None, f"malformed CSV: {exc}")
    if n_rows == 0 and not errors.items:
        errors.add(2, None, "the file has a header but no data rows")
    _report_duplicates(keys.values(), lines.values(), errors)
    errors.raise_if_any()
    inserted, updated = writer.finish()
    return UpsertOutcome(rows=n_rows, inserted=inserted, updated=updated, products_created=created)


def _chunks(reader: CsvReader, size: int) -> Iterator[tuple[list[list[str]], list[int]]]:
    """Non-blank rows in groups of ``size``, with the line number each one ended on.

    Rows are pulled in C (islice); line numbers are counted per row only when a chunk
    has blank lines or quoted line breaks, the rare case where they are not consecutive.
    """
    last_line = reader.line_num
    while True:
        rows = list(itertools.islice(reader, size))
        if not rows:
            return
        first = last_line + 1
        last_line = reader.line_num
        # Blank rows are [] and whitespace-only ones have one cell; real rows have 4 or more.
        if last_line - first + 1 == len(rows) and min(map(len, rows)) > 1:
            yield rows, list(range(first, last_line + 1))
            continue
        yield _number_rows(rows, first)


def _number_rows(rows: list[list[str]], first: int) -> tuple[list[list[str]], list[int]]:
    """Recount lines for a chunk with blank rows or multi-line cells."""
    kept: list[list[str]] = []
    lines: list[int] = []
    line = first - 1
    for cells in rows:
        line += 1 + sum(cell.count("\n") for cell in cells)
        if cells and (len(cells) > 1 or cells[0].strip()):
            kept.append(cells)
            lines.append(line)
    return kept, lines


def _resolve_skus(
    session: Session,
    chunk: _Chunk,
    sku_ids: dict[str, int],
    create_products: bool,
    created: list[str],
    unknown_reported: set[str],
    errors: CsvErrors,
) -> None:
    missing = set(chunk.skus) - sku_ids.keys()
    if missing:
        sku_ids.update(products.ids_by_sku(session, skus=missing))
        missing -= sku_ids.keys()
    if not missing:
        return
    if create_products:
        sku_ids.update(products.create_bare(session, skus=sorted(missing)))
        created.extend(sorted(missing))
        return
    for line_no, sku in zip(chunk.lines.tolist(), chunk.skus, strict=True):
        if sku in missing and sku not in unknown_reported:
            unknown_reported.add(sku)
            hint = "send create_products=true to create it"
            errors.add(line_no, "sku", f"unknown sku {sku!r} ({hint})")


@dataclass
class _Chunk:
    """Checked rows of one chunk, column by column."""

    skus: list[str]
    periods: list[str]
    ordinals: np.ndarray
    price: list[float]
    units: list[float]
    unit_cost: list[float | None]
    in_stock: list[bool | None]
    covariates: list[str | None]
    lines: np.ndarray

    def tuples(self, sku_ids: dict[str, int]) -> list[ObservationTuple]:
        ids = [sku_ids[s] for s in self.skus]
        return list(
            zip(
                ids,
                self.periods,
                self.price,
                self.units,
                self.unit_cost,
                self.in_stock,
                self.covariates,
                strict=True,
            )
        )


def _checked_chunk(
    rows: list[list[str]], row_lines: list[int], layout: Layout, errors: CsvErrors
) -> _Chunk:
    """Row by row, naming every problem's line and column; keeps the valid rows."""
    parsed = []
    kept_lines = []
    for cells, line_no in zip(rows, row_lines, strict=True):
        row = _parse_row(cells, line_no, layout, errors)
        if row is not None:
            parsed.append(row)
            kept_lines.append(line_no)
    columns = list(zip(*parsed, strict=True)) if parsed else [()] * 7
    periods = list(columns[1])
    return _Chunk(
        skus=list(columns[0]),
        periods=periods,
        ordinals=np.array([dt.date.fromisoformat(p).toordinal() for p in periods], np.int64),
        price=list(columns[2]),
        units=list(columns[3]),
        unit_cost=list(columns[4]),
        in_stock=list(columns[5]),
        covariates=list(columns[6]),
        lines=np.array(kept_lines, dtype=np.int64),
    )


def _fast_chunk(rows: list[list[str]], row_lines: list[int], layout: Layout) -> _Chunk | None:
    """Column-wise checks for the common, clean case; None sends the chunk to the
    row-by-row path, which finds and names whatever is wrong."""
    n = len(rows)
    if set(map(len, rows)) != {layout.width}:
        return None
    columns = list(zip(*rows, strict=True))
    skus = columns[layout.sku]
    if not all(_SKU_RE.match(s) and s == s.strip() for s in set(skus)):
        return None
    periods = columns[layout.period]
    ordinal_of = {}
    for p in set(periods):
        try:
            day = dt.date.fromisoformat(p)
        except ValueError:
            return None
        if day.isoformat() != p or not period_in_range(day):
            return None
        ordinal_of[p] = day.toordinal()
    price = finite_column(columns[layout.price], minimum=0.0, strict=True)
    units = finite_column(columns[layout.units], minimum=0.0, strict=False)
    if price is None or units is None:
        return None
    unit_cost: list[float | None] = [None] * n
    if layout.unit_cost is not None:
        cost = optional_column(columns[layout.unit_cost], minimum=0.0)
        if cost is None:
            return None
        unit_cost = cost
    in_stock: list[bool | None] = [None] * n
    if layout.in_stock is not None:
        words = {w: in_stock_value(w) for w in set(columns[layout.in_stock])}
        if any(v is BAD_FLAG for v in words.values()):
            return None
        in_stock = [words[w] for w in columns[layout.in_stock]]  # type: ignore[misc]
    covariates = covariate_json_column(columns, layout, n)
    if covariates is None:
        return None
    return _Chunk(
        skus=list(skus),
        periods=list(periods),
        ordinals=np.array(list(map(ordinal_of.__getitem__, periods)), dtype=np.int64),
        price=price.tolist(),
        units=units.tolist(),
        unit_cost=unit_cost,
        in_stock=in_stock,
        covariates=covariates,
        lines=np.array(row_lines, dtype=np.int64),
    )


def _parse_row(
    cells: list[str], line: int, layout: Layout, errors: CsvErrors
) -> tuple[str, str, float, float, float | None, bool | None, str | None] | None:
    if len(cells) != layout.width:
        errors.add(line, None, f"expected {layout.width} fields, found {len(cells)}")
        return None
    ok = True
    sku = cells[layout.sku].strip()
    if not _SKU_RE.match(sku):
        errors.add(line, "sku", "a sku is 1-64 letters, digits, '.', '_' or '-'")
        ok = False
    period = cells[layout.period].strip()
    try:
        day = dt.date.fromisoformat(period)
    except ValueError:
        errors.add(line, "period", f"{period!r} is not an ISO date (YYYY-MM-DD)")
        ok = False
    else:
        period = day.isoformat()
        if not period_in_range(day):
            errors.add(line, "period", f"a period lies from {PERIOD_RANGE_TEXT}")
            ok = False
    price = finite_number(cells[layout.price])
    if price is None or price <= 0:
        errors.add(line, "price", "price must be a finite number above zero")
        ok = False
    units = finite_number(cells[layout.units])
    if units is None or units < 0:
        errors.add(line, "units", "units must be a finite number, zero or more")
        ok = False
    unit_cost: float | None = None
    if layout.unit_cost is not None and cells[layout.unit_cost].strip():
        unit_cost = finite_number(cells[layout.unit_cost])
        if unit_cost is None or unit_cost < 0:
            errors.add(line, "unit_cost", "unit_cost must be a finite number, zero or more")
            ok = False
    in_stock: bool | None = None
    if layout.in_stock is not None and cells[layout.in_stock].strip():
        word = cells[layout.in_stock].strip().lower()
        if word in TRUE_WORDS:
            in_stock = True
        elif word in FALSE_WORDS:
            in_stock = False
        else:
            errors.add(line, "in_stock", "in_stock must be true/false, yes/no or 1/0")
            ok = False
    parts = []
    for index, name in layout.covariates:
        cell = cells[index]
        if not cell.strip():
            continue  # an empty cell means no value for that period
        value = finite_number(cell)
        if value is None:
            errors.add(
                line,
                name,
                f"covariate {name!r} must be a finite number written as -12.5 or 2.5e3, "
                f"got {cell!r}",
            )
            ok = False
        else:
            parts.append(f'"{name}":{value!r}')
    if not ok:
        return None
    assert price is not None and units is not None
    covariates = "{" + ",".join(sorted(parts)) + "}" if parts else None
    return sku, period, price, units, unit_cost, in_stock, covariates


class _GrowingInt64:
    """An append-only int64 buffer: 8 bytes a value instead of a Python int's ~36."""

    def __init__(self) -> None:
        self._chunks: list[np.ndarray] = []
        self._current: list[int] = []

    def append(self, value: int) -> None:
        self._current.append(value)
        if len(self._current) >= 65_536:
            self._chunks.append(np.array(self._current, dtype=np.int64))
            self._current = []

    def extend(self, values: np.ndarray) -> None:
        if self._current:
            self._chunks.append(np.array(self._current, dtype=np.int64))
            self._current = []
        self._chunks.append(np.asarray(values, dtype=np.int64))

    def values(self) -> np.ndarray:
        tail = np.array(self._current, dtype=np.int64)
        return np.concatenate([*self._chunks, tail]) if self._chunks else tail


def _report_duplicates(keys: np.ndarray, lines: np.ndarray, errors: CsvErrors) -> None:
    if keys.size < 2:
        return
    order = np.argsort(keys, kind="stable")
    sorted_keys = keys[order]
    repeats = np.flatnonzero(sorted_keys[1:] == sorted_keys[:-1])
    for position in repeats[:MAX_REPORTED_ERRORS]:
        first, again = int(lines[order[position]]), int(lines[order[position + 1]])
        errors.add(again, "period", f"sku and period repeat line {first}")
