"""``beamaudit token``: API tokens (create, list, revoke)."""

from __future__ import annotations

import getpass
from typing import Annotated

import typer

from beamaudit.api.cli._common import console, fail

__all__ = ["register"]

token_app = typer.Typer(help="Create, list and revoke API tokens.", no_args_is_help=True)


def _actor() -> str:
    try:
        return f"cli:{getpass.getuser()}"
    except (KeyError, OSError):
        return "cli"


@token_app.command("create")
def create_command(
    ctx: typer.Context,
    role: Annotated[str, typer.Option(help="viewer, physicist or admin.")],
    name: Annotated[str | None, typer.Option(help="Who or what the token is for.")] = None,
    expires_in_days: Annotated[
        int | None,
        typer.Option(min=1, max=3650, help="Days the token stays valid (default: until revoked)."),
    ] = None,
) -> None:
    """Make a token and print it once (only its hash is kept)."""
    from datetime import timedelta

    from beamaudit.api.cli._store import open_store
    from beamaudit.api.store.auth import ROLES, create_token
    from beamaudit.api.store.base import utcnow

    if role not in ROLES:
        fail(f"--role must be one of {', '.join(ROLES)}, not {role!r}")
    expires = None if expires_in_days is None else utcnow() + timedelta(days=expires_in_days)
    store = open_store(ctx)
    with store.sessions.begin() as session:
        token_id, token = create_token(
            session, role=role, name=name, actor=_actor(), expires_at=expires
        )
    console.print(
        f"token {token_id} ({role}) created; it is shown only this once:", highlight=False
    )
    typer.echo(token)


@token_app.command("revoke")
def revoke_command(
    ctx: typer.Context, token_id: Annotated[int, typer.Argument(metavar="ID")]
) -> None:
    """Revoke a token by its id."""
    from beamaudit.api.cli._store import open_store
    from beamaudit.api.store.auth import AuthError, revoke_token

    store = open_store(ctx)
    try:
        with store.sessions.begin() as session:
            revoke_token(session, token_id, actor=_actor())
    except AuthError as exc:
        fail(str(exc))
    console.print(f"token {token_id} revoked")


@token_app.command("list")
def list_command(ctx: typer.Context) -> None:
    """List tokens (id, name, role, created, expires, last used, revoked); never the tokens."""
    from rich.table import Table
    from sqlalchemy import select

    from beamaudit.api.cli._store import open_store
    from beamaudit.api.store import models as m

    store = open_store(ctx)
    table = Table(
        "id", "name", "role", "created (UTC)", "expires (UTC)", "last used (UTC)", "revoked (UTC)"
    )
    with store.sessions() as session:
        for row in session.scalars(select(m.ApiToken).order_by(m.ApiToken.id)):
            table.add_row(
                str(row.id),
                row.name or "",
                row.role,
                f"{row.created_at:%Y-%m-%d %H:%M}",
                f"{row.expires_at:%Y-%m-%d %H:%M}" if row.expires_at else "",
                f"{row.last_used_at:%Y-%m-%d %H:%M}" if row.last_used_at else "",
                f"{row.revoked_at:%Y-%m-%d %H:%M}" if row.revoked_at else "",
            )
    console.print(table)


def register(app: typer.Typer) -> None:
    """Add the ``token`` group to ``app``."""
    app.add_typer(token_app, name="token")
