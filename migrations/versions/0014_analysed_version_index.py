"""analysed version index: analysis_result.data_version indexed, so the check before every page that no stored
analysis is stale sums it from the index instead of reading every stored row

From this version on, a kept interval fit leaves out the wear-law members without weight, which older code reads
as missing: going back, every pump's data version moves on, so the older code analyses the fleet afresh (its own
full fits) on the next page read or `fleet analyze`, and no stored figure is lost before then.

Revision ID: 0014
Revises: 0013
Create Date: 2026-12-04 15:45:00
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0014"
down_revision: str | None = "0013"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    with op.batch_alter_table("analysis_result", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_analysis_result_data_version"), ["data_version"], unique=False)


def downgrade() -> None:
    with op.batch_alter_table("analysis_result", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_analysis_result_data_version"))
    version = sa.table("pump_data_version", sa.column("pump_id", sa.Integer), sa.column("version", sa.Integer))
    pump = sa.table("pump", sa.column("id", sa.Integer))
    op.execute(version.update().values(version=version.c.version + 1))
    op.execute(version.insert().from_select(["pump_id", "version"], sa.select(pump.c.id, sa.literal(1)).where(
        ~sa.exists().where(version.c.pump_id == pump.c.id))))
