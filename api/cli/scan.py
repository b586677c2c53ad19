"""``beamaudit scan``: read DICOM files from folders into the store."""

from __future__ import annotations

import json
import sys
from pathlib import Path
from typing import Annotated

import typer

from beamaudit.api.cli._common import EXIT_PARTIAL, console, fail

__all__ = ["pseudonym_key", "register"]


def pseudonym_key(path: Path) -> bytes:
    """The pseudonymisation key (made on first use); a broken key file is a one-line error."""
    from beamaudit.ingest.errors import IngestError
    from beamaudit.ingest.pseudonym import load_or_create_key

    try:
        return load_or_create_key(path)
    except IngestError as exc:
        fail(exc.reason)


def scan_command(
    ctx: typer.Context,
    paths: Annotated[
        list[Path],
        typer.Argument(help="Files or folders (walked recursively; DICOM recognised by content)."),
    ],
    workers: Annotated[
        int | None,
        typer.Option(
            min=1,
            max=64,
            help="Parser processes (default: one per core, at most 4; a scan of fewer than "
            "64 files parses in this process).",
        ),
    ] = None,
    as_json: Annotated[
        bool, typer.Option("--json", help="Print the summary as one JSON object.")
    ] = False,
) -> None:
    """Scan folders of DICOM files: store their exposure events, record every rejected file.

    Exit code 0 when every file was used, 1 when some were rejected (all others
    stored), 2 on a usage error.
    """
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

    from beamaudit.api.cli._store import open_store
    from beamaudit.api.intake.pipeline import Pipeline
    from beamaudit.api.intake.postprocess import Completion
    from beamaudit.api.intake.scanning import default_workers, freeze_heap, scan_paths

    missing = [str(p) for p in paths if not p.exists()]
    if missing:
        fail(f"no such file or folder: {', '.join(missing)}")
    store = open_store(ctx)
    key = pseudonym_key(store.settings.secret_key_path)
    completion = Completion()  # exam types and figures, stored with the events
    pipeline = Pipeline(store.sessions, completion=completion)
    completion.load_modules()
    freeze_heap()
    workers = workers or default_workers()
    show_progress = sys.stderr.isatty() and not as_json
    if show_progress:
        progress = Progress(
            TextColumn("scanning"),
            BarColumn(),
            MofNCompleteColumn(),
            TimeElapsedColumn(),
            transient=True,
            console=console,
        )
        with progress:
            task = progress.add_task("scan", total=None)
            summary = scan_paths(
                paths,
                pipeline=pipeline,
                key=key,
                workers=workers,
                on_file=lambda _p: progress.advance(task),
            )
    else:
        summary = scan_paths(paths, pipeline=pipeline, key=key, workers=workers)
    recon = completion.summary
    if as_json:
        body = summary.as_dict() | {"reconstructed": recon.as_dict()}
        typer.echo(json.dumps(body, indent=2))
    else:
        _print_summary(summary, recon)
    if summary.errors:
        raise typer.Exit(EXIT_PARTIAL)


def _print_summary(summary, recon) -> None:
    console.print(
        f"files read {summary.files}; objects stored {summary.objects} "
        f"({summary.events} exposure events); duplicates {summary.duplicates}; "
        f"DICOMDIR indexes skipped {summary.skipped}; rejected {len(summary.errors)}",
        highlight=False,
    )
    for path in summary.store_files_skipped:
        console.print(f"not read: {path} (this store's own database file)", markup=False)
    console.print(
        f"reconstructed {recon.reconstructed}; without technique {recon.no_technique}; "
        f"model failures {recon.failed}",
        highlight=False,
    )
    if summary.errors:
        for code, n in sorted(summary.errors_by_reason().items()):
            console.print(f"  {n} x {code}", highlight=False)
        for err in summary.errors[:20]:
            console.print(f"  {err['source']}: {err['reason']}", highlight=False, markup=False)
        if len(summary.errors) > 20:
            console.print(f"  ... and {len(summary.errors) - 20} more (beamaudit errors list)")


def register(app: typer.Typer) -> None:
    """Add ``scan`` to ``app``."""
    app.command("scan")(scan_command)
