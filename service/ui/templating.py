"""Jinja2 templates of the analyst pages, with the number formats they share."""

from __future__ import annotations

import datetime as dt
import math
from pathlib import Path
from typing import Any

from jinja2 import Environment, FileSystemLoader, StrictUndefined, select_autoescape

from service.pricing.money import format_money
from service.ui import words

TEMPLATE_DIR = Path(__file__).resolve().parent / "templates"
STATIC_DIR = Path(__file__).resolve().parent / "static"


def _finite(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value)


def money(value: Any, currency: str | None = None) -> str:
    """A price or an amount to the currency's minor unit (2 decimals when none is given)."""
    return format_money(float(value), currency, with_code=False) if _finite(value) else "–"


def number(value: Any, digits: int = 3) -> str:
    """Significant digits, without scientific notation for everyday magnitudes."""
    if not _finite(value):
        return "–"
    if value != 0 and (abs(value) >= 1e6 or abs(value) < 1e-4):
        return f"{value:.{digits}g}"
    decimals = max(digits - 1 - math.floor(math.log10(abs(value))), 0) if value else digits - 1
    return f"{value:,.{decimals}f}"


def signed(value: Any, decimals: int = 2) -> str:
    if not _finite(value):
        return "–"
    text = f"{abs(value):,.{decimals}f}"
    return ("−" if value < 0 else "+" if value > 0 else "±") + text


def percent(value: Any, decimals: int = 1) -> str:
    """A fraction (0.153) as a percentage."""
    return f"{100 * value:.{decimals}f}%" if _finite(value) else "–"


def pvalue(value: Any) -> str:
    if not _finite(value):
        return "–"
    return "< 0.001" if value < 0.001 else f"{value:.3f}"


def when(value: Any) -> str:
    if isinstance(value, dt.datetime):
        return value.astimezone(dt.UTC).strftime("%Y-%m-%d %H:%M UTC")
    return str(value) if value is not None else "–"


def sort_value(value: Any) -> str:
    """The machine-readable value a table cell sorts by (empty: no value)."""
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return ""
    return str(value)


def environment() -> Environment:
    env = Environment(
        loader=FileSystemLoader(TEMPLATE_DIR),
        autoescape=select_autoescape(["html"]),
        undefined=StrictUndefined,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    env.globals.update(
        rules_words=words.rules_words,
        pricing_badge=words.pricing_badge,
        gate_label=words.gate_label,
    )
    env.filters.update(
        money=money,
        number=number,
        signed=signed,
        percent=percent,
        pvalue=pvalue,
        when=when,
        sort_value=sort_value,
        gate_label=words.gate_label,
    )
    return env


templates = environment()


def render(name: str, **context: Any) -> str:
    return templates.get_template(name).render(**context)
