"""routes, shutdown windows, status history

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-02 02:05:47.465139
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0002"
down_revision: str | None = "0001"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "route",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(length=120), nullable=False),
        sa.Column("note", sa.Text(), nullable=True),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_route")),
        sa.UniqueConstraint("name", name=op.f("uq_route_name")),
    )
    op.create_table(
        "route_stop",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("route_id", sa.Integer(), nullable=False),
        sa.Column("pump_id", sa.Integer(), nullable=False),
        sa.Column("seq", sa.Integer(), nullable=False),
        sa.ForeignKeyConstraint(["pump_id"], ["pump.id"], name=op.f("fk_route_stop_pump_id_pump")),
        sa.ForeignKeyConstraint(
            ["route_id"], ["route.id"], name=op.f("fk_route_stop_route_id_route"), ondelete="CASCADE"
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_route_stop")),
        sa.UniqueConstraint("route_id", "pump_id", name=op.f("uq_route_stop_route_id_pump_id")),
    )
    with op.batch_alter_table("route_stop", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_route_stop_pump_id"), ["pump_id"], unique=False)
        batch_op.create_index(batch_op.f("ix_route_stop_route_id"), ["route_id"], unique=False)

    op.create_table(
        "status_change",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("pump_id", sa.Integer(), nullable=False),
        sa.Column("at", sa.DateTime(), nullable=False),
        sa.Column("status", sa.String(length=16), nullable=False),
        sa.Column("previous_status", sa.String(length=16), nullable=True),
        sa.Column("reasons", sa.JSON(), nullable=False),
        sa.Column("new_reasons", sa.JSON(), nullable=False),
        sa.Column("eta_v_ref", sa.Float(), nullable=True),
        sa.Column("hours_to_limit", sa.Float(), nullable=True),
        sa.Column("limit_date", sa.String(length=10), nullable=True),
        sa.ForeignKeyConstraint(
            ["pump_id"], ["pump.id"], name=op.f("fk_status_change_pump_id_pump"), ondelete="CASCADE"
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_status_change")),
    )
    with op.batch_alter_table("status_change", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_status_change_at"), ["at"], unique=False)
        batch_op.create_index(batch_op.f("ix_status_change_pump_id"), ["pump_id"], unique=False)

    op.create_table(
        "shutdown_window",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("site_id", sa.Integer(), nullable=True),
        sa.Column("machine_id", sa.Integer(), nullable=True),
        sa.Column("starts_at", sa.DateTime(), nullable=False),
        sa.Column("ends_at", sa.DateTime(), nullable=False),
        sa.Column("note", sa.Text(), nullable=True),
        sa.ForeignKeyConstraint(["machine_id"], ["machine.id"], name=op.f("fk_shutdown_window_machine_id_machine")),
        sa.ForeignKeyConstraint(["site_id"], ["site.id"], name=op.f("fk_shutdown_window_site_id_site")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_shutdown_window")),
    )


def downgrade() -> None:
    op.drop_table("shutdown_window")
    with op.batch_alter_table("status_change", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_status_change_pump_id"))
        batch_op.drop_index(batch_op.f("ix_status_change_at"))

    op.drop_table("status_change")
    with op.batch_alter_table("route_stop", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_route_stop_route_id"))
        batch_op.drop_index(batch_op.f("ix_route_stop_pump_id"))

    op.drop_table("route_stop")
    op.drop_table("route")
