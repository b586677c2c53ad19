"""Alembic, driven from code: ``beamaudit db upgrade`` and the server's start-up.

Every command that writes opens the store migrated to head. Alembic (and its migration scripts)
is imported only when the database is not at the shipped head already: the head is read from the
migration files' ``revision`` and ``down_revision`` lines, and the database's from its
``alembic_version`` table, which costs a query instead of a few hundred milliseconds.
"""

from __future__ import annotations

import re
from importlib import resources
from typing import TYPE_CHECKING

from sqlalchemy import text
from sqlalchemy.engine import Engine
from sqlalchemy.exc import SQLAlchemyError

if TYPE_CHECKING:
    from alembic.config import Config

__all__ = ["alembic_config", "current_revision", "head_revision", "upgrade"]

_REVISION = re.compile(r'^revision(?:: str)? = "([^"]+)"$', re.M)
_DOWN_REVISION = re.compile(r'^down_revision(?:: [^=]+)? = (?:"([^"]+)"|None)$', re.M)


def alembic_config(engine: Engine | None = None) -> Config:
    """An Alembic config pointing at the packaged migrations (no alembic.ini needed)."""
    from alembic.config import Config

    cfg = Config()
    cfg.set_main_option("script_location", str(resources.files("beamaudit.api") / "migrations"))
    if engine is not None:
        cfg.attributes["engine"] = engine
    return cfg


def upgrade(engine: Engine, revision: str = "head") -> None:
    """Apply migrations up to ``revision`` on ``engine``'s database."""
    if revision == "head" and _at_shipped_head(engine):
        return
    from alembic import command

    command.upgrade(alembic_config(engine), revision)


def head_revision() -> str | None:
    """The newest migration shipped with this version."""
    from alembic.script import ScriptDirectory

    return ScriptDirectory.from_config(alembic_config()).get_current_head()


def current_revision(engine: Engine) -> str | None:
    """The revision the database is at (``None`` for an empty database)."""
    from alembic.runtime.migration import MigrationContext

    with engine.connect() as conn:
        return MigrationContext.configure(conn).get_current_revision()


def _shipped_head() -> str | None:
    """The one revision no shipped migration names as its ``down_revision``, read from the
    files; None when any file says it in another form (Alembic then decides)."""
    folder = resources.files("beamaudit.api") / "migrations" / "versions"
    revisions: set[str] = set()
    parents: set[str] = set()
    for entry in folder.iterdir():
        if not entry.name.endswith(".py") or entry.name.startswith("_"):
            continue
        source = entry.read_text(encoding="utf-8")
        revision, down = _REVISION.findall(source), _DOWN_REVISION.search(source)
        if len(revision) != 1 or down is None:
            return None
        revisions.add(revision[0])
        if down.group(1):
            parents.add(down.group(1))
    heads = revisions - parents
    return heads.pop() if len(heads) == 1 else None


def _at_shipped_head(engine: Engine) -> bool:
    head = _shipped_head()
    if head is None:
        return False
    try:
        with engine.connect() as conn:
            versions = conn.execute(text("SELECT version_num FROM alembic_version")).all()
    except SQLAlchemyError:  # no table yet, or unreadable: Alembic decides
        return False
    return [row[0] for row in versions] == [head]
