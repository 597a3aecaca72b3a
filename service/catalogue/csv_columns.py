"""Clean CSV imports, column by column, through Apache Arrow's CSV reader.

Arrow parses and converts the text in C++ threads, so a clean import spends its Python
time on checks over whole columns and on the database writes, not on one list of cells
per row. This path takes the common, clean case only: at the first thing it does not
expect (a bad or empty cell, an unknown sku, a period twice, a quoted line break) it
gives up, and :func:`service.catalogue.ingest.import_csv` rolls back what it wrote and reads the
file again row by row, which names every problem's line and column. It stores the same
values as that path.
"""

from __future__ import annotations

import datetime as dt
import re
from dataclasses import dataclass
from typing import IO

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
from sqlalchemy.orm import Session

from service.catalogue import products
from service.catalogue.csv_cells import BAD_FLAG, in_stock_value
from service.catalogue.csv_layout import Layout
from service.catalogue.observations import ObservationColumns, observation_writer
from service.catalogue.upsert_outcome import UpsertOutcome
from service.core.bounds import NUMBER_GRAMMAR, period_in_range
from service.core.schemas import SKU_PATTERN

# About 20,000 rows of a typical file a block: batches big enough to amortise the
# per-batch work, small enough to keep memory flat however long the file is.
BLOCK_BYTES = 1 << 20
_SKU_RE = re.compile(SKU_PATTERN)


class _GiveUp(Exception):
    """The file needs the row-by-row path."""


@dataclass
class _State:
    sku_ids: dict[str, int]
    sku_codes: dict[str, int]
    created: list[str]
    keys: list[np.ndarray]


def import_clean_csv(
    session: Session, raw: IO[bytes], layout: Layout, *, create_products: bool
) -> UpsertOutcome | None:
    """Import a clean file (header included) in the caller's transaction, or return
    None, leaving partial writes for the caller to roll back, when it is not clean."""
    if not _quotes_balanced(raw):
        return None
    state = _State(sku_ids={}, sku_codes={}, created=[], keys=[])
    writer = observation_writer(session)
    rows = 0
    try:
        for batch in _batches(raw, layout):
            if batch.num_rows == 0:
                continue
            columns = _checked(batch, layout, session, state, create_products)
            writer.write_columns(columns)
            rows += batch.num_rows
    except (_GiveUp, pa.ArrowException):
        return None
    if rows == 0 or _repeats(np.concatenate(state.keys)):
        return None
    inserted, updated = writer.finish()
    return UpsertOutcome(
        rows=rows, inserted=inserted, updated=updated, products_created=state.created
    )


def _quotes_balanced(raw: IO[bytes]) -> bool:
    """Whether the file has an even number of quote marks, then rewinds it.

    Arrow reads a quoted cell left open at the end of the file (an upload cut short) as
    if it were closed. Every cell this path accepts is free of stray quote marks (numbers,
    skus, ISO dates, in-stock words), so its quote marks open and close quoted cells in
    pairs, doubled ones included: an odd count means a cell left open.
    """
    start = raw.tell()
    count = 0
    while block := raw.read(BLOCK_BYTES):
        count += block.count(b'"')
    raw.seek(start)
    return count % 2 == 0


def _batches(raw: IO[bytes], layout: Layout) -> pacsv.CSVStreamingReader:
    names = [f"c{i}" for i in range(layout.width)]
    # Numbers are read as text and checked against the one number grammar
    # (:mod:`service.core.bounds`) before they are converted (:func:`_numbers`).
    types = {name: pa.string() for name in names}
    return pacsv.open_csv(
        raw,
        read_options=pacsv.ReadOptions(
            skip_rows=1, column_names=names, block_size=BLOCK_BYTES, use_threads=True
        ),
        # A quoted line break would shift line numbers: the row-by-row path takes it.
        parse_options=pacsv.ParseOptions(newlines_in_values=False, ignore_empty_lines=True),
        convert_options=pacsv.ConvertOptions(
            column_types=types,
            null_values=[""],  # only an empty cell is missing, never "NA" or "null"
            strings_can_be_null=False,
            quoted_strings_can_be_null=False,
            check_utf8=True,
        ),
    )


