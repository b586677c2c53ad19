"""The ``beamaudit`` command line (also ``python -m beamaudit``).

Each command group lives in its own module here and adds itself with
``register(app)``. Errors a user can cause end in one line on stderr and
exit code 2; a command that finished but rejected some input exits 1.
"""

from __future__ import annotations

import importlib
from pathlib import Path
from typing import Annotated

import typer

from beamaudit import __version__

__all__ = ["app", "main"]

#: command modules, in the order their commands appear in ``--help``
COMMAND_MODULES = (
    "db",
    "serve",
    "scan",
    "listen",
    "pull",
    "review",
    "export",
    "explain",
    "beam",
    "dose",
    "mgd",
    "token",
    "demo",
)

app = typer.Typer(
    name="beamaudit",
    help=(
        "Audit patient doses from x-ray examinations against diagnostic reference levels. "
        "Every dose figure is an estimate for quality assurance and optimisation; clinical "
        "decisions about a patient need a qualified medical physicist."
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
) -> None:
    from beamaudit.api.logs import configure_logging

    configure_logging()  # one line per record; library warnings without data values
    ctx.obj = {"config": config}


def main(argv: list[str] | None = None) -> int:
    """Run the command line; returns the exit code (for tests: ``main(["--help"])``)."""
    from beamaudit.api.cli._help import plain_help

    command = plain_help(typer.main.get_command(app))  # help in words, not Python types
    try:
        command.main(args=argv, prog_name="beamaudit", standalone_mode=True)
    except SystemExit as exc:
        code = exc.code
        return code if isinstance(code, int) else (0 if code is None else 1)
    return 0


def _register(module_names: tuple[str, ...]) -> None:
    for name in module_names:
        importlib.import_module(f"beamaudit.api.cli.{name}").register(app)


# Command modules keep their heavy imports inside the commands, so this stays cheap.
_register(COMMAND_MODULES)
