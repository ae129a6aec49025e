"""forecast snapshots: what each analysis forecast, kept when it moves (the forecast record)

Revision ID: 0007
Revises: 0006
Create Date: 2026-12-02 17:07:31.520554
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0007"
down_revision: str | None = "0006"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "forecast_snapshot",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("pump_id", sa.Integer(), nullable=False),
        sa.Column("made_at", sa.DateTime(), nullable=False),
        sa.Column("interval_no", sa.Integer(), nullable=False),
        sa.Column("trend", sa.Boolean(), nullable=False),
        sa.Column("past_limit", sa.Boolean(), nullable=False),
        sa.Column("governing_limit", sa.String(length=16), nullable=True),
        sa.Column("hours_to_limit", sa.Float(), nullable=True),
        sa.Column("hours_to_limit_low", sa.Float(), nullable=True),
        sa.Column("hours_to_limit_high", sa.Float(), nullable=True),
        sa.Column("limit_date", sa.String(length=10), nullable=True),
        sa.Column("limit_date_low", sa.String(length=10), nullable=True),
        sa.Column("limit_date_high", sa.String(length=10), nullable=True),
        sa.ForeignKeyConstraint(["pump_id"], ["pump.id"], name=op.f("fk_forecast_snapshot_pump_id_pump"),
                                ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_forecast_snapshot")),
    )
    with op.batch_alter_table("forecast_snapshot", schema=None) as batch_op:
        batch_op.create_index("ix_forecast_snapshot_pump_made", ["pump_id", "made_at"], unique=False)


def downgrade() -> None:
    with op.batch_alter_table("forecast_snapshot", schema=None) as batch_op:
        batch_op.drop_index("ix_forecast_snapshot_pump_made")
    op.drop_table("forecast_snapshot")
