"""Alembic environment: the engine comes from ``config.attributes["engine"]``."""

from __future__ import annotations

from alembic import context

from beamaudit.api.store import models  # noqa: F401  (registers every table)
from beamaudit.api.store.base import Base

config = context.config
target_metadata = Base.metadata


def run_migrations_online() -> None:
    engine = config.attributes.get("engine")
    if engine is None:  # pragma: no cover - only when alembic is run by hand
        from beamaudit.api.settings import load
        from beamaudit.api.store.engine import make_engine

        engine = make_engine(load().database_url)
    with engine.begin() as connection:
        context.configure(
            connection=connection,
            target_metadata=target_metadata,
            render_as_batch=connection.dialect.name == "sqlite",
            compare_type=True,
        )
        context.run_migrations()


run_migrations_online()
