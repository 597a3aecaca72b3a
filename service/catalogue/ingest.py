"""Turning uploaded observations (JSON batches, CSV files) into stored rows, all or nothing.

A CSV import streams: rows are parsed, checked and written in chunks inside one
transaction, so memory stays bounded (plus 12 bytes a row for the duplicate check);
any bad row rolls the whole import back. Errors name the CSV line and column.
"""

from __future__ import annotations

import csv
import datetime as dt
import gc
import io
import itertools
import math
import re
import threading
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field
from typing import IO, Protocol

import numpy as np
from sqlalchemy.orm import Session

from service.catalogue import csv_columns, products
from service.catalogue.observations import ObservationTuple, observation_writer
from service.catalogue.schemas import ObservationIn
from service.core.errors import ErrorItem, InvalidInput
from service.core.schemas import NAME_PATTERN, SKU_PATTERN


class CsvReader(Protocol):
    """What ``csv.reader`` gives: rows, and the line the last row ended on."""

    @property
    def line_num(self) -> int: ...

    def __iter__(self) -> Iterator[list[str]]: ...

    def __next__(self) -> list[str]: ...


REQUIRED_COLUMNS = ("sku", "period", "price", "units")
OPTIONAL_COLUMNS = ("unit_cost", "in_stock")
MAX_REPORTED_ERRORS = 100
TRUE_WORDS = frozenset({"1", "true", "t", "yes", "y"})
FALSE_WORDS = frozenset({"0", "false", "f", "no", "n"})
_SKU_RE = re.compile(SKU_PATTERN)
_NAME_RE = re.compile(NAME_PATTERN)


@dataclass(frozen=True)
class UpsertOutcome:
    rows: int
    inserted: int
    updated: int
    products_created: list[str] = field(default_factory=list)


def covariates_json(values: dict[str, float]) -> str | None:
    """Compact JSON for a covariate mapping; floats are finite, so repr() is valid JSON."""
    if not values:
        return None
    return "{" + ",".join(f'"{k}":{float(v)!r}' for k, v in sorted(values.items())) + "}"


def upsert_batch(
    session: Session, *, product_id: int, observations: Sequence[ObservationIn]
) -> UpsertOutcome:
    """Write one product's JSON batch; duplicate periods in the batch reject it whole."""
    seen: dict[dt.date, int] = {}
    problems: list[ErrorItem] = []
    for index, obs in enumerate(observations):
        if obs.period in seen:
            problems.append(
                ErrorItem(
                    field=f"observations[{index}].period",
                    message=f"period {obs.period} repeats observations[{seen[obs.period]}]",
                )
            )
        seen.setdefault(obs.period, index)
    if problems:
        raise InvalidInput("the batch repeats a period; nothing was written", errors=problems)
    writer = observation_writer(session)
    writer.write(
        [
            (
                product_id,
                o.period.isoformat(),
                o.price,
                o.units,
                o.unit_cost,
                o.in_stock,
                covariates_json(o.covariates),
            )
            for o in observations
        ]
    )
    inserted, updated = writer.finish()
    return UpsertOutcome(rows=writer.rows, inserted=inserted, updated=updated)


class _CsvErrors:
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


