"""``beamaudit db``: the store's schema."""

from __future__ import annotations

import typer

from beamaudit.api.cli._common import console, fail, load_settings

__all__ = ["register"]

db_app = typer.Typer(help="Manage the database schema.", no_args_is_help=True)


@db_app.command("upgrade")
def upgrade_command(ctx: typer.Context) -> None:
    """Apply every migration up to the newest (Alembic "head")."""
    from beamaudit.api.store import StoreError, check_connection, make_engine, upgrade
    from beamaudit.api.store.migrate import current_revision

    settings = load_settings(ctx)
    try:
        engine = make_engine(settings.database_url)
        check_connection(engine)
        upgrade(engine)
        revision = current_revision(engine)
    except StoreError as exc:
        fail(str(exc))
    console.print(f"database {settings.backend} at revision {revision}")


@db_app.command("current")
def current_command(ctx: typer.Context) -> None:
    """Print the database's migration revision and the newest shipped one."""
    from beamaudit.api.store import StoreError, check_connection, head_revision, make_engine
    from beamaudit.api.store.migrate import current_revision

    settings = load_settings(ctx)
    try:
        engine = make_engine(settings.database_url)
        check_connection(engine)
        revision = current_revision(engine)
    except StoreError as exc:
        fail(str(exc))
    console.print(f"current {revision or '(empty)'}; head {head_revision()}")


def register(app: typer.Typer) -> None:
    """Add the ``db`` group to ``app``."""
    app.add_typer(db_app, name="db")
