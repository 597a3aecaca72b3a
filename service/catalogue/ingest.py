"""Turning uploaded observations (JSON batches, CSV files) into stored rows, all or nothing.

A CSV import streams: rows are parsed, checked and written in chunks inside one
transaction, so memory stays bounded (plus 12 bytes a row for the duplicate check);
any bad row rolls the whole import back. Errors name the CSV line and column.

A seekable file is first tried column by column (:mod:`service.catalogue.csv_columns`);
when that path gives up, the file is read again row by row
(:mod:`service.catalogue.csv_rows`).
"""

from __future__ import annotations

import csv
import datetime as dt
import gc
import io
import threading
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from typing import IO

from sqlalchemy.orm import Session

from service.catalogue import csv_columns
from service.catalogue.csv_layout import CsvErrors, Layout, bad_utf8_line, read_header
from service.catalogue.csv_rows import stream_rows
from service.catalogue.observations import observation_writer
from service.catalogue.schemas import ObservationIn
from service.catalogue.upsert_outcome import UpsertOutcome
from service.core.errors import ErrorItem, InvalidInput


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


def import_csv(
    session: Session, raw: IO[bytes], *, create_products: bool, chunk_rows: int
) -> UpsertOutcome:
    """Stream a CSV of observations into storage in one transaction (the caller's)."""
    errors = CsvErrors()
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
                ErrorItem(line=bad_utf8_line(raw, 1), message=f"not valid UTF-8: {exc.reason}")
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
    layout = read_header([h.strip() for h in header], errors)
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
        return stream_rows(session, reader, layout, errors, create_products, chunk_rows, raw)


def _import_clean(
    session: Session, raw: IO[bytes], layout: Layout, create_products: bool
) -> UpsertOutcome | None:
    """The column-wise import in a savepoint, rolled back when the file is not clean."""
    savepoint = session.begin_nested()
    done = csv_columns.import_clean_csv(session, raw, layout, create_products=create_products)
    if done is None:
        savepoint.rollback()
    else:
        savepoint.commit()
    return done


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
