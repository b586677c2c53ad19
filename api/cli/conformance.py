"""``beamaudit conformance``: the DICOM conformance statement and IHE REM statement."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

__all__ = ["register"]


def conformance_command(
    output: Annotated[
        Path | None, typer.Option("--output", "-o", help="File (default: stdout).")
    ] = None,
) -> None:
    """Print the DICOM conformance statement (PS3.2 layout) and the IHE REM statement, made
    from the code's own tables (the repository ships it as docs/DICOM-CONFORMANCE.md)."""
    from beamaudit.api.conformance import conformance_statement

    text = conformance_statement()
    if output is None:
        typer.echo(text, nl=False)
    else:
        output.write_text(text, encoding="utf-8")


def register(app: typer.Typer) -> None:
    """Add ``conformance`` to ``app``."""
    app.command("conformance")(conformance_command)