def import_csv(
    session: Session, raw: IO[bytes], *, create_products: bool, chunk_rows: int
) -> UpsertOutcome:
    """Stream a CSV of observations into storage in one transaction (the caller's)."""
    errors = _CsvErrors()
    text = io.TextIOWrapper(raw, encoding="utf-8-sig", newline="")
    # Strict: a quoted cell left open at the end (an upload cut short) is an error,
    # not a cell that runs to the end of the file.
    reader = csv.reader(text, strict=True)
    try:
        header = next(reader, None)
    except UnicodeDecodeError as exc:
        raise InvalidInput(
            "the file is not UTF-8 CSV",
            errors=[
                ErrorItem(line=_bad_utf8_line(raw, 1), message=f"not valid UTF-8: {exc.reason}")
            ],
        ) from None
    except csv.Error as exc:
        raise InvalidInput(
            "the file is not UTF-8 CSV", errors=[ErrorItem(line=1, message=str(exc))]
        ) from None
    if header is None or not any(h.strip() for h in header):
        raise InvalidInput(
            "the file is empty: expected a header line and rows",
            errors=[ErrorItem(line=1, message="no header line")],
        )
    layout = _read_header([h.strip() for h in header], errors)
    errors.raise_if_any()
    assert layout is not None

    with cyclic_gc_paused():
        if raw.seekable():
            text.detach()  # a dropped wrapper would close the file under us
            raw.seek(0)
            done = _import_clean(session, raw, layout, create_products)
            if done is not None:
                return done
            # Not clean: read it again row by row, which names every problem.
            raw.seek(0)
            text = io.TextIOWrapper(raw, encoding="utf-8-sig", newline="")
            reader = csv.reader(text, strict=True)
            next(reader)
        return _stream_rows(session, reader, layout, errors, create_products, chunk_rows, raw)


def _import_clean(
    session: Session, raw: IO[bytes], layout: _Layout, create_products: bool
) -> UpsertOutcome | None:
    """The column-wise import in a savepoint, rolled back when the file is not clean."""
    savepoint = session.begin_nested()
    done = csv_columns.import_clean_csv(session, raw, layout, create_products=create_products)
    if done is None:
        savepoint.rollback()
    else:
        savepoint.commit()
    return done


def _bad_utf8_line(raw: IO[bytes], fallback: int) -> int:
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


_gc_pauses = 0
_gc_lock = threading.Lock()


@contextmanager
def cyclic_gc_paused() -> Iterator[None]:
    """Pause the cyclic garbage collector while an import (or a job's batch) runs.

    Parsing allocates millions of short-lived lists and tuples, which triggers a
    collection pass every few hundred rows (measured: 30% of import time). None of them
    form cycles, so reference counting frees them anyway. Nested and concurrent imports
    share one counter, so the collector resumes when the last one ends.
    """
    global _gc_pauses
    with _gc_lock:
        _gc_pauses += 1
        gc.disable()
    try:
        yield
    finally:
        with _gc_lock:
            _gc_pauses -= 1
            if _gc_pauses == 0:
                gc.enable()


