"""interval trends: each service interval's fitted wear trend, kept with the analysis; the service order's
figures as columns

Revision ID: 0011
Revises: 0010
Create Date: 2026-12-03 03:45:00
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0011"
down_revision: str | None = "0010"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "interval_trend",
        sa.Column("pump_id", sa.Integer(), nullable=False),
        sa.Column("interval_no", sa.Integer(), nullable=False),
        sa.Column("computed_at", sa.DateTime(), nullable=False),
        sa.Column("is_current", sa.Boolean(), nullable=False),
        sa.Column("start_hours", sa.Float(), nullable=True),
        sa.Column("current_hours", sa.Float(), nullable=True),
        sa.Column("enough_data", sa.Boolean(), nullable=False),
        sa.Column("fit", sa.JSON(), nullable=False),
        sa.ForeignKeyConstraint(["pump_id"], ["pump.id"], name=op.f("fk_interval_trend_pump_id_pump"),
                                ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("pump_id", "interval_no", name=op.f("pk_interval_trend")),
    )
    with op.batch_alter_table("analysis_result", schema=None) as batch_op:
        batch_op.add_column(sa.Column("past_margin", sa.Float(), nullable=True))
        batch_op.add_column(sa.Column("limit_date_low", sa.String(length=10), nullable=True))
    # Analyses stored before this revision kept no interval trends: mark each stale (a version below any pump's),
    # so it is recomputed, with its trends, on the next start or read.
    op.execute("UPDATE analysis_result SET data_version = -1")


def downgrade() -> None:
    with op.batch_alter_table("analysis_result", schema=None) as batch_op:
        batch_op.drop_column("limit_date_low")
        batch_op.drop_column("past_margin")
    op.drop_table("interval_trend")
