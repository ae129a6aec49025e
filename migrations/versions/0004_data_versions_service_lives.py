"""pump data versions and service lives

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-02 15:45:18.717670
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0004"
down_revision: str | None = "0003"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "pump_data_version",
        sa.Column("pump_id", sa.Integer(), nullable=False),
        sa.Column("version", sa.Integer(), nullable=False),
        sa.ForeignKeyConstraint(["pump_id"], ["pump.id"], name=op.f("fk_pump_data_version_pump_id_pump"),
                                ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("pump_id", name=op.f("pk_pump_data_version")),
    )
    op.create_table(
        "service_life",
        sa.Column("pump_id", sa.Integer(), nullable=False),
        sa.Column("interval_no", sa.Integer(), nullable=False),
        sa.Column("entry_hours", sa.Float(), nullable=False),
        sa.Column("life_hours", sa.Float(), nullable=False),
        sa.Column("failed", sa.Boolean(), nullable=False),
        sa.ForeignKeyConstraint(["pump_id"], ["pump.id"], name=op.f("fk_service_life_pump_id_pump"),
                                ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("pump_id", "interval_no", name=op.f("pk_service_life")),
    )
    with op.batch_alter_table("analysis_result", schema=None) as batch_op:
        batch_op.add_column(sa.Column("data_version", sa.Integer(), server_default="0", nullable=False))
    # Analyses stored before this revision have no service lives behind their fleet figures: start every pump at
    # version 1 so each stored analysis (version 0) counts as stale and is recomputed on the next start or read.
    op.execute("INSERT INTO pump_data_version (pump_id, version) SELECT id, 1 FROM pump")


def downgrade() -> None:
    with op.batch_alter_table("analysis_result", schema=None) as batch_op:
        batch_op.drop_column("data_version")

    op.drop_table("service_life")
    op.drop_table("pump_data_version")