def _stream_rows(
    session: Session,
    reader: CsvReader,
    layout: _Layout,
    errors: _CsvErrors,
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
        errors.add(_bad_utf8_line(raw, reader.line_num + 1), None, f"not valid UTF-8: {exc.reason}")
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
    errors: _CsvErrors,
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
    rows: list[list[str]], row_lines: list[int], layout: _Layout, errors: _CsvErrors
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


def _fast_chunk(rows: list[list[str]], row_lines: list[int], layout: _Layout) -> _Chunk | None:
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
        if day.isoformat() != p:
            return None
        ordinal_of[p] = day.toordinal()
    price = _finite_column(columns[layout.price], minimum=0.0, strict=True)
    units = _finite_column(columns[layout.units], minimum=0.0, strict=False)
    if price is None or units is None:
        return None
    unit_cost: list[float | None] = [None] * n
    if layout.unit_cost is not None:
        cost = _optional_column(columns[layout.unit_cost], minimum=0.0)
        if cost is None:
            return None
        unit_cost = cost
    in_stock: list[bool | None] = [None] * n
    if layout.in_stock is not None:
        words = {w: in_stock_value(w) for w in set(columns[layout.in_stock])}
        if any(v is BAD_FLAG for v in words.values()):
            return None
        in_stock = [words[w] for w in columns[layout.in_stock]]  # type: ignore[misc]
    covariates = _covariate_json(columns, layout, n)
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


def _finite_column(cells: Sequence[str], *, minimum: float, strict: bool) -> np.ndarray | None:
    try:
        values = np.fromiter(map(float, cells), np.float64, len(cells))
    except ValueError:
        return None
    ok = np.isfinite(values) & ((values > minimum) if strict else (values >= minimum))
    return values if bool(ok.all()) else None


def _optional_column(cells: Sequence[str], *, minimum: float) -> list[float | None] | None:
    full = _finite_column(cells, minimum=minimum, strict=False)
    if full is not None:
        return full.tolist()  # type: ignore[no-any-return]
    out: list[float | None] = []
    for cell in cells:
        if not cell.strip():
            out.append(None)
            continue
        try:
            value = float(cell)
        except ValueError:
            return None
        if not math.isfinite(value) or value < minimum:
            return None
        out.append(value)
    return out


# JSON numbers with at most two exponent digits: always finite as doubles.
_JSON_NUMBERS = re.compile(r"(?:-?(?:0|[1-9][0-9]*)(?:\.[0-9]+)?(?:[eE][+-]?[0-9]{1,2})?\n)*")


def _covariate_json(
    columns: list[tuple[str, ...]], layout: _Layout, n: int
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
        column = _optional_column(columns[index], minimum=-math.inf)
        if column is None:
            return None
        values.append(column)
    names = [name for _, name in ordered]
    out: list[str | None] = []
    for row in zip(*values, strict=True):
        parts = [f'"{k}":{v!r}' for k, v in zip(names, row, strict=True) if v is not None]
        out.append("{" + ",".join(parts) + "}" if parts else None)
    return out


@dataclass(frozen=True)
class _Layout:
    width: int
    sku: int
    period: int
    price: int
    units: int
    unit_cost: int | None
    in_stock: int | None
    covariates: tuple[tuple[int, str], ...]


def _read_header(names: list[str], errors: _CsvErrors) -> _Layout | None:
    seen: set[str] = set()
    for name in names:
        if name in seen:
            errors.add(1, name, f"column {name!r} appears more than once")
        seen.add(name)
    for name in REQUIRED_COLUMNS:
        if name not in seen:
            errors.add(1, name, f"required column {name!r} is missing")
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
    return _Layout(
        width=len(names),
        sku=names.index("sku"),
        period=names.index("period"),
        price=names.index("price"),
        units=names.index("units"),
        unit_cost=names.index("unit_cost") if "unit_cost" in seen else None,
        in_stock=names.index("in_stock") if "in_stock" in seen else None,
        covariates=tuple(covariates),
    )


def _number(text: str) -> float | None:
    try:
        value = float(text)
    except ValueError:
        return None
    return value if math.isfinite(value) else None


def _parse_row(
    cells: list[str], line: int, layout: _Layout, errors: _CsvErrors
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
        period = dt.date.fromisoformat(period).isoformat()
    except ValueError:
        errors.add(line, "period", f"{period!r} is not an ISO date (YYYY-MM-DD)")
        ok = False
    price = _number(cells[layout.price])
    if price is None or price <= 0:
        errors.add(line, "price", "price must be a finite number above zero")
        ok = False
    units = _number(cells[layout.units])
    if units is None or units < 0:
        errors.add(line, "units", "units must be a finite number, zero or more")
        ok = False
    unit_cost: float | None = None
    if layout.unit_cost is not None and cells[layout.unit_cost].strip():
        unit_cost = _number(cells[layout.unit_cost])
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
        cell = cells[index].strip()
        if not cell:
            continue  # an empty cell means no value for that period
        value = _number(cell)
        if value is None:
            errors.add(line, name, f"covariate {name!r} must be a finite number, got {cell!r}")
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


def _report_duplicates(keys: np.ndarray, lines: np.ndarray, errors: _CsvErrors) -> None:
    if keys.size < 2:
        return
    order = np.argsort(keys, kind="stable")
    sorted_keys = keys[order]
    repeats = np.flatnonzero(sorted_keys[1:] == sorted_keys[:-1])
    for position in repeats[:MAX_REPORTED_ERRORS]:
        first, again = int(lines[order[position]]), int(lines[order[position + 1]])
        errors.add(again, "period", f"sku and period repeat line {first}")
