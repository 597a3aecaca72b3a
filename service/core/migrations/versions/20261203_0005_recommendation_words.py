"""recommendation words: stored answers say what kind of optimum and how it was searched

Stored recommendation results carried an optimiser's own vocabulary (``method``,
``success``, ``status``, ``message``, ``nit``). They become ``optimum``, ``search``,
``search_steps`` and ``summary``, so every stored answer reads back in today's shape.

Revision ID: 0005
Revises: 0004
Create Date: 2026-12-03
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from typing import Any

import sqlalchemy as sa
from alembic import op

revision: str = "0005"
down_revision: str | None = "0004"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

_OPTIMUM = {0: "interior", 1: "held_by_constraint", 2: "no_finite_optimum"}
_SEARCH = {
    "continuous": "continuous",
    "grid": "allowed_prices",
    "grid-local": "allowed_prices_local",
}
_SUMMARY = (
    ("Optimum on constraints:", "Optimum held by constraints:"),
    ("Optimum on a constraint:", "Optimum held by a constraint:"),
    ("Objective unbounded;", "No finite optimum;"),
)
_BATCH = 1000


def _new_words(result: dict[str, Any]) -> dict[str, Any]:
    if "optimum" in result or "status" not in result:
        return result
    out = {
        k: v
        for k, v in result.items()
        if k not in ("method", "success", "status", "message", "nit")
    }
    out["optimum"] = _OPTIMUM.get(int(result.get("status") or 0), "interior")
    out["search"] = _SEARCH.get(str(result.get("method")), "continuous")
    out["search_steps"] = int(result.get("nit") or 0)
    summary = re.sub(r" SLSQP: .*$", "", str(result.get("message") or ""))
    for old, new in _SUMMARY:
        summary = summary.replace(old, new)
    out["summary"] = summary
    return out


def _old_words(result: dict[str, Any]) -> dict[str, Any]:
    if "status" in result or "optimum" not in result:
        return result
    out = {
        k: v for k, v in result.items() if k not in ("optimum", "search", "search_steps", "summary")
    }
    out["method"] = {v: k for k, v in _SEARCH.items()}.get(str(result.get("search")), "continuous")
    out["success"] = True
    out["status"] = {v: k for k, v in _OPTIMUM.items()}.get(str(result.get("optimum")), 0)
    out["nit"] = int(result.get("search_steps") or 0)
    summary = str(result.get("summary") or "")
    for old, new in _SUMMARY:
        summary = summary.replace(new, old)
    out["message"] = summary
    return out


def _rewrite(change: Any) -> None:
    bind = op.get_bind()
    json_type = sa.JSON().with_variant(sa.dialects.postgresql.JSONB(), "postgresql")
    table = sa.table("recommendations", sa.column("id", sa.Integer), sa.column("result", json_type))
    last = 0
    while True:
        rows = bind.execute(
            sa.select(table.c.id, table.c.result)
            .where(table.c.id > last)
            .order_by(table.c.id)
            .limit(_BATCH)
        ).all()
        if not rows:
            return
        for row_id, result in rows:
            if isinstance(result, dict):
                changed = change(result)
                if changed is not result:
                    bind.execute(
                        sa.update(table).where(table.c.id == row_id).values(result=changed)
                    )
        last = rows[-1][0]


def upgrade() -> None:
    _rewrite(_new_words)


def downgrade() -> None:
    _rewrite(_old_words)
