"""register, readings, samples, maintenance and stored analysis

Revision ID: 0001
Revises:
Create Date: 2026-12-02 01:59:27.627140
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0001"
down_revision: str | None = None
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "fleet_prior",
        sa.Column("kind", sa.String(length=32), nullable=False),
        sa.Column("computed_at", sa.DateTime(), nullable=False),
        sa.Column("detail", sa.JSON(), nullable=False),
        sa.PrimaryKeyConstraint("kind", name=op.f("pk_fleet_prior")),
    )
    op.create_table(
        "limit_default",
        sa.Column("kind", sa.String(length=32), nullable=False),
        sa.Column("eta_v_limit", sa.Float(), nullable=False),
        sa.Column("drain_limit_pct", sa.Float(), nullable=True),
        sa.Column("oil_temp_max_c", sa.Float(), nullable=False),
        sa.Column("oil_temp_min_c", sa.Float(), nullable=False),
        sa.Column("cleanliness_target", sa.String(length=16), nullable=False),
        sa.Column("reading_interval_days", sa.Integer(), nullable=False),
        sa.Column("planning_horizon_weeks", sa.Integer(), nullable=False),
        sa.Column("source", sa.Text(), nullable=False),
        sa.PrimaryKeyConstraint("kind", name=op.f("pk_limit_default")),
    )
    op.create_table(
        "oil",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(length=120), nullable=False),
        sa.Column("iso_vg", sa.Integer(), nullable=True),
        sa.Column("viscosity_40", sa.Float(), nullable=False),
        sa.Column("viscosity_100", sa.Float(), nullable=False),
        sa.Column("density_15", sa.Float(), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_oil")),
        sa.UniqueConstraint("name", name=op.f("uq_oil_name")),
    )
    op.create_table(
        "pump",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("serial", sa.String(length=120), nullable=False),
        sa.Column("kind", sa.String(length=32), nullable=False),
        sa.Column("variable", sa.Boolean(), nullable=False),
        sa.Column("displacement_cc", sa.Float(), nullable=False),
        sa.Column("rated_speed_rpm", sa.Float(), nullable=False),
        sa.Column("rated_pressure_bar", sa.Float(), nullable=False),
        sa.Column("max_flow_lpm", sa.Float(), nullable=True),
        sa.Column("case_drain", sa.Boolean(), nullable=False),
        sa.Column("reference_temp_c", sa.Float(), nullable=False),
        sa.Column("eta_v_limit", sa.Float(), nullable=True),
        sa.Column("drain_limit_pct", sa.Float(), nullable=True),
        sa.Column("oil_temp_max_c", sa.Float(), nullable=True),
        sa.Column("oil_temp_min_c", sa.Float(), nullable=True),
        sa.Column("cleanliness_target", sa.String(length=16), nullable=True),
        sa.Column("reading_interval_days", sa.Integer(), nullable=True),
        sa.Column("planning_horizon_weeks", sa.Integer(), nullable=True),
        sa.Column("overhaul_cost", sa.Float(), nullable=True),
        sa.Column("note", sa.Text(), nullable=True),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_pump")),
        sa.UniqueConstraint("serial", name=op.f("uq_pump_serial")),
    )
    op.create_table(
        "site",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(length=120), nullable=False),
        sa.Column("currency", sa.String(length=8), nullable=False),
        sa.Column("tariff_per_kwh", sa.Float(), nullable=False),
        sa.Column("motor_efficiency", sa.Float(), nullable=False),
        sa.Column("note", sa.Text(), nullable=True),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_site")),
        sa.UniqueConstraint("name", name=op.f("uq_site_name")),
    )
    op.create_table(
        "analysis_result",
        sa.Column("pump_id", sa.Integer(), nullable=False),
        sa.Column("computed_at", sa.DateTime(), nullable=False),
        sa.Column("status", sa.String(length=16), nullable=False),
        sa.Column("rank", sa.Integer(), nullable=False),
        sa.Column("reasons", sa.JSON(), nullable=False),
        sa.Column("eta_v_ref", sa.Float(), nullable=True),
        sa.Column("eta_v_decline_per_1000h", sa.Float(), nullable=True),
        sa.Column("drain_pct_ref", sa.Float(), nullable=True),
        sa.Column("hours_to_limit", sa.Float(), nullable=True),
        sa.Column("hours_to_limit_low", sa.Float(), nullable=True),
        sa.Column("hours_to_limit_high", sa.Float(), nullable=True),
        sa.Column("limit_date", sa.String(length=10), nullable=True),
        sa.Column("governing_limit", sa.String(length=16), nullable=True),
        sa.Column("prior_hours_to_overhaul", sa.Float(), nullable=True),
        sa.Column("energy_cost_per_year", sa.Float(), nullable=True),
        sa.Column("detail", sa.JSON(), nullable=False),
        sa.ForeignKeyConstraint(
            ["pump_id"], ["pump.id"], name=op.f("fk_analysis_result_pump_id_pump"), ondelete="CASCADE"
        ),
        sa.PrimaryKeyConstraint("pump_id", name=op.f("pk_analysis_result")),
    )
    with op.batch_alter_table("analysis_result", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_analysis_result_rank"), ["rank"], unique=False)
        batch_op.create_index(batch_op.f("ix_analysis_result_status"), ["status"], unique=False)

    op.create_table(
        "machine",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("site_id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(length=120), nullable=False),
        sa.Column("oil_id", sa.Integer(), nullable=True),
        sa.Column("note", sa.Text(), nullable=True),
        sa.ForeignKeyConstraint(["oil_id"], ["oil.id"], name=op.f("fk_machine_oil_id_oil")),
        sa.ForeignKeyConstraint(["site_id"], ["site.id"], name=op.f("fk_machine_site_id_site")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_machine")),
        sa.UniqueConstraint("site_id", "name", name=op.f("uq_machine_site_id_name")),
    )
    with op.batch_alter_table("machine", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_machine_site_id"), ["site_id"], unique=False)

    op.create_table(
        "maintenance_event",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("pump_id", sa.Integer(), nullable=False),
        sa.Column("date", sa.DateTime(), nullable=False),
        sa.Column("hours", sa.Float(), nullable=True),
        sa.Column("kind", sa.String(length=32), nullable=False),
        sa.Column("cost", sa.Float(), nullable=True),
        sa.Column("downtime_h", sa.Float(), nullable=True),
        sa.Column("failure_mode", sa.String(length=32), nullable=True),
        sa.Column("note", sa.Text(), nullable=True),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.ForeignKeyConstraint(["pump_id"], ["pump.id"], name=op.f("fk_maintenance_event_pump_id_pump")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_maintenance_event")),
    )
    with op.batch_alter_table("maintenance_event", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_maintenance_event_pump_id"), ["pump_id"], unique=False)

    op.create_table(
        "reading",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("pump_id", sa.Integer(), nullable=False),
        sa.Column("taken_at", sa.DateTime(), nullable=False),
        sa.Column("hours", sa.Float(), nullable=False),
        sa.Column("pressure_bar", sa.Float(), nullable=False),
        sa.Column("speed_rpm", sa.Float(), nullable=False),
        sa.Column("flow_lpm", sa.Float(), nullable=True),
        sa.Column("drain_lpm", sa.Float(), nullable=True),
        sa.Column("temp_c", sa.Float(), nullable=False),
        sa.Column("stroke", sa.Float(), nullable=True),
        sa.Column("taken_by", sa.String(length=120), nullable=True),
        sa.Column("note", sa.Text(), nullable=True),
        sa.Column("source", sa.String(length=16), nullable=False),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.ForeignKeyConstraint(["pump_id"], ["pump.id"], name=op.f("fk_reading_pump_id_pump")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_reading")),
        sa.UniqueConstraint("pump_id", "taken_at", name=op.f("uq_reading_pump_id_taken_at")),
    )
    with op.batch_alter_table("reading", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_reading_pump_id"), ["pump_id"], unique=False)

    op.create_table(
        "flow_test_point",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("reading_id", sa.Integer(), nullable=False),
        sa.Column("pressure_bar", sa.Float(), nullable=False),
        sa.Column("flow_lpm", sa.Float(), nullable=False),
        sa.ForeignKeyConstraint(
            ["reading_id"],
            ["reading.id"],
            name=op.f("fk_flow_test_point_reading_id_reading"),
            ondelete="CASCADE",
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_flow_test_point")),
    )
    with op.batch_alter_table("flow_test_point", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_flow_test_point_reading_id"), ["reading_id"], unique=False)

    op.create_table(
        "oil_sample",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("machine_id", sa.Integer(), nullable=False),
        sa.Column("sampled_at", sa.DateTime(), nullable=False),
        sa.Column("reported_at", sa.DateTime(), nullable=True),
        sa.Column("code_4", sa.Integer(), nullable=True),
        sa.Column("code_6", sa.Integer(), nullable=True),
        sa.Column("code_14", sa.Integer(), nullable=True),
        sa.Column("count_4", sa.Float(), nullable=True),
        sa.Column("count_6", sa.Float(), nullable=True),
        sa.Column("count_14", sa.Float(), nullable=True),
        sa.Column("low_count", sa.Boolean(), nullable=False),
        sa.Column("water_ppm", sa.Float(), nullable=True),
        sa.Column("viscosity_40", sa.Float(), nullable=True),
        sa.Column("lab_ref", sa.String(length=120), nullable=True),
        sa.Column("note", sa.Text(), nullable=True),
        sa.ForeignKeyConstraint(
            ["machine_id"], ["machine.id"], name=op.f("fk_oil_sample_machine_id_machine")
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_oil_sample")),
        sa.UniqueConstraint("machine_id", "sampled_at", name=op.f("uq_oil_sample_machine_id_sampled_at")),
    )
    with op.batch_alter_table("oil_sample", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_oil_sample_machine_id"), ["machine_id"], unique=False)

    op.create_table(
        "position",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("machine_id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(length=120), nullable=False),
        sa.ForeignKeyConstraint(["machine_id"], ["machine.id"], name=op.f("fk_position_machine_id_machine")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_position")),
        sa.UniqueConstraint("machine_id", "name", name=op.f("uq_position_machine_id_name")),
    )
    with op.batch_alter_table("position", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_position_machine_id"), ["machine_id"], unique=False)

    op.create_table(
        "installation",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("pump_id", sa.Integer(), nullable=False),
        sa.Column("position_id", sa.Integer(), nullable=False),
        sa.Column("installed_at", sa.DateTime(), nullable=False),
        sa.Column("installed_hours", sa.Float(), nullable=True),
        sa.Column("removed_at", sa.DateTime(), nullable=True),
        sa.Column("removed_hours", sa.Float(), nullable=True),
        sa.ForeignKeyConstraint(
            ["position_id"], ["position.id"], name=op.f("fk_installation_position_id_position")
        ),
        sa.ForeignKeyConstraint(["pump_id"], ["pump.id"], name=op.f("fk_installation_pump_id_pump")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_installation")),
    )
    with op.batch_alter_table("installation", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_installation_position_id"), ["position_id"], unique=False)
        batch_op.create_index(batch_op.f("ix_installation_pump_id"), ["pump_id"], unique=False)



def downgrade() -> None:
    with op.batch_alter_table("installation", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_installation_pump_id"))
        batch_op.drop_index(batch_op.f("ix_installation_position_id"))

    op.drop_table("installation")
    with op.batch_alter_table("position", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_position_machine_id"))

    op.drop_table("position")
    with op.batch_alter_table("oil_sample", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_oil_sample_machine_id"))

    op.drop_table("oil_sample")
    with op.batch_alter_table("flow_test_point", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_flow_test_point_reading_id"))

    op.drop_table("flow_test_point")
    with op.batch_alter_table("reading", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_reading_pump_id"))

    op.drop_table("reading")
    with op.batch_alter_table("maintenance_event", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_maintenance_event_pump_id"))

    op.drop_table("maintenance_event")
    with op.batch_alter_table("machine", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_machine_site_id"))

    op.drop_table("machine")
    with op.batch_alter_table("analysis_result", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_analysis_result_status"))
        batch_op.drop_index(batch_op.f("ix_analysis_result_rank"))

    op.drop_table("analysis_result")
    op.drop_table("site")
    op.drop_table("pump")
    op.drop_table("oil")
    op.drop_table("limit_default")
    op.drop_table("fleet_prior")
