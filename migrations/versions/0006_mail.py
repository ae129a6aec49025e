"""mail: users' addresses and digest choice, the pumps they follow, the outbox

Revision ID: 0006
Revises: 0005
Create Date: 2026-12-02 16:50:04.086296
"""

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0006"
down_revision: str | None = "0005"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "follow",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("user_id", sa.Integer(), nullable=False),
        sa.Column("site_id", sa.Integer(), nullable=True),
        sa.Column("machine_id", sa.Integer(), nullable=True),
        sa.ForeignKeyConstraint(["machine_id"], ["machine.id"], name=op.f("fk_follow_machine_id_machine"),
                                ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["site_id"], ["site.id"], name=op.f("fk_follow_site_id_site"), ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["user_id"], ["app_user.id"], name=op.f("fk_follow_user_id_app_user"),
                                ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_follow")),
        sa.UniqueConstraint("user_id", "site_id", "machine_id", name=op.f("uq_follow_user_id_site_id_machine_id")),
    )
    with op.batch_alter_table("follow", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_follow_user_id"), ["user_id"], unique=False)

    op.create_table(
        "outbox_mail",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("kind", sa.String(length=16), nullable=False),
        sa.Column("user_id", sa.Integer(), nullable=True),
        sa.Column("to_address", sa.String(length=254), nullable=False),
        sa.Column("subject", sa.String(length=300), nullable=False),
        sa.Column("text_body", sa.Text(), nullable=False),
        sa.Column("html_body", sa.Text(), nullable=False),
        sa.Column("message_id", sa.String(length=255), nullable=False),
        sa.Column("pump_id", sa.Integer(), nullable=True),
        sa.Column("status_change_id", sa.Integer(), nullable=True),
        sa.Column("created_at", sa.DateTime(), nullable=False),
        sa.Column("next_attempt_at", sa.DateTime(), nullable=False),
        sa.Column("claim", sa.String(length=32), nullable=True),
        sa.Column("claimed_at", sa.DateTime(), nullable=True),
        sa.Column("attempts", sa.Integer(), nullable=False),
        sa.Column("last_error", sa.Text(), nullable=True),
        sa.Column("sent_at", sa.DateTime(), nullable=True),
        sa.ForeignKeyConstraint(["pump_id"], ["pump.id"], name=op.f("fk_outbox_mail_pump_id_pump"),
                                ondelete="SET NULL"),
        sa.ForeignKeyConstraint(["status_change_id"], ["status_change.id"],
                                name=op.f("fk_outbox_mail_status_change_id_status_change"), ondelete="SET NULL"),
        sa.ForeignKeyConstraint(["user_id"], ["app_user.id"], name=op.f("fk_outbox_mail_user_id_app_user"),
                                ondelete="SET NULL"),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_outbox_mail")),
        sa.UniqueConstraint("status_change_id", "user_id", name=op.f("uq_outbox_mail_status_change_id_user_id")),
    )
    with op.batch_alter_table("outbox_mail", schema=None) as batch_op:
        batch_op.create_index(batch_op.f("ix_outbox_mail_created_at"), ["created_at"], unique=False)
        batch_op.create_index(batch_op.f("ix_outbox_mail_sent_at"), ["sent_at"], unique=False)
        batch_op.create_index(batch_op.f("ix_outbox_mail_user_id"), ["user_id"], unique=False)

    with op.batch_alter_table("app_user", schema=None) as batch_op:
        batch_op.add_column(sa.Column("email", sa.String(length=254), nullable=True))
        batch_op.add_column(sa.Column("digest", sa.Boolean(), server_default="1", nullable=False))


def downgrade() -> None:
    with op.batch_alter_table("app_user", schema=None) as batch_op:
        batch_op.drop_column("digest")
        batch_op.drop_column("email")

    with op.batch_alter_table("outbox_mail", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_outbox_mail_user_id"))
        batch_op.drop_index(batch_op.f("ix_outbox_mail_sent_at"))
        batch_op.drop_index(batch_op.f("ix_outbox_mail_created_at"))
    op.drop_table("outbox_mail")

    with op.batch_alter_table("follow", schema=None) as batch_op:
        batch_op.drop_index(batch_op.f("ix_follow_user_id"))
    op.drop_table("follow")
