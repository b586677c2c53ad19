"""Alembic, driven from code: ``beamaudit db upgrade`` and the server's start-up."""

from __future__ import annotations

from importlib import resources

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy.engine import Engine

__all__ = ["alembic_config", "current_revision", "head_revision", "upgrade"]


def alembic_config(engine: Engine | None = None) -> Config:
    """An Alembic config pointing at the packaged migrations (no alembic.ini needed)."""
    cfg = Config()
    cfg.set_main_option("script_location", str(resources.files("beamaudit.api") / "migrations"))
    if engine is not None:
        cfg.attributes["engine"] = engine
    return cfg


def upgrade(engine: Engine, revision: str = "head") -> None:
    """Apply migrations up to ``revision`` on ``engine``'s database."""
    command.upgrade(alembic_config(engine), revision)


def head_revision() -> str | None:
    """The newest migration shipped with this version."""
    return ScriptDirectory.from_config(alembic_config()).get_current_head()


def current_revision(engine: Engine) -> str | None:
    """The revision the database is at (``None`` for an empty database)."""
    with engine.connect() as conn:
        return MigrationContext.configure(conn).get_current_revision()
