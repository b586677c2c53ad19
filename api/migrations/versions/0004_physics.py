"""physics: a room's tube side and its table top and mattress (layers or measured transmission)

Revision ID: 0004_physics
Revises: 0003_security
Create Date: 2026-12-05 01:00:00
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0004_physics"
down_revision = "0003_security"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("rooms") as batch:
        batch.add_column(sa.Column("tube_side", sa.String(), nullable=True))
        batch.add_column(
            sa.Column(
                "table_filtration", sa.JSON().with_variant(sa.JSON(), "sqlite"), nullable=True
            )
        )
        batch.add_column(sa.Column("table_transmission", sa.Float(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("rooms") as batch:
        batch.drop_column("table_transmission")
        batch.drop_column("table_filtration")
        batch.drop_column("tube_side")