def _checked(
    batch: pa.RecordBatch,
    layout: Layout,
    session: Session,
    state: _State,
    create_products: bool,
) -> ObservationColumns:
    """One batch checked column by column, as stored rows; raises _GiveUp otherwise."""
    skus, sku_index = _distinct(batch.column(layout.sku))
    if not all(_SKU_RE.fullmatch(s) for s in skus):
        raise _GiveUp
    _resolve(session, skus, state, create_products)
    ids = np.array([state.sku_ids[s] for s in skus], dtype=np.int64)[sku_index]

    periods, period_index = _distinct(batch.column(layout.period))
    ordinals = np.array([_ordinal(p) for p in periods], dtype=np.int64)[period_index]
    codes = np.array(
        [state.sku_codes.setdefault(s, len(state.sku_codes)) for s in skus], dtype=np.int64
    )[sku_index]
    keys = (codes << 32) | ordinals
    if _repeats(keys):
        raise _GiveUp
    state.keys.append(keys)

    price = _required(batch.column(layout.price))
    units = _required(batch.column(layout.units))
    if not ((price > 0.0).all() and (units >= 0.0).all()):
        raise _GiveUp
    unit_cost: list[float | None] = [None] * batch.num_rows
    if layout.unit_cost is not None:
        unit_cost = _optional(batch.column(layout.unit_cost))
    in_stock: list[bool | None] = [None] * batch.num_rows
    if layout.in_stock is not None:
        in_stock = _flags(batch.column(layout.in_stock))
    return ObservationColumns(
        product_id=ids,
        period=batch.column(layout.period),
        price=price,
        units=units,
        unit_cost=unit_cost,
        in_stock=in_stock,
        covariates=_covariates(batch, layout),
    )


def _distinct(column: pa.Array) -> tuple[list[str], np.ndarray]:
    """The distinct values of a string column and each row's index into them."""
    encoded = column.dictionary_encode()
    values: list[str] = encoded.dictionary.to_pylist()
    return values, encoded.indices.to_numpy()


def _resolve(session: Session, skus: list[str], state: _State, create_products: bool) -> None:
    missing = set(skus) - state.sku_ids.keys()
    if not missing:
        return
    state.sku_ids.update(products.ids_by_sku(session, skus=missing))
    missing -= state.sku_ids.keys()
    if not missing:
        return
    if not create_products:
        raise _GiveUp  # the row-by-row path names the lines of unknown skus
    state.sku_ids.update(products.create_bare(session, skus=sorted(missing)))
    state.created.extend(sorted(missing))


def _ordinal(period: str) -> int:
    try:
        day = dt.date.fromisoformat(period)
    except ValueError:
        raise _GiveUp from None
    if day.isoformat() != period or not period_in_range(day):
        raise _GiveUp  # stored as given only when it is already the ISO form
    return day.toordinal()


def _repeats(keys: np.ndarray) -> bool:
    ordered = np.sort(keys)  # sorting int64 beats hashing them here
    return bool((ordered[1:] == ordered[:-1]).any())


_NUMBER_PATTERN = f"^{NUMBER_GRAMMAR}$"


def _numbers(column: pa.Array) -> pa.Array:
    """A text column as doubles (an empty cell: null); gives up on a cell outside the
    number grammar, and makes a minus zero zero (as PostgreSQL would)."""
    text = pc.if_else(pc.equal(column, ""), pa.scalar(None, pa.string()), column)
    present = text.drop_null()
    if len(present) and not pc.all(pc.match_substring_regex(present, _NUMBER_PATTERN)).as_py():
        raise _GiveUp
    numbers: pa.Array = pc.add(pc.cast(text, pa.float64()), 0.0)
    return numbers


def _required(column: pa.Array) -> np.ndarray:
    numbers = _numbers(column)
    if numbers.null_count:
        raise _GiveUp
    values: np.ndarray = numbers.to_numpy()
    if not np.isfinite(values).all():
        raise _GiveUp
    return values


def _optional(column: pa.Array) -> list[float | None]:
    numbers = _numbers(column)
    if not numbers.null_count:
        return _required(column).tolist()  # type: ignore[no-any-return]
    present = numbers.drop_null().to_numpy()
    if not (np.isfinite(present).all() and (present >= 0.0).all()):
        raise _GiveUp
    values: list[float | None] = numbers.to_pylist()
    return values


def _flags(column: pa.Array) -> list[bool | None]:
    words, index = _distinct(column)
    meaning = [in_stock_value(word) for word in words]
    if any(value is BAD_FLAG for value in meaning):
        raise _GiveUp
    return np.array(meaning, dtype=object)[index].tolist()  # type: ignore[no-any-return]


def _covariates(batch: pa.RecordBatch, layout: Layout) -> pa.Array | None:
    """Each row's covariates as compact JSON text with the names in order, built in C++.

    Arrow writes a double in its shortest round-trip form ("0", "1.0293", "1e+20"),
    which is valid JSON for every finite value.
    """
    if not layout.covariates:
        return None
    parts: list[pa.Array | str] = []
    for position, (index, name) in enumerate(sorted(layout.covariates, key=lambda c: c[1])):
        column = _numbers(batch.column(index))
        if column.null_count:
            raise _GiveUp  # a row without some covariate: the row path leaves its key out
        if not np.isfinite(column.to_numpy()).all():
            raise _GiveUp
        parts.append(("{" if position == 0 else ",") + f'"{name}":')
        parts.append(pc.cast(column, pa.string()))
    parts.append("}")
    joined: pa.Array = pc.binary_join_element_wise(*parts, "")
    return joined
