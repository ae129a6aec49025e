"""service order keys and prior columns: each stored analysis's place in the service list as indexed bytes, and
its prior figures with what they are computed from as plain columns

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


FALLBACK_HOURS_PER_DAY = 24.0  # as fleet.trend.status: with no hour-meter history, continuous running


def upgrade() -> None:
    # Rows stored before keep a NULL key; the next store re-ranks the whole list once and fills every key.
    with op.batch_alter_table("analysis_result", schema=None) as batch_op:
        batch_op.add_column(sa.Column("order_key", sa.LargeBinary(), nullable=True))
        batch_op.add_column(sa.Column("prior_b10_hours", sa.Float(), nullable=True))
        batch_op.add_column(sa.Column("age_hours", sa.Float(), nullable=True))
        batch_op.add_column(sa.Column("planning_horizon_hours", sa.Float(), nullable=True))
        batch_op.create_index(batch_op.f("ix_analysis_result_order_key"), ["order_key"], unique=False)
    # The new columns of stored rows, from their detail (the planning horizon in running hours as
    # fleet.trend.status.horizon_remaining_hours counts it).
    result = sa.table("analysis_result", sa.column("detail", sa.JSON), sa.column("prior_b10_hours", sa.Float),
                      sa.column("age_hours", sa.Float), sa.column("planning_horizon_hours", sa.Float))
    per_day = result.c.detail["hours_per_day"].as_float()
    per_day = sa.case((per_day > 0, per_day), else_=FALLBACK_HOURS_PER_DAY)
    op.execute(result.update().values(
        prior_b10_hours=result.c.detail["prior_b10_hours"].as_float(),
        age_hours=result.c.detail["age_hours"].as_float(),
        planning_horizon_hours=result.c.detail["planning_horizon_weeks"].as_float() * 7.0 * per_day))


def downgrade() -> None:
    with op.batch_alter_table("analysis_result", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_analysis_result_order_key"))
        for column in ("planning_horizon_hours", "age_hours", "prior_b10_hours", "order_key"):
            batch_op.drop_column(column)
