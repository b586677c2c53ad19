"""skin: per-event fluoroscopy geometry, a room's skin-dose geometry, per-study skin dose

Revision ID: 0008_skin
Revises: 0007_mammography
Create Date: 2026-12-05 04:30:00
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

from beamaudit.api.store.base import UTCDateTime

revision = "0008_skin"
down_revision = "0007_mammography"
branch_labels = None
depends_on = None

_JSON = sa.JSON().with_variant(sa.JSON(), "sqlite")
_ROOM_FLOATS = (
    "table_reference_longitudinal_mm",
    "table_reference_lateral_mm",
    "table_reference_height_mm",
    "table_top_below_isocenter_mm",
)
_ROOM_SIGNS = ("table_longitudinal_sign", "table_lateral_sign", "table_height_sign")


def upgrade() -> None:
    with op.batch_alter_table("rooms") as batch:
        for name in _ROOM_FLOATS:
            batch.add_column(sa.Column(name, sa.Float(), nullable=True))
        for name in _ROOM_SIGNS:
            batch.add_column(sa.Column(name, sa.Integer(), nullable=True))
    with op.batch_alter_table("exposure_events") as batch:
        batch.add_column(sa.Column("skin_geometry", _JSON, nullable=True))
    op.create_table(
        "skin_doses",
        sa.Column("id", sa.Integer(), primary_key=True),
        sa.Column("study_id", sa.Integer(), sa.ForeignKey("studies.id"), nullable=False),
        sa.Column("computed_at", UTCDateTime(timezone=True), nullable=False),
        sa.Column("status", sa.String(), nullable=False),
        sa.Column("reason", sa.Text(), nullable=True),
        sa.Column("peak_skin_dose_mgy", sa.Float(), nullable=True),
        sa.Column("area_above_2gy_cm2", sa.Float(), nullable=True),
        sa.Column("area_above_3gy_cm2", sa.Float(), nullable=True),
        sa.Column("area_above_5gy_cm2", sa.Float(), nullable=True),
        sa.Column("uncertainty_pct", sa.Float(), nullable=True),
        sa.Column("events_used", sa.Integer(), nullable=True),
        sa.Column("events_at_peak", _JSON, nullable=False),
        sa.Column("levels_crossed", _JSON, nullable=False),
        sa.Column("level_checks", _JSON, nullable=False),
        sa.Column("record", _JSON, nullable=True),
        sa.Column("followup_status", sa.String(), nullable=False),
        sa.Column("followup_note", sa.Text(), nullable=True),
        sa.Column("followup_by", sa.String(), nullable=True),
        sa.Column("followup_at", UTCDateTime(timezone=True), nullable=True),
        sa.UniqueConstraint("study_id"),
    )


def downgrade() -> None:
    op.drop_table("skin_doses")
    with op.batch_alter_table("exposure_events") as batch:
        batch.drop_column("skin_geometry")
    with op.batch_alter_table("rooms") as batch:
        for name in (*_ROOM_SIGNS, *reversed(_ROOM_FLOATS)):
            batch.drop_column(name)
