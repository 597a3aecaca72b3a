"""The engine's JSON encoder (orjson, with the standard library for what orjson refuses).

The reference is Python's own decoder: every value must read back equal (floats in their
shortest round-trip form, checked on the extremes of the double range), and text must
be storable as UTF-8 (a lone surrogate is escaped, as the standard library escapes it).
"""

from __future__ import annotations

import json

from service.core.json_text import dumps


def test_values_read_back_equal() -> None:
    values = [
        {"a": 0.1, "b": [1e-05, -0.0, 5e-324, 1.7976931348623157e308], "c": "é"},
        {"big": 2**70, "n": None, "t": True},  # beyond 64 bits: the standard library
        {"lone": "\ud800"},  # not UTF-8: the standard library, escaped
    ]
    for value in values:
        text = dumps(value)
        assert json.loads(text) == value
        text.encode("utf-8")


def test_non_finite_numbers_become_null() -> None:
    assert dumps({"x": float("nan"), "y": float("inf")}) == '{"x":null,"y":null}'
