"""at most one active fit per product

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-01
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0002"
down_revision: str | None = "0001"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

ACTIVE = sa.text("status = 'active'")


def upgrade() -> None:
    # Two concurrent refits of one product must not both end up active: the database,
    # not the application, guarantees it.
    op.create_index(
        "uq_fits_one_active",
        "fits",
        ["product_id"],
        unique=True,
        sqlite_where=ACTIVE,
        postgresql_where=ACTIVE,
    )


def downgrade() -> None:
    op.drop_index("uq_fits_one_active", table_name="fits")
