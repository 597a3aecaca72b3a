"""The stored observations of a batch of products as float arrays, through a DB-API cursor.

The part of reading histories that talks to the database: one query reads the rows of
a whole batch, and they become numpy arrays in bulk, so the cost per row stays a few
C-level operations. It needs only the standard library and numpy, so that a refit job
on SQLite can run it in a process of its own (`service.estimation.history_reader`) beside the
fitting; `service.estimation.histories` turns its arrays into per-product histories.

A caller that knows which covariates it needs (a refit job: those its spec names) has
the database take them out of the stored JSON documents, so that no document is decoded
in Python: PostgreSQL hands each over as a float column; SQLite hands over all of a row's
numbers as one JSON array (one parse of the document instead of one per name), whose
text numpy reads in one call. Without names, every covariate is read from the documents.
"""

from __future__ import annotations

import json
import re
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np

Fetch = Callable[[str, Sequence[Any]], Sequence[Any]]
"""Runs a query with its parameters in the caller's transaction; all rows as tuples."""

RowsRead = tuple[np.ndarray, np.ndarray, dict[str, np.ndarray]]
"""Product id per row; days since 1970-01-01, price, units, unit_cost, in_stock per row
as a float matrix; one float array per covariate (``nan`` where a period has none)."""

# Periods as days since 1970-01-01 (exact in a double) and an unknown in_stock as in
# stock, so that every value read is a number or NULL and the rows become one float
# matrix in one call.
_DAYS = {
    "sqlite": "CAST(julianday(period) - 2440587.5 AS INTEGER)",
    "postgresql": "period - DATE '1970-01-01'",
}
_IN_STOCK = {"sqlite": "coalesce(in_stock, 1)", "postgresql": "coalesce(in_stock, TRUE)"}
# One covariate as a float column, NULL where a period has none. The JSON path (SQLite,
# where a name in double quotes is one key) or key (PostgreSQL) is a bound parameter.
_COVARIATE = {
    "sqlite": "json_extract(covariates, ?)",
    "postgresql": "(covariates ->> %s::text)::float8",
}
_FROM = "FROM observations WHERE product_id IN ({ids}) ORDER BY product_id, period"
_COUNTS = (
    "SELECT product_id, count(*) FROM observations WHERE product_id IN ({ids}) "
    "GROUP BY product_id ORDER BY product_id"
)
# What SQLite's arrays of numbers are made of, once brackets are gone and null is nan.
_NOT_NUMBER_TEXT = str.maketrans("", "", "0123456789+-.eEna,")
# An integer minus zero ("-0", which CSV imports store as sent): JSON makes it the
# integer 0, a float parser -0.0.
_MINUS_ZERO_INTEGER = re.compile(r"(?<![0-9.eE])-0(?![0-9.eE])")


def read_rows(fetch: Fetch, dialect: str, ids: Sequence[int], names: list[str] | None) -> RowsRead:
    """The observations of the products ``ids``, ordered by product id and period.

    ``names``: the covariates to read, each a name the service accepts (None: every
    covariate of the stored documents). Run it in one read transaction.
    """
    id_list = ",".join(str(int(i)) for i in ids)
    if names is not None and len(names) > 1 and dialect == "sqlite":
        read = _read_sqlite_arrays(fetch, id_list, names)
        if read is not None:
            return read
    return _read_plain(fetch, dialect, id_list, names)


def _read_plain(fetch: Fetch, dialect: str, ids: str, names: list[str] | None) -> RowsRead:
    """The plain way: a row per observation, covariates as float columns (or documents)."""
    head = f"product_id, {_DAYS[dialect]}, price, units, unit_cost, {_IN_STOCK[dialect]}"
    if names is None:
        rows = fetch(f"SELECT {head}, covariates {_FROM.format(ids=ids)}", ())
        values = _covariate_columns([row[6] for row in rows])
        rows = [row[:6] for row in rows]
        width = 6
    else:
        extracted = "".join(f", {_COVARIATE[dialect]}" for _ in names)
        params = [f'$."{name}"' for name in names] if dialect == "sqlite" else names
        rows = fetch(f"SELECT {head}{extracted} {_FROM.format(ids=ids)}", params)
        width = 6 + len(names)
    # Every value is a number or NULL: one conversion makes the float matrix (NULL: nan).
    matrix = np.array(rows, dtype=np.float64).reshape(len(rows), width)
    if names is not None:
        values = {name: np.ascontiguousarray(matrix[:, 6 + i]) for i, name in enumerate(names)}
    return matrix[:, 0].astype(np.int64), matrix[:, 1:6], values


def _read_sqlite_arrays(fetch: Fetch, ids: str, names: list[str]) -> RowsRead | None:
    """SQLite, two covariates or more: each row's covariates as one JSON array.

    ``json_extract`` with several paths parses the document once and writes the numbers
    as they are stored, so numpy's reading of the text gives the doubles ``json.loads``
    would. The product ids come from a count per product in the same read transaction
    (one snapshot), which spares a value per row. None if a stored value is not a number
    (the plain way then reads them as it always did).
    """
    counts = fetch(_COUNTS.format(ids=ids), ())
    no_values = "[" + ",".join(["null"] * len(names)) + "]"
    paths = ", ".join("?" for _ in names)
    rows = fetch(
        f"SELECT {_DAYS['sqlite']}, price, units, unit_cost, {_IN_STOCK['sqlite']}, "
        f"coalesce(json_extract(covariates, {paths}), ?) {_FROM.format(ids=ids)}",
        [*(f'$."{name}"' for name in names), no_values],
    )
    if len(rows) != sum(n for _, n in counts):
        raise RuntimeError("observations changed within one read transaction")
    text = ",".join([row[5] for row in rows]).replace("[", "").replace("]", "")
    text = text.replace("null", "nan")
    if text.translate(_NOT_NUMBER_TEXT):
        return None
    if "-0" in text:
        text = _MINUS_ZERO_INTEGER.sub("0", text)
    numbers = np.fromstring(text, sep=",") if rows else np.empty(0)
    if numbers.size != len(rows) * len(names):
        return None
    covariates = numbers.reshape(len(rows), len(names))
    matrix = np.array([row[:5] for row in rows], dtype=np.float64).reshape(len(rows), 5)
    product_id = np.repeat(
        np.array([p for p, _ in counts], dtype=np.int64),
        np.array([n for _, n in counts], dtype=np.int64),
    )
    values = {name: np.ascontiguousarray(covariates[:, i]) for i, name in enumerate(names)}
    return product_id, matrix, values


def _covariate_columns(raw: Sequence[object]) -> dict[str, np.ndarray]:
    """One float array per covariate name, ``nan`` where a period has no value."""
    if not raw:
        return {}
    if isinstance(next((v for v in raw if v is not None), None), str):
        # SQLite returns JSON text: parse every row in one call instead of one per row.
        documents = json.loads("[" + ",".join(v if v is not None else "null" for v in raw) + "]")  # type: ignore[misc]
    else:
        documents = list(raw)
    names = sorted({name for doc in documents if doc for name in doc})
    return {
        name: np.array(
            [doc.get(name, np.nan) if doc else np.nan for doc in documents], dtype=np.float64
        )
        for name in names
    }
