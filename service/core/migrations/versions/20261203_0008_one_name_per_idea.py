"""one name per idea: wrong sign, refit_unchanged, allow_wrong_sign, unchanged, no_active_fit

Stored documents used older names for three ideas, and this step renames them in place:

- the wrong-signed own-price effect: the fit warning ``own_price_positive`` and the
  quality gate ``expected_sign`` become ``wrong_sign``; the recommendation warnings
  ``own_price_wrong_sign_forced`` and ``draws_wrong_sign`` become ``wrong_sign_allowed``
  and ``wrong_sign_draws``;
- the switch ``force``: ``refit_unchanged`` in a job's or schedule's options,
  ``allow_wrong_sign`` in a recommendation request (also inside a job's or schedule's
  ``request``);
- the count ``skipped``: ``unchanged`` for a refit job, ``no_active_fit`` for a reprice job
  (in jobs and their partitions), and the reason "skipped: no active fit" becomes "no
  active fit".

Only rows whose JSON text holds an old name are read. The downgrade restores the old names.

Revision ID: 0008
Revises: 0007
Create Date: 2026-12-03
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

import sqlalchemy as sa
from alembic import op
from sqlalchemy.dialects import postgresql

revision: str = "0008"
down_revision: str | None = "0007"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

_JSON = sa.JSON().with_variant(postgresql.JSONB(), "postgresql")
_BATCH = 500

FIT_WARNINGS = {"own_price_positive": "wrong_sign"}
GATES = {"expected_sign": "wrong_sign"}
PRICING_WARNINGS = {
    "own_price_wrong_sign_forced": "wrong_sign_allowed",
    "draws_wrong_sign": "wrong_sign_draws",
}
NO_FIT_REASON = ("skipped: no active fit", "no active fit")
REJECTED = "rejected by the quality gates: "

Doc = Any
Change = Callable[[Doc], Doc]


def _flip(names: dict[str, str], back: bool) -> dict[str, str]:
    return {v: k for k, v in names.items()} if back else names


def _rename_key(doc: Doc, old: str, new: str) -> Doc:
    if not isinstance(doc, dict) or old not in doc:
        return doc
    return {(new if k == old else k): v for k, v in doc.items()}


def _codes(items: Doc, names: dict[str, str], field: str) -> Doc:
    if not isinstance(items, list):
        return items
    return [
        {**i, field: names.get(str(i.get(field)), i.get(field))} if isinstance(i, dict) else i
        for i in items
    ]


def fit_result(back: bool) -> Change:
    names = _flip(FIT_WARNINGS, back)
    return lambda doc: (
        {**doc, "warnings": _codes(doc.get("warnings"), names, "code")}
        if isinstance(doc, dict)
        else doc
    )


def fit_gates(back: bool) -> Change:
    names = _flip(GATES, back)
    return lambda doc: (
        {**doc, "checks": _codes(doc.get("checks"), names, "name")}
        if isinstance(doc, dict)
        else doc
    )


def price_request(back: bool) -> Change:
    old, new = ("allow_wrong_sign", "force") if back else ("force", "allow_wrong_sign")
    return lambda doc: _rename_key(doc, old, new)


def recommendation_result(back: bool) -> Change:
    names = _flip(PRICING_WARNINGS, back)
    return lambda doc: (
        {**doc, "warnings": _codes(doc.get("warnings"), names, "code")}
        if isinstance(doc, dict)
        else doc
    )


def job_options(back: bool) -> Change:
    old, new = ("refit_unchanged", "force") if back else ("force", "refit_unchanged")
    request = price_request(back)

    def change(doc: Doc) -> Doc:
        doc = _rename_key(doc, old, new)
        if isinstance(doc, dict) and isinstance(doc.get("request"), dict):
            doc = {**doc, "request": request(doc["request"])}
        return doc

    return change


def counts(kind: str, back: bool) -> Change:
    """``skipped`` names the refit's unchanged and the reprice's unfitted products."""
    count = "unchanged" if kind == "refit" else "no_active_fit"

    def change(doc: Doc) -> Doc:
        if not isinstance(doc, dict):
            return doc
        if back:
            out = {k: v for k, v in doc.items() if k not in ("unchanged", "no_active_fit")}
            out["skipped"] = int(doc.get(count) or 0)
            return out
        return _rename_key(doc, "skipped", count)

    return change


def errors(back: bool) -> Change:
    """Per-product reasons: the reprice's "no active fit" and the gate names of rejections."""
    gates = _flip(GATES, back)
    no_fit, said = NO_FIT_REASON[::-1] if back else NO_FIT_REASON

    def reason(text: Any) -> Any:
        if not isinstance(text, str):
            return text
        if text == no_fit:
            return said
        if text.startswith(REJECTED):
            names = text.removeprefix(REJECTED).split(", ")
            return REJECTED + ", ".join(gates.get(n, n) for n in names)
        return text

    return lambda doc: (
        [{**e, "reason": reason(e.get("reason"))} if isinstance(e, dict) else e for e in doc]
        if isinstance(doc, list)
        else doc
    )


