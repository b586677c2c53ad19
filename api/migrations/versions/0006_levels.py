"""levels: a level's patient group and clinical indication, a rule's indication, an event's
indication and effective-dose estimate

Revision ID: 0006_levels
Revises: 0005_notifications
Create Date: 2026-12-05 04:10:00
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0006_levels"
down_revision = "0005_notifications"
branch_labels = None
depends_on = None

_OLD_KEY = "uq_reference_levels_set_id_exam_type_quantity"
_NEW_KEY = "uq_reference_levels_level"


def upgrade() -> None:
    with op.batch_alter_table("reference_levels") as batch:
        batch.add_column(sa.Column("patient_group", sa.String(), nullable=False, server_default=""))
        batch.add_column(
            sa.Column("clinical_indication", sa.String(), nullable=False, server_default="")
        )
        batch.drop_constraint(op.f(_OLD_KEY), type_="unique")
        batch.create_unique_constraint(
            op.f(_NEW_KEY),
            ["set_id", "exam_type", "quantity", "patient_group", "clinical_indication"],
        )
    with op.batch_alter_table("mapping_rules") as batch:
        batch.add_column(sa.Column("clinical_indication", sa.String(), nullable=True))
    with op.batch_alter_table("exposure_events") as batch:
        batch.add_column(sa.Column("clinical_indication", sa.String(), nullable=True))
        batch.add_column(sa.Column("effective_dose_msv", sa.Float(), nullable=True))
        batch.add_column(sa.Column("effective_dose_source", sa.Text(), nullable=True))
        batch.add_column(sa.Column("effective_dose_reason", sa.Text(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("exposure_events") as batch:
        batch.drop_column("effective_dose_reason")
        batch.drop_column("effective_dose_source")
        batch.drop_column("effective_dose_msv")
        batch.drop_column("clinical_indication")
    with op.batch_alter_table("mapping_rules") as batch:
        batch.drop_column("clinical_indication")
    qualified = (
        op.get_bind()
        .execute(
            sa.text(
                "SELECT count(*) FROM reference_levels "
                "WHERE patient_group <> '' OR clinical_indication <> ''"
            )
        )
        .scalar()
    )
    if qualified:  # the older schema would keep a child's level as an adult's: refuse
        raise RuntimeError(
            f"{qualified} levels are for a patient group or a clinical indication; retire or "
            "delete their sets before downgrading below 0006_levels"
        )
    with op.batch_alter_table("reference_levels") as batch:
        batch.drop_constraint(op.f(_NEW_KEY), type_="unique")
        batch.create_unique_constraint(op.f(_OLD_KEY), ["set_id", "exam_type", "quantity"])
        batch.drop_column("clinical_indication")
        batch.drop_column("patient_group")
