"""service order keys: each stored analysis's place in the service list as indexed bytes

Revision ID: 0012
Revises: 0011
Create Date: 2026-12-03 07:00:00
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0012"
down_revision: str | None = "0011"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    # Rows stored before keep NULL; the next store re-ranks the whole list once and fills every key.
    with op.batch_alter_table("analysis_result", schema=None) as batch_op:
        batch_op.add_column(sa.Column("order_key", sa.LargeBinary(), nullable=True))
        batch_op.create_index(batch_op.f("ix_analysis_result_order_key"), ["order_key"], unique=False)


def downgrade() -> None:
    with op.batch_alter_table("analysis_result", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_analysis_result_order_key"))
        batch_op.drop_column("order_key")
