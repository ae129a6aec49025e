"""derived rank and prior figures: the service-list rank follows from the stored order keys, and each pump's prior
figures from its kind's stored fleet life figures and its own age and horizon, both computed when read; their
stored columns go, so a store writes its own pumps' rows and nothing else

Revision ID: 0013
Revises: 0012
Create Date: 2026-12-03 14:00:00
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0013"
down_revision: str | None = "0012"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    # Nothing is lost: the rank is 1 + the number of smaller order keys (rows from before keys existed are keyed
    # by the next store, which re-keys the whole list while any row has none), and the prior figures are computed
    # from fleet_prior with each row's age_hours and planning_horizon_hours, which stay.
    with op.batch_alter_table("analysis_result", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_analysis_result_rank"))
        batch_op.drop_column("rank")
        batch_op.drop_column("prior_hours_to_overhaul")
        batch_op.drop_column("prior_b10_hours")


def downgrade() -> None:
    with op.batch_alter_table("analysis_result", schema=None) as batch_op:
        batch_op.add_column(sa.Column("rank", sa.Integer(), nullable=False, server_default="0"))
        batch_op.add_column(sa.Column("prior_hours_to_overhaul", sa.Float(), nullable=True))
        batch_op.add_column(sa.Column("prior_b10_hours", sa.Float(), nullable=True))
        batch_op.create_index(batch_op.f("ix_analysis_result_rank"), ["rank"], unique=False)
    # The ranks back from the keys (an unkeyed row waits at 0, as 0012 left a pump new to the list); the kind's B10
    # from its fleet life figures. The mean residual life needs the gamma function: the next analysis fills it.
    result = sa.table("analysis_result", sa.column("pump_id", sa.Integer), sa.column("rank", sa.Integer),
                      sa.column("order_key", sa.LargeBinary), sa.column("prior_b10_hours", sa.Float))
    other = result.alias("other")
    smaller = sa.select(sa.func.count()).select_from(other).where(other.c.order_key < result.c.order_key)
    op.execute(result.update().where(result.c.order_key.is_not(None)).values(rank=1 + smaller.scalar_subquery()))
    pump = sa.table("pump", sa.column("id", sa.Integer), sa.column("kind", sa.String))
    prior = sa.table("fleet_prior", sa.column("kind", sa.String), sa.column("detail", sa.JSON))
    b10 = (sa.select(prior.c.detail["b10_hours"].as_float()).select_from(prior.join(pump, pump.c.kind == prior.c.kind))
           .where(pump.c.id == result.c.pump_id).scalar_subquery())
    op.execute(result.update().values(prior_b10_hours=b10))
