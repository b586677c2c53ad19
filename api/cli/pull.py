"""``beamaudit pull`` and ``beamaudit sources``: DICOMweb sources and their watermarks."""

from __future__ import annotations

import json
from typing import Annotated

import typer

from beamaudit.api.cli._common import EXIT_PARTIAL, console, fail

__all__ = ["register"]

sources_app = typer.Typer(help="DICOMweb sources the nightly run pulls.", no_args_is_help=True)


def pull_command(
    ctx: typer.Context,
    dicomweb: Annotated[str, typer.Option("--dicomweb", help="DICOMweb root URL (QIDO/WADO-RS).")],
    since: Annotated[
        str, typer.Option(help="First study date YYYY-MM-DD, or 'last' (the source's watermark).")
    ] = "last",
    modality: Annotated[
        list[str] | None, typer.Option("--modality", help="Modality in study (repeatable).")
    ] = None,
    as_json: Annotated[bool, typer.Option("--json", help="Print one JSON object.")] = False,
    credentials: Annotated[
        str | None,
        typer.Option(
            "--credentials",
            help=(
                "Name of the login in the settings (the table pull.credentials.NAME); kept on "
                "the source."
            ),
        ),
    ] = None,
) -> None:
    """Pull instance metadata (never pixel data) from a DICOMweb server into the store.

    A login is never part of the URL: name one of the settings with --credentials.
    Exit code 0 when every instance was used, 1 when some were rejected, 2 on a
    usage error or an unreachable server.
    """
    from beamaudit.api.cli._store import open_store
    from beamaudit.api.cli.scan import pseudonym_key
    from beamaudit.api.intake.pulling import pull_source
    from beamaudit.ingest.dicomweb import DicomwebSource
    from beamaudit.ingest.errors import IngestError
    from beamaudit.ingest.pseudonym import Pseudonymiser

    try:
        DicomwebSource(dicomweb)  # an http(s) URL without a login, or one clear line
    except IngestError as exc:
        fail(exc.reason)
    store = open_store(ctx)
    pseudonymiser = Pseudonymiser(pseudonym_key(store.settings.secret_key_path))
    try:
        outcome = pull_source(
            store.sessions,
            url=dicomweb.rstrip("/"),
            since=since,
            modalities=[m.upper() for m in modality] if modality else None,
            pseudonymiser=pseudonymiser,
            settings=store.settings,
            credentials=credentials,
        )
    except IngestError as exc:
        fail(exc.reason)
    if as_json:
        typer.echo(json.dumps(outcome.as_dict(), indent=2))
    else:
        console.print(
            f"pulled from {outcome.source} since {outcome.since}: {outcome.studies} studies, "
            f"{outcome.instances} instances ({outcome.events} new events, "
            f"{outcome.skipped_known} already stored); {len(outcome.errors)} rejected; "
            f"watermark {outcome.watermark or '-'}",
            highlight=False,
        )
        for err in outcome.errors[:20]:
            console.print(f"  {err['source']}: {err['reason']}", highlight=False, markup=False)
    if outcome.errors:
        raise typer.Exit(EXIT_PARTIAL)


@sources_app.command("add")
def sources_add(
    ctx: typer.Context,
    name: Annotated[str, typer.Argument(help="A name for the source.")],
    url: Annotated[str, typer.Argument(help="DICOMweb root URL.")],
    modality: Annotated[list[str] | None, typer.Option("--modality", help="Repeatable.")] = None,
    credentials: Annotated[
        str | None,
        typer.Option(
            "--credentials",
            help="Name of its login in the settings (the table pull.credentials.NAME).",
        ),
    ] = None,
) -> None:
    """Add a DICOMweb source for the nightly pull (a login is named, never put in the URL)."""
    from sqlalchemy import select

    from beamaudit.api.cli._store import open_store
    from beamaudit.api.intake.pulling import source_login
    from beamaudit.api.store import models as m
    from beamaudit.api.store.auth import record_change
    from beamaudit.ingest.dicomweb import DicomwebSource
    from beamaudit.ingest.errors import IngestError

    try:
        DicomwebSource(url)  # an http(s) URL without a login, or one clear line
    except IngestError as exc:
        fail(exc.reason)
    store = open_store(ctx)
    try:
        source_login(store.settings, credentials)
    except IngestError as exc:
        fail(exc.reason)
    with store.sessions.begin() as session:
        clash = session.scalar(
            select(m.DicomwebSource).where(
                (m.DicomwebSource.name == name) | (m.DicomwebSource.url == url.rstrip("/"))
            )
        )
        if clash is not None:
            fail(f"a source with that name or URL exists already (id {clash.id})")
        row = m.DicomwebSource(
            name=name, url=url.rstrip("/"), modalities=[x.upper() for x in modality or []],
            credentials=credentials,
        )  # fmt: skip
        session.add(row)
        session.flush()
        record_change(
            session, actor="cli", action="create", entity="dicomweb_source", entity_id=row.id,
            after={"name": name, "url": row.url, "modalities": row.modalities,
                   "credentials": credentials},
        )  # fmt: skip
    console.print(f"source {name} added")


@sources_app.command("list")
def sources_list(ctx: typer.Context) -> None:
    """List the DICOMweb sources with their watermarks."""
    from rich.table import Table
    from sqlalchemy import select

    from beamaudit.api.cli._store import open_store
    from beamaudit.api.store import models as m

    store = open_store(ctx)
    table = Table("id", "name", "url", "login", "modalities", "watermark", "last pull (UTC)")
    with store.sessions() as session:
        for row in session.scalars(select(m.DicomwebSource).order_by(m.DicomwebSource.id)):
            table.add_row(
                str(row.id), row.name, row.url, row.credentials or "-",
                ",".join(row.modalities or []) or "all",
                str(row.watermark_date or "-"),
                f"{row.last_pull_at:%Y-%m-%d %H:%M}" if row.last_pull_at else "-",
            )  # fmt: skip
    console.print(table)


def register(app: typer.Typer) -> None:
    """Add ``pull`` and the ``sources`` group to ``app``."""
    app.command("pull")(pull_command)
    app.add_typer(sources_app, name="sources")
