"""CT localizer calibrations per scanner, the measured size samples of CT studies

Revision ID: 0012_ct_calibration
Revises: 0011_mammo3
Create Date: 2026-12-05 07:30:00
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

from beamaudit.api.store.base import JSONValue, UTCDateTime

revision = "0012_ct_calibration"
down_revision = "0011_mammo3"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "ct_localizer_calibrations",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("device_id", sa.Integer(), nullable=False),
        sa.Column("kvp_kv", sa.Float(), nullable=False),
        sa.Column("view", sa.String(), nullable=False),
        sa.Column("filter_type", sa.String(), nullable=False),
        sa.Column("pixel_values", JSONValue, nullable=False),
        sa.Column("water_thickness_mm", JSONValue, nullable=False),
        sa.Column("source", sa.Text(), nullable=False),
        sa.Column("measured_on", sa.Date(), nullable=False),
        sa.Column("created_at", UTCDateTime(), nullable=False),
        sa.Column("created_by", sa.String(), nullable=False),
        sa.ForeignKeyConstraint(
            ["device_id"], ["devices.id"],
            name=op.f("fk_ct_localizer_calibrations_device_id_devices"),
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_ct_localizer_calibrations")),
    )  # fmt: skip
    op.create_index(
        op.f("ix_ct_localizer_calibrations_device_id"),
        "ct_localizer_calibrations",
        ["device_id"],
    )
    op.create_table(
        "ct_size_samples",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("study_instance_uid", sa.String(), nullable=False),
        sa.Column("acquisition_group", sa.String(), nullable=False),
        sa.Column("sop_instance_uid", sa.String(), nullable=False),
        sa.Column("method", sa.String(), nullable=False),
        sa.Column("frame_of_reference_uid", sa.String(), nullable=True),
        sa.Column("z_mm", sa.Float(), nullable=False),
        sa.Column("dw_cm", sa.Float(), nullable=True),
        sa.Column("truncated", sa.Boolean(), nullable=False),
        sa.Column("pixel_data_bytes", sa.Integer(), nullable=False),
        sa.Column("measured_at", UTCDateTime(), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_ct_size_samples")),
        sa.UniqueConstraint(
            "sop_instance_uid", "z_mm", name=op.f("uq_ct_size_samples_sop_instance_uid_z_mm")
        ),
    )
    op.create_index(
        op.f("ix_ct_size_samples_study_instance_uid"), "ct_size_samples", ["study_instance_uid"]
    )


def downgrade() -> None:
    op.drop_index(op.f("ix_ct_size_samples_study_instance_uid"), table_name="ct_size_samples")
    op.drop_table("ct_size_samples")
    op.drop_index(
        op.f("ix_ct_localizer_calibrations_device_id"), table_name="ct_localizer_calibrations"
    )
    op.drop_table("ct_localizer_calibrations")
