"""``beamaudit notify``: send the digests of new findings now (``nightly`` and ``review`` send
them on their own), or show them (``--dry-run``)."""

from __future__ import annotations

import json
from typing import Annotated, Any

import typer

from beamaudit.api.cli._common import EXIT_FAILURE, console, err_console

__all__ = ["register", "send_notifications"]


def send_notifications(store: Any, *, trigger: str, review_run_id: int | None = None) -> bool:
    """Send every recipient's digest; one line per delivery (failures on stderr). True when
    every delivery went through. Never raises for a failed delivery: the review is stored."""
    from beamaudit.api.runs.notify import notify_new_findings

    deliveries = notify_new_findings(
        store.sessions, store.settings.notify, trigger=trigger, review_run_id=review_run_id
    )
    for d in deliveries:
        if d.status == "sent":
            console.print(d.line(), highlight=False, markup=False)
        else:
            err_console.print(f"error: {d.line()}", markup=False)
    return all(d.status == "sent" for d in deliveries)


def notify_command(
    ctx: typer.Context,
    dry_run: Annotated[
        bool, typer.Option("--dry-run", help="Print each recipient's digest; send nothing.")
    ] = False,
) -> None:
    """Send each recipient the digest of findings new since its last digest.

    Exit code 0: sent (or nothing new); 2: a delivery failed (the findings stay new for it).
    """
    from beamaudit.api.cli._store import open_store

    store = open_store(ctx)
    if dry_run:
        from beamaudit.api.runs.notify import OUTBOX_RECIPIENT, build_digest
        from beamaudit.api.settings import NotifyRecipient

        notify = store.settings.notify
        recipients = dict(notify.recipients) or {
            OUTBOX_RECIPIENT: NotifyRecipient(role="outbox", min_severity="info")
        }
        with store.sessions() as session:
            digests = [
                build_digest(
                    session, name, rule, base_url=notify.public_base_url, trigger="command",
                    max_items=notify.max_items,
                ).as_json()
                for name, rule in recipients.items()
            ]  # fmt: skip
        typer.echo(json.dumps(digests, indent=2, default=str))
        return
    if not send_notifications(store, trigger="command"):
        raise typer.Exit(EXIT_FAILURE)


def register(app: typer.Typer) -> None:
    """Add ``notify`` to ``app``."""
    app.command("notify")(notify_command)
