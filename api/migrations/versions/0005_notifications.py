"""notifications: the delivery log of digests of new findings

Revision ID: 0005_notifications
Revises: 0004_physics
Create Date: 2026-12-05 04:10:00
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

import beamaudit.api.store.base

revision = "0005_notifications"
down_revision = "0004_physics"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "notification_deliveries",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("recipient", sa.String(), nullable=False),
        sa.Column("channel", sa.String(), nullable=False),
        sa.Column("target", sa.Text(), nullable=False),
        sa.Column("trigger", sa.String(), nullable=False),
        sa.Column("review_run_id", sa.Integer(), nullable=True),
        sa.Column("status", sa.String(), nullable=False),
        sa.Column("attempts", sa.Integer(), nullable=False),
        sa.Column("error", sa.Text(), nullable=True),
        sa.Column("findings", sa.Integer(), nullable=False),
        sa.Column("last_finding_id", sa.Integer(), nullable=True),
        sa.Column("digest_sha256", sa.String(), nullable=False),
        sa.Column(
            "created_at", beamaudit.api.store.base.UTCDateTime(timezone=True), nullable=False
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_notification_deliveries")),
    )
    op.create_index(
        op.f("ix_notification_deliveries_recipient"),
        "notification_deliveries",
        ["recipient"],
        unique=False,
    )
    op.create_index(
        op.f("ix_notification_deliveries_created_at"),
        "notification_deliveries",
        ["created_at"],
        unique=False,
    )


def downgrade() -> None:
    op.drop_index(
        op.f("ix_notification_deliveries_created_at"), table_name="notification_deliveries"
    )
    op.drop_index(
        op.f("ix_notification_deliveries_recipient"), table_name="notification_deliveries"
    )
    op.drop_table("notification_deliveries")
