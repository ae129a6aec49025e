"""reading client id: the id a device gives a reading, so a resend stores nothing twice

Plain ALTER TABLE and a unique index, not batch mode: on SQLite a batch copy of 'reading' would drop the old table,
and with foreign keys on that deletes every flow test point referring to a reading.

Revision ID: 0008
Revises: 0007
Create Date: 2026-12-03 03:27:03.844056
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0008"
down_revision: str | None = "0007"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.add_column("reading", sa.Column("client_id", sa.String(length=64), nullable=True))
    op.create_index(op.f("ix_reading_client_id"), "reading", ["client_id"], unique=True)


def downgrade() -> None:
    op.drop_index(op.f("ix_reading_client_id"), table_name="reading")
    op.drop_column("reading", "client_id")  # SQLite 3.35+ drops a column in place
