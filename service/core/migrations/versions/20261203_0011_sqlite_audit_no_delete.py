"""audit log on SQLite refuses deletion too

Step 0007 made the audit log refuse updates on both databases but deletion on PostgreSQL
only, so that a test database could be emptied. SQLite now refuses deletion as well: an
append-only log means the same on either database. (Emptying a SQLite database for tests
drops the trigger for the moment it takes: see tests/plugins/storage.py.) On PostgreSQL
this step changes nothing.

Revision ID: 0011
Revises: 0010
Create Date: 2026-12-03
"""

from __future__ import annotations

from collections.abc import Sequence

from alembic import op

revision: str = "0011"
down_revision: str | None = "0010"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    if op.get_bind().dialect.name == "sqlite":
        op.execute(
            "CREATE TRIGGER audit_entries_no_delete BEFORE DELETE ON audit_entries "
            "BEGIN SELECT RAISE(ABORT, 'audit_entries are append-only: DELETE refused'); END"
        )


def downgrade() -> None:
    if op.get_bind().dialect.name == "sqlite":
        op.execute("DROP TRIGGER IF EXISTS audit_entries_no_delete")
