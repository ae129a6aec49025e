"""site conventions: each site's time zone, display units and decimal mark

Revision ID: 0010
Revises: 0009
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0010"
down_revision: str | None = "0009"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    with op.batch_alter_table("site") as batch_op:
        batch_op.add_column(sa.Column("time_zone", sa.String(length=64), server_default="UTC", nullable=False))
        batch_op.add_column(sa.Column("pressure_unit", sa.String(length=16), server_default="bar", nullable=False))
        batch_op.add_column(sa.Column("flow_unit", sa.String(length=16), server_default="L/min", nullable=False))
        batch_op.add_column(sa.Column("temperature_unit", sa.String(length=16), server_default="degC",
                                      nullable=False))
        batch_op.add_column(sa.Column("decimal_comma", sa.Boolean(), server_default="0", nullable=False))


def downgrade() -> None:
    with op.batch_alter_table("site") as batch_op:
        for column in ("decimal_comma", "temperature_unit", "flow_unit", "pressure_unit", "time_zone"):
            batch_op.drop_column(column)
