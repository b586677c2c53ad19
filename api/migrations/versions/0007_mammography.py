"""mammography: MG fields of an event, its mean glandular dose (Dance method) beside the device's
AGD, and the accumulated AGD per breast of a mammography dose report

Revision ID: 0007_mammography
Revises: 0006_levels
Create Date: 2026-12-05 04:30:00
"""

from __future__ import annotations

import json

import sqlalchemy as sa
from alembic import op

revision = "0007_mammography"
down_revision = "0006_levels"
branch_labels = None
depends_on = None

_EVENT_COLUMNS = (
    ("compression_force_n", sa.Float()),
    ("compression_pressure_kpa", sa.Float()),
    ("compression_contact_area_mm2", sa.Float()),
    ("paddle_description", sa.String()),
    ("image_laterality", sa.String()),
    ("breast_implant_present", sa.Boolean()),
    ("organ_exposed", sa.String()),
    ("mammography_acquisition", sa.String()),
    ("tomo_scan_arc_deg", sa.Float()),
    ("tomo_projections", sa.Integer()),
    ("recon_mgd_mgy", sa.Float()),
    ("recon_mgd_u_mgy", sa.Float()),
    ("recon_glandularity_percent", sa.Float()),
    ("recon_glandularity_assumed", sa.Boolean()),
    ("recon_target_filter", sa.String()),
    ("recon_mgd_g", sa.Float()),
    ("recon_mgd_c", sa.Float()),
    ("recon_mgd_s", sa.Float()),
    ("recon_mgd_t", sa.Float()),
    ("recon_mgd_coefficients", sa.String()),
    ("recon_mgd_method", sa.String()),
    ("agd_ratio_reported_to_recon", sa.Float()),
)
_ACCUMULATED_COLUMNS = (("agd_left_mgy", sa.Float()), ("agd_right_mgy", sa.Float()))


def upgrade() -> None:
    with op.batch_alter_table("exposure_events") as batch:
        for name, type_ in _EVENT_COLUMNS:
            batch.add_column(sa.Column(name, type_, nullable=True))
    with op.batch_alter_table("accumulated_doses") as batch:
        for name, type_ in _ACCUMULATED_COLUMNS:
            batch.add_column(sa.Column(name, type_, nullable=True))
    _move_agd_out_of_details()


def _move_agd_out_of_details() -> None:
    """Per-breast AGD stored before this revision sits in ``details``: move it to its columns."""
    conn = op.get_bind()
    rows = conn.execute(sa.text("SELECT id, details FROM accumulated_doses")).all()
    for row_id, details in rows:
        values = json.loads(details) if isinstance(details, str) else dict(details or {})
        left, right = values.pop("agd_left_mgy", None), values.pop("agd_right_mgy", None)
        if left is None and right is None:
            continue
        conn.execute(
            sa.text(
                "UPDATE accumulated_doses SET agd_left_mgy = :l, agd_right_mgy = :r WHERE id = :i"
            ),
            {"l": left, "r": right, "i": row_id},
        )


def downgrade() -> None:
    with op.batch_alter_table("accumulated_doses") as batch:
        for name, _ in reversed(_ACCUMULATED_COLUMNS):
            batch.drop_column(name)
    with op.batch_alter_table("exposure_events") as batch:
        for name, _ in reversed(_EVENT_COLUMNS):
            batch.drop_column(name)
