"""The ``beamaudit`` command line (also ``python -m beamaudit``).

Each command group lives in its own module here and adds itself with
``register(app)``. Errors a user can cause end in one line on stderr and
exit code 2; a command that finished but rejected some input exits 1.
"""

from __future__ import annotations

import importlib
import sys
from pathlib import Path
from typing import Annotated

import typer

from beamaudit import CAUTION, __version__

__all__ = ["app", "main"]

#: command modules, in the order their commands appear in ``--help``
COMMAND_MODULES = (
    "db",
    "serve",
    "scan",
    "listen",
    "pull",
    "review",
    "notify",
    "export",
    "explain",
    "beam",
    "dose",
    "skin",
    "mgd",
    "token",
    "ctcal",
    "conformance",
    "demo",
)

app = typer.Typer(
    name="beamaudit",
    help=(
        "Audit patient doses from x-ray examinations against diagnostic reference levels. "
        + CAUTION
    ),
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
    context_settings={"help_option_names": ["-h", "--help"]},
)


def _version(value: bool) -> None:
    if value:
        typer.echo(f"beamaudit {__version__}")
        raise typer.Exit(0)


@app.callback()
def _root(
    ctx: typer.Context,
    config: Annotated[
        Path | None,
        typer.Option(
            "--config",
            help="TOML settings file (default: $BEAMAUDIT_CONFIG, then environment only).",
            dir_okay=False,
        ),
    ] = None,
    version: Annotated[
        bool,
        typer.Option("--version", callback=_version, is_eager=True, help="Print the version."),
    ] = False,
    log_format: Annotated[
        str,
        typer.Option(
            "--log-format",
            envvar="BEAMAUDIT_LOG_FORMAT",
            help="Log lines as text or json (one JSON object a line); no patient data either way.",
        ),
    ] = "text",
) -> None:
    from beamaudit.api.cli._common import fail
    from beamaudit.api.logs import LOG_FORMATS, configure_logging

    if log_format not in LOG_FORMATS:
        fail(f"--log-format must be one of {', '.join(LOG_FORMATS)}, not {log_format!r}")
    # one line per record; library warnings without data values
    configure_logging(log_format=log_format)  # type: ignore[arg-type]
    ctx.obj = {"config": config}


def main(argv: list[str] | None = None) -> int:
    """Run the command line; returns the exit code (for tests: ``main(["--help"])``)."""
    from beamaudit.api.cli._help import plain_help
    from beamaudit.errors import BeamauditError

    command = plain_help(typer.main.get_command(app))  # help in words, not Python types
    try:
        command.main(args=argv, prog_name="beamaudit", standalone_mode=True)
    except SystemExit as exc:
        code = exc.code
        return code if isinstance(code, int) else (0 if code is None else 1)
    except BeamauditError as exc:
        # the last net under every command: an error of any stage is one line, never a traceback
        message = " ".join(str(exc).split()) or type(exc).__name__
        sys.stderr.write(f"error: {message}\n")
        return 2
    return 0


def _register(module_names: tuple[str, ...]) -> None:
    for name in module_names:
        importlib.import_module(f"beamaudit.api.cli.{name}").register(app)


# Command modules keep their heavy imports inside the commands, so this stays cheap.
_register(COMMAND_MODULES)