def _rewrite(
    table_name: str,
    key: str,
    changes: dict[str, Change],
    needles: Sequence[str],
    where: sa.ColumnElement[bool] | None = None,
) -> None:
    """Apply ``changes`` (column -> change) to rows whose JSON text holds a needle."""
    bind = op.get_bind()
    table = sa.table(table_name, sa.column(key, sa.String), *(sa.column(c, _JSON) for c in changes))
    holds = sa.or_(*(sa.cast(table.c[c], sa.Text).like(f"%{n}%") for c in changes for n in needles))
    condition = holds if where is None else sa.and_(holds, where)
    last: Any = None
    while True:
        query = sa.select(table.c[key], *(table.c[c] for c in changes)).where(condition)
        if last is not None:
            query = query.where(table.c[key] > last)
        rows = bind.execute(query.order_by(table.c[key]).limit(_BATCH)).all()
        if not rows:
            return
        for row in rows:
            values = {}
            for i, (column, change) in enumerate(changes.items(), start=1):
                before = row[i]
                after = change(before)
                if after != before:
                    values[column] = after
            if values:
                bind.execute(sa.update(table).where(table.c[key] == row[0]).values(**values))
        last = rows[-1][0]


def _jobs(back: bool) -> None:
    needles = (
        ("refit_unchanged", "allow_wrong_sign", "unchanged", "no_active_fit", "no active fit")
        + tuple(GATES.values())
        if back
        else ("force", "skipped", *GATES)
    )
    kind = sa.column("kind", sa.String)
    for job_kind in ("refit", "reprice"):
        _rewrite(
            "jobs",
            "id",
            {
                "options": job_options(back),
                "counts": counts(job_kind, back),
                "errors": errors(back),
            },
            needles,
            where=kind == job_kind,
        )
        jobs = sa.table("jobs", sa.column("id", sa.Integer), sa.column("kind", sa.String))
        _rewrite(
            "job_partitions",
            "id",
            {"counts": counts(job_kind, back), "errors": errors(back)},
            needles,
            where=sa.column("job_id", sa.Integer).in_(
                sa.select(jobs.c.id).where(jobs.c.kind == job_kind)
            ),
        )


def _run(back: bool) -> None:
    _rewrite(
        "fits",
        "id",
        {"result": fit_result(back), "gates": fit_gates(back)},
        [*_flip(FIT_WARNINGS, back), *_flip(GATES, back)],
    )
    _rewrite(
        "recommendations",
        "id",
        {"request": price_request(back), "result": recommendation_result(back)},
        ["allow_wrong_sign", *PRICING_WARNINGS.values()] if back else ["force", *PRICING_WARNINGS],
    )
    _jobs(back)
    _rewrite(
        "schedules",
        "name",
        {"job": job_options(back)},
        ["refit_unchanged", "allow_wrong_sign"] if back else ["force"],
    )


def upgrade() -> None:
    _run(back=False)


def downgrade() -> None:
    _run(back=True)
