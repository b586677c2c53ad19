"""The SQL store: tables, engines, migrations, and every query more than one caller needs."""

from beamaudit.api.store.base import Base, utcnow
from beamaudit.api.store.engine import (
    StoreError,
    check_connection,
    make_engine,
    make_session_factory,
    session_scope,
)
from beamaudit.api.store.migrate import current_revision, head_revision, upgrade

__all__ = [
    "Base",
    "StoreError",
    "check_connection",
    "current_revision",
    "head_revision",
    "make_engine",
    "make_session_factory",
    "session_scope",
    "upgrade",
    "utcnow",
]
