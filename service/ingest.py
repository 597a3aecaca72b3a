"""Turning uploaded observations (JSON batches, CSV files) into stored rows, all or nothing.

A CSV import streams: rows are parsed, checked and written in chunks inside one
transaction, so memory stays bounded (plus 12 bytes a row for the duplicate check);
any bad row rolls the whole import back. Errors name the CSV line and column.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import math
import re
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import IO

import numpy as np
from sqlalchemy.orm import Session

from service import products
from service.errors import ErrorItem, InvalidInput
from service.observations import ObservationWriter
from service.schemas import NAME_PATTERN, SKU_PATTERN, ObservationIn

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
    writer = ObservationWriter(session)
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
    reader = csv.reader(text)
    try:
        header = next(reader, None)
    except (UnicodeDecodeError, csv.Error) as exc:
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

    writer = ObservationWriter(session)
    sku_ids: dict[str, int] = {}
    unknown_reported: set[str] = set()
    created: list[str] = []
    sku_codes: dict[str, int] = {}
    keys = _GrowingInt64()
    lines = _GrowingInt64()
    pending: list[tuple[str, str, float, float, float | None, bool | None, str | None]] = []
    n_rows = 0

    def flush() -> None:
        missing = {row[0] for row in pending} - sku_ids.keys()
        if missing:
            sku_ids.update(products.ids_by_sku(session, skus=missing))
            missing -= sku_ids.keys()
        if missing and create_products:
            sku_ids.update(products.create_bare(session, skus=sorted(missing)))
            created.extend(sorted(missing))
        elif missing:
            for line_no, row in zip(pending_lines, pending, strict=True):
                if row[0] in missing and row[0] not in unknown_reported:
                    unknown_reported.add(row[0])
                    errors.add(
                        line_no,
                        "sku",
                        f"unknown sku {row[0]!r} (send create_products=true to create it)",
                    )
        # A key repeated inside one chunk would make PostgreSQL refuse the statement; the
        # final duplicate check reports it, so just stop writing.
        repeated = len({(r[0], r[1]) for r in pending}) != len(pending)
        if not errors.items and not repeated:
            writer.write([(sku_ids[r[0]], *r[1:]) for r in pending])
        pending.clear()
        pending_lines.clear()

    pending_lines: list[int] = []
    try:
        for cells in reader:
            line_no = reader.line_num
            if not cells or (len(cells) == 1 and not cells[0].strip()):
                continue
            parsed = _parse_row(cells, line_no, layout, errors)
            if parsed is None:
                if errors.full:
                    break
                continue
            n_rows += 1
            code = sku_codes.setdefault(parsed[0], len(sku_codes))
            keys.append((code << 32) | dt.date.fromisoformat(parsed[1]).toordinal())
            lines.append(line_no)
            pending.append(parsed)
            pending_lines.append(line_no)
            if len(pending) >= chunk_rows:
                flush()
    except UnicodeDecodeError as exc:
        errors.add(reader.line_num + 1, None, f"not valid UTF-8: {exc.reason}")
    except csv.Error as exc:
        errors.add(reader.line_num, None, f"malformed CSV: {exc}")
    if pending:
        flush()
    if n_rows == 0 and not errors.items:
        errors.add(2, None, "the file has a header but no data rows")
    _report_duplicates(keys.values(), lines.values(), errors)
    errors.raise_if_any()
    inserted, updated = writer.finish()
    return UpsertOutcome(rows=n_rows, inserted=inserted, updated=updated, products_created=created)


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
