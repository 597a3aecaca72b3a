"""Request and response bodies of API keys."""

from __future__ import annotations

import datetime as dt
from typing import Annotated, Literal

from pydantic import (
    BaseModel,
    Field,
    StringConstraints,
)

from service.core.schemas import Strict
from service.core.tables import (
    ApiKeyRow,
    as_utc,
    as_utc_or_none,
)

Scope = Literal["read", "write", "admin", "approve"]


class ApiKeyIn(Strict):
    name: Annotated[str, StringConstraints(min_length=1, max_length=100)]
    scopes: Annotated[list[Scope], Field(min_length=1)]


class ApiKeyOut(BaseModel):
    id: str
    name: str
    scopes: list[str]
    created_at: dt.datetime
    last_used_at: dt.datetime | None
    revoked_at: dt.datetime | None


class ApiKeyCreated(ApiKeyOut):
    secret: str = Field(description="The full key; shown only in this response")


# -- rows to responses


def api_key_out(row: ApiKeyRow) -> ApiKeyOut:
    return ApiKeyOut(
        id=row.id,
        name=row.name,
        scopes=list(row.scopes),
        created_at=as_utc(row.created_at),
        last_used_at=as_utc_or_none(row.last_used_at),
        revoked_at=as_utc_or_none(row.revoked_at),
    )
