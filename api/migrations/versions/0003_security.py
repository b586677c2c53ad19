"""security: browser sessions, token expiry, DICOMweb source credentials by name

Browser sessions of their own (the cookie is no longer the API token), an optional expiry
of API tokens, and the name of a source's login in the settings. URLs stored before with
``user:password@`` in them lose the credentials (sources, source objects, ingest errors).

Revision ID: 0003_security
Revises: 0002_record
Create Date: 2026-12-05 01:00:00
"""

from __future__ import annotations

import re

import sqlalchemy as sa
from alembic import op

import beamaudit.api.store.base

revision = "0003_security"
down_revision = "0002_record"
branch_labels = None
depends_on = None

_USERINFO = re.compile(r"^([a-zA-Z][a-zA-Z0-9+.-]*://)[^/@\s]*@")

#: tables and columns that may hold a URL with credentials stored before this revision
_URL_COLUMNS = (
    ("dicomweb_sources", "url"),
    ("source_objects", "received_from"),
    ("ingest_errors", "source"),
)


def upgrade() -> None:
    op.create_table(
        "browser_sessions",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("session_hash", sa.String(), nullable=False),
        sa.Column("csrf_token", sa.String(), nullable=False),
        sa.Column("token_id", sa.Integer(), nullable=False),
        sa.Column(
            "created_at", beamaudit.api.store.base.UTCDateTime(timezone=True), nullable=False
        ),
        sa.Column(
            "expires_at", beamaudit.api.store.base.UTCDateTime(timezone=True), nullable=False
        ),
        sa.Column("ended_at", beamaudit.api.store.base.UTCDateTime(timezone=True), nullable=True),
        sa.ForeignKeyConstraint(["token_id"], ["api_tokens.id"]),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("session_hash"),
    )
    op.create_index(
        op.f("ix_browser_sessions_token_id"), "browser_sessions", ["token_id"], unique=False
    )
    with op.batch_alter_table("api_tokens") as batch:
        batch.add_column(
            sa.Column(
                "expires_at", beamaudit.api.store.base.UTCDateTime(timezone=True), nullable=True
            )
        )
    with op.batch_alter_table("dicomweb_sources") as batch:
        batch.add_column(sa.Column("credentials", sa.String(), nullable=True))
    _strip_stored_credentials()


def _strip_stored_credentials() -> None:
    bind = op.get_bind()
    for table, column in _URL_COLUMNS:
        t = sa.table(table, sa.column("id", sa.Integer), sa.column(column, sa.String))
        rows = bind.execute(sa.select(t.c.id, t.c[column]).where(t.c[column].like("%://%@%"))).all()
        for row_id, value in rows:
            clean = _USERINFO.sub(r"\1", value)
            if clean != value:
                bind.execute(sa.update(t).where(t.c.id == row_id).values({column: clean}))


def downgrade() -> None:
    with op.batch_alter_table("dicomweb_sources") as batch:
        batch.drop_column("credentials")
    with op.batch_alter_table("api_tokens") as batch:
        batch.drop_column("expires_at")
    op.drop_index(op.f("ix_browser_sessions_token_id"), table_name="browser_sessions")
    op.drop_table("browser_sessions")
