"""price tests: stored price-test plans, whose periods mark observations as test periods

Revision ID: 0010
Revises: 0009
Create Date: 2026-12-03
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op
from sqlalchemy.dialects import postgresql

revision: str = "0010"
down_revision: str | None = "0009"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

# JSON documents: JSONB on PostgreSQL, JSON text elsewhere.
_JSON = sa.JSON().with_variant(postgresql.JSONB(), "postgresql")


def upgrade() -> None:
    op.create_table(
        "price_tests",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("product_id", sa.Integer(), nullable=False),
        sa.Column("fit_id", sa.Integer(), nullable=True),
        sa.Column("first_period", sa.Date(), nullable=False),
        sa.Column("last_period", sa.Date(), nullable=False),
        sa.Column("n_periods", sa.Integer(), nullable=False),
        sa.Column("plan", _JSON, nullable=False),
        sa.Column("created_by_key_id", sa.String(16), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.CheckConstraint("last_period >= first_period", name="ck_price_tests_period_order"),
        sa.ForeignKeyConstraint(
            ["product_id"],
            ["products.id"],
            name="fk_price_tests_product_id_products",
            ondelete="CASCADE",
        ),
        sa.ForeignKeyConstraint(
            ["fit_id"], ["fits.id"], name="fk_price_tests_fit_id_fits", ondelete="SET NULL"
        ),
        sa.PrimaryKeyConstraint("id", name="pk_price_tests"),
    )
    op.create_index(
        "ix_price_tests_product_id_first_period", "price_tests", ["product_id", "first_period"]
    )


def downgrade() -> None:
    op.drop_index("ix_price_tests_product_id_first_period", table_name="price_tests")
    op.drop_table("price_tests")
