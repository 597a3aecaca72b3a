"""reviewed prices and the audit log: recommendation states, the price record, approval
policies and the append-only audit log

Stored recommendations gain a state (``proposed``, ``approved``, ``declined``,
``superseded``) with who decided, when, at which price and why; a product's newest stored
recommendation becomes ``proposed`` and older ones ``superseded``. The price record
(``price_entries``) holds each live price from its start; the audit log
(``audit_entries``) who did what. Triggers refuse updates of both (and deletion of audit
entries on PostgreSQL; a truncation by the database's owner still works).

Revision ID: 0007
Revises: 0006
Create Date: 2026-12-03
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op
from sqlalchemy.dialects import postgresql

revision: str = "0007"
down_revision: str | None = "0006"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

_JSON = sa.JSON().with_variant(postgresql.JSONB(), "postgresql")
_WHEN = sa.DateTime(timezone=True)

_PG_REFUSE = """
CREATE OR REPLACE FUNCTION {table}_refuse_change() RETURNS trigger AS $$
BEGIN
    RAISE EXCEPTION '{table} are append-only: % refused', TG_OP
        USING ERRCODE = 'restrict_violation';
END
$$ LANGUAGE plpgsql
"""


def _refuse_changes(table: str, operations: tuple[str, ...]) -> None:
    if op.get_bind().dialect.name == "postgresql":
        op.execute(_PG_REFUSE.format(table=table))
        for operation in operations:
            op.execute(
                f"CREATE TRIGGER {table}_no_{operation.lower()} BEFORE {operation} ON {table} "
                f"FOR EACH ROW EXECUTE FUNCTION {table}_refuse_change()"
            )
    else:
        # SQLite: updates only, so that a test database can still be emptied.
        op.execute(
            f"CREATE TRIGGER {table}_no_update BEFORE UPDATE ON {table} "
            f"BEGIN SELECT RAISE(ABORT, '{table} are append-only: UPDATE refused'); END"
        )


def _allow_changes(table: str, operations: tuple[str, ...]) -> None:
    if op.get_bind().dialect.name == "postgresql":
        for operation in operations:
            op.execute(f"DROP TRIGGER IF EXISTS {table}_no_{operation.lower()} ON {table}")
        op.execute(f"DROP FUNCTION IF EXISTS {table}_refuse_change()")
    else:
        op.execute(f"DROP TRIGGER IF EXISTS {table}_no_update")


def upgrade() -> None:
    with op.batch_alter_table("recommendations") as batch:
        batch.add_column(
            sa.Column("state", sa.String(16), nullable=False, server_default="proposed")
        )
        batch.add_column(sa.Column("decided_at", _WHEN, nullable=True))
        batch.add_column(sa.Column("decided_by_key_id", sa.String(16), nullable=True))
        batch.add_column(sa.Column("policy_id", sa.Integer(), nullable=True))
        batch.add_column(sa.Column("approved_price", sa.Float(), nullable=True))
        batch.add_column(sa.Column("note", sa.String(500), nullable=True))
        batch.create_check_constraint(
            "state", "state IN ('proposed', 'approved', 'declined', 'superseded')"
        )
        batch.create_index("ix_recommendations_product_state", ["product_id", "state"])
    # Only a product's newest stored recommendation is still a proposal.
    op.execute(
        "UPDATE recommendations SET state = 'superseded' WHERE id NOT IN "
        "(SELECT max(id) FROM recommendations GROUP BY product_id)"
    )

    op.create_table(
        "price_entries",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("product_id", sa.Integer(), nullable=False),
        sa.Column("price", sa.Float(), nullable=False),
        sa.Column("effective_from", _WHEN, nullable=False),
        sa.Column("set_by_key_id", sa.String(16), nullable=True),
        sa.Column("policy_id", sa.Integer(), nullable=True),
        sa.Column("recommendation_id", sa.Integer(), nullable=True),
        sa.Column("fit_id", sa.Integer(), nullable=True),
        sa.Column("note", sa.String(500), nullable=True),
        sa.Column("created_at", _WHEN, nullable=False),
        sa.ForeignKeyConstraint(
            ["product_id"],
            ["products.id"],
            name="fk_price_entries_product_id_products",
            ondelete="CASCADE",
        ),
        sa.PrimaryKeyConstraint("id", name="pk_price_entries"),
        sa.UniqueConstraint("product_id", "effective_from", name="uq_price_entries_product_id"),
    )
    _refuse_changes("price_entries", ("UPDATE",))

    op.create_table(
        "approval_policies",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(100), nullable=False),
        sa.Column("applies_to", sa.String(16), nullable=False),
        sa.Column("target", sa.String(64), nullable=True),
        sa.Column("max_change_pct", sa.Float(), nullable=False),
        sa.Column("min_margin_pct", sa.Float(), nullable=True),
        sa.Column("created_by_key_id", sa.String(16), nullable=True),
        sa.Column("created_at", _WHEN, nullable=False),
        sa.Column("ended_at", _WHEN, nullable=True),
        sa.Column("ended_by_key_id", sa.String(16), nullable=True),
        sa.CheckConstraint(
            "applies_to IN ('product', 'family', 'catalogue')",
            name="ck_approval_policies_applies_to",
        ),
        sa.PrimaryKeyConstraint("id", name="pk_approval_policies"),
    )

    op.create_table(
        "audit_entries",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("at", _WHEN, nullable=False),
        sa.Column("actor_key_id", sa.String(16), nullable=True),
        sa.Column("action", sa.String(64), nullable=False),
        sa.Column("subject", sa.String(200), nullable=False),
        sa.Column("details", _JSON, nullable=False),
        sa.PrimaryKeyConstraint("id", name="pk_audit_entries"),
    )
    for column in ("at", "actor_key_id", "action", "subject"):
        op.create_index(f"ix_audit_entries_{column}", "audit_entries", [column])
    _refuse_changes("audit_entries", ("UPDATE", "DELETE"))


def downgrade() -> None:
    _allow_changes("audit_entries", ("UPDATE", "DELETE"))
    op.drop_table("audit_entries")
    op.drop_table("approval_policies")
    _allow_changes("price_entries", ("UPDATE",))
    op.drop_table("price_entries")
    with op.batch_alter_table("recommendations") as batch:
        batch.drop_index("ix_recommendations_product_state")
        batch.drop_constraint("state", type_="check")
        for column in (
            "note",
            "approved_price",
            "policy_id",
            "decided_by_key_id",
            "decided_at",
            "state",
        ):
            batch.drop_column(column)
