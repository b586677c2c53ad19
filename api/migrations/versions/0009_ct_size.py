"""ct size: the scanner's size figures and scan range, our Dw from the images and SSDE from it

Revision ID: 0009_ct_size
Revises: 0008_skin
Create Date: 2026-12-05 05:00:00
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0009_ct_size"
down_revision = "0008_skin"
branch_labels = None
depends_on = None

_FLOATS = (
    "ct_lateral_dimension_mm",
    "ct_ap_dimension_mm",
    "effective_diameter_mm",
    "ct_scan_z_top_mm",
    "ct_scan_z_bottom_mm",
    "size_dw_mean_cm",
    "size_dw_centre_cm",
    "size_truncated_share",
    "size_ssde_mgy",
    "ssde_ratio_reported_to_size",
)
_TEXTS = (
    "water_equivalent_diameter_method",
    "ssde_method",
    "frame_of_reference_uid",
    "size_method",
    "size_ssde_report",
)


def upgrade() -> None:
    with op.batch_alter_table("exposure_events") as batch:
        for name in _FLOATS:
            batch.add_column(sa.Column(name, sa.Float(), nullable=True))
        for name in _TEXTS:
            batch.add_column(sa.Column(name, sa.String(), nullable=True))
        batch.add_column(sa.Column("size_images_used", sa.Integer(), nullable=True))
        batch.add_column(
            sa.Column("size_trail", sa.JSON().with_variant(sa.JSON(), "sqlite"), nullable=True)
        )


def downgrade() -> None:
    with op.batch_alter_table("exposure_events") as batch:
        for name in (*_FLOATS, *_TEXTS, "size_images_used", "size_trail"):
            batch.drop_column(name)
