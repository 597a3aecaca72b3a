"""view sessions end at sign-out: a per-key count that signing out moves on

A view session's cookie carries the key's ``view_generation`` at sign-in; signing out
counts it up, so a copied cookie stops working at once.

Revision ID: 0006
Revises: 0005
Create Date: 2026-12-03
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0006"
down_revision: str | None = "0005"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    with op.batch_alter_table("api_keys") as batch:
        batch.add_column(
            sa.Column("view_generation", sa.Integer(), nullable=False, server_default="0")
        )


def downgrade() -> None:
    with op.batch_alter_table("api_keys") as batch:
        batch.drop_column("view_generation")
