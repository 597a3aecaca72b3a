"""Opaque cursors for keyset pagination: base64url of a small JSON document."""

from __future__ import annotations

import base64
import datetime as dt
import json
from typing import Any

from service.core.errors import ErrorItem, InvalidInput


def encode_cursor(position: dict[str, Any]) -> str:
    raw = json.dumps(position, separators=(",", ":"), sort_keys=True).encode()
    return base64.urlsafe_b64encode(raw).decode().rstrip("=")


def decode_cursor(cursor: str | None) -> dict[str, Any] | None:
    if cursor is None:
        return None
    try:
        padded = cursor + "=" * (-len(cursor) % 4)
        value = json.loads(base64.urlsafe_b64decode(padded.encode()))
    except (ValueError, UnicodeDecodeError):
        value = None
    if not isinstance(value, dict):
        raise _malformed()
    return value


MAX_ID = 2**31 - 1
"""Largest row id a client may name (ids are 32-bit integers in both databases)."""


def cursor_date(position: dict[str, Any] | None, key: str) -> dt.date | None:
    """A date position from a decoded cursor, or 422 if it is not a sane one."""
    if position is None or key not in position:
        return None
    try:
        return dt.date.fromisoformat(str(position[key]))
    except ValueError:
        raise _malformed() from None


def _malformed() -> InvalidInput:
    return InvalidInput(
        "the cursor is not one this server issued",
        errors=[ErrorItem(field="cursor", message="malformed cursor")],
    )


def cursor_int(position: dict[str, Any] | None, key: str) -> int | None:
    """An integer position from a decoded cursor, or 422 if it is not a sane one."""
    if position is None or key not in position:
        return None
    value = position[key]
    if not isinstance(value, int) or isinstance(value, bool) or not 0 <= value <= MAX_ID:
        raise _malformed()
    return value
