"""Request and response bodies: the HTTP edge. Tables and domain results never leave the server."""

from __future__ import annotations

import datetime as dt
import re
from typing import Annotated, Generic, Literal, TypeVar

from pydantic import (
    AfterValidator,
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    StringConstraints,
)

from service.core.bounds import PERIOD_RANGE_TEXT, period_in_range

# Query parameters take dates and times only as the OpenAPI formats name them: pydantic
# alone would also read a number as seconds since 1970, or a date as a date-time.
_ISO_DATE = re.compile(r"\d{4}-\d{2}-\d{2}")
_RFC3339 = re.compile(r"\d{4}-\d{2}-\d{2}[Tt]\d{2}:\d{2}:\d{2}(\.\d+)?([Zz]|[+-]\d{2}:\d{2})")


# "+01:00" sent unencoded in a query string arrives as " 01:00" (a bare + means a space).
_PLUS_AS_SPACE = re.compile(r"\d{4}-\d{2}-\d{2}[Tt]\d{2}:\d{2}:\d{2}(\.\d+)? \d{2}:\d{2}")


def _text_matching(pattern: re.Pattern[str], example: str) -> BeforeValidator:
    def check(value: object) -> object:
        if isinstance(value, str) and _PLUS_AS_SPACE.fullmatch(value):
            raise ValueError(
                f"expected text like {example}; a '+' in a query string must be sent as "
                "%2B (a bare '+' means a space), e.g. 2026-12-01T00:00:00%2B01:00"
            )
        if not isinstance(value, str) or not pattern.fullmatch(value):
            raise ValueError(f"expected text like {example}")
        return value

    return BeforeValidator(check)


DateText = Annotated[dt.date, _text_matching(_ISO_DATE, "2026-12-01")]
DateTimeText = Annotated[dt.datetime, _text_matching(_RFC3339, "2026-12-01T00:00:00Z")]

SKU_PATTERN = r"^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$"
NAME_PATTERN = r"^[A-Za-z_][A-Za-z0-9_.-]{0,63}$"

Sku = Annotated[str, StringConstraints(pattern=SKU_PATTERN)]
Family = Annotated[str, StringConstraints(pattern=SKU_PATTERN)]
CovariateName = Annotated[str, StringConstraints(pattern=NAME_PATTERN)]
Money = Annotated[float, Field(strict=True, ge=0, allow_inf_nan=False)]
PositiveMoney = Annotated[float, Field(strict=True, gt=0, allow_inf_nan=False)]
Currency = Annotated[str, StringConstraints(pattern=r"^[A-Z]{3}$")]
# Minus zero is zero: PostgreSQL's JSON numbers keep no sign of zero, so both databases
# store 0.
FiniteNumber = Annotated[
    float, Field(strict=True, allow_inf_nan=False), AfterValidator(lambda v: v + 0.0)
]


def _period_in_range(day: dt.date) -> dt.date:
    if not period_in_range(day):
        raise ValueError(f"a period lies from {PERIOD_RANGE_TEXT}")
    return day


Period = Annotated[
    dt.date,
    AfterValidator(_period_in_range),
    Field(description=f"ISO date of the period's first day, from {PERIOD_RANGE_TEXT}"),
]

T = TypeVar("T")


class Strict(BaseModel):
    """Bodies refuse unknown fields; numeric fields refuse strings and booleans."""

    model_config = ConfigDict(extra="forbid")


class Page(BaseModel, Generic[T]):
    items: list[T]
    next_cursor: str | None = Field(
        description="Pass as `cursor` to get the next page; null on the last page"
    )


class ProblemItem(BaseModel):
    message: str
    field: str | None = None
    line: int | None = Field(default=None, description="CSV line number (the header is line 1)")
    column: str | None = None


class Problem(BaseModel):
    """An RFC 9457 problem document (media type application/problem+json)."""

    type: str
    title: str
    status: int
    detail: str
    instance: str | None = None
    errors: list[ProblemItem] | None = None


class Health(BaseModel):
    status: Literal["ok"]


class Readiness(BaseModel):
    status: Literal["ready", "not ready"]
    database: Literal["reachable", "unreachable"]
    schema_step: str | None = Field(description="The schema step the database is at")
    latest_step: str | None = Field(description="The latest schema step this version knows")
