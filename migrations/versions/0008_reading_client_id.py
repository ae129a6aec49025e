"""reading client id: the id a device gives a reading, so a resend stores nothing twice

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
    with op.batch_alter_table("reading", schema=None) as batch_op:
        batch_op.add_column(sa.Column("client_id", sa.String(length=64), nullable=True))
        batch_op.create_unique_constraint(batch_op.f("uq_reading_client_id"), ["client_id"])


def downgrade() -> None:
    with op.batch_alter_table("reading", schema=None) as batch_op:
        batch_op.drop_constraint(batch_op.f("uq_reading_client_id"), type_="unique")
        batch_op.drop_column("client_id")
