"""audit reasons: why a record was corrected, kept beside its old values

Revision ID: 0009
Revises: 0008
Create Date: 2026-12-03 03:45:00
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0009"
down_revision: str | None = "0008"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    with op.batch_alter_table("audit_record", schema=None) as batch_op:
        batch_op.add_column(sa.Column("reason", sa.Text(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("audit_record", schema=None) as batch_op:
        batch_op.drop_column("reason")
