"""Opaque cursors for keyset pagination: base64url of a small JSON document."""

from __future__ import annotations

import base64
import json
from typing import Any

from service.errors import ErrorItem, InvalidInput


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
        raise InvalidInput(
            "the cursor is not one this server issued",
            errors=[ErrorItem(field="cursor", message="malformed cursor")],
        )
    return value
