"""jurisdiction rules: pricing rules a person enters for a product, a family or the
whole catalogue

Four kinds: no sale below unit cost; a cap on increases over a rolling window during a
declared emergency period; a minimum interval between price changes; a cap on how far a
price may rise above the lowest price of a window before it. A rule is ended, never
deleted.

Revision ID: 0009
Revises: 0008
Create Date: 2026-12-03
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0009"
down_revision: str | None = "0008"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

_WHEN = sa.DateTime(timezone=True)


def upgrade() -> None:
    op.create_table(
        "jurisdiction_rules",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(100), nullable=False),
        sa.Column("kind", sa.String(32), nullable=False),
        sa.Column("applies_to", sa.String(16), nullable=False),
        sa.Column("target", sa.String(64), nullable=True),
        sa.Column("max_increase_pct", sa.Float(), nullable=True),
        sa.Column("window_days", sa.Integer(), nullable=True),
        sa.Column("min_interval_days", sa.Integer(), nullable=True),
        sa.Column("starts_on", sa.Date(), nullable=True),
        sa.Column("ends_on", sa.Date(), nullable=True),
        sa.Column("note", sa.String(500), nullable=True),
        sa.Column("created_by_key_id", sa.String(16), nullable=True),
        sa.Column("created_at", _WHEN, nullable=False),
        sa.Column("ended_at", _WHEN, nullable=True),
        sa.Column("ended_by_key_id", sa.String(16), nullable=True),
        sa.CheckConstraint(
            "kind IN ('no_sale_below_cost', 'emergency_increase_cap', 'min_change_interval', "
            "'prior_price_cap')",
            name="ck_jurisdiction_rules_kind",
        ),
        sa.CheckConstraint(
            "applies_to IN ('product', 'family', 'catalogue')",
            name="ck_jurisdiction_rules_applies_to",
        ),
        sa.PrimaryKeyConstraint("id", name="pk_jurisdiction_rules"),
    )
    op.create_index(
        "ix_jurisdiction_rules_applies_to_target", "jurisdiction_rules", ["applies_to", "target"]
    )


def downgrade() -> None:
    op.drop_index("ix_jurisdiction_rules_applies_to_target", table_name="jurisdiction_rules")
    op.drop_table("jurisdiction_rules")
