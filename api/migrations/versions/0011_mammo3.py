"""mammo3: screening or diagnostic as ingest read it from a mammography view or dose report

Revision ID: 0011_mammo3
Revises: 0010_names19
Create Date: 2026-12-05 07:30:00
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0011_mammo3"
down_revision = "0010_names19"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("exposure_events") as batch:
        batch.add_column(sa.Column("mammography_intent", sa.String(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("exposure_events") as batch:
        batch.drop_column("mammography_intent")
