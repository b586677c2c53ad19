"""Shared pieces of the command line: one-line errors, the console, settings loading."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import TYPE_CHECKING, NoReturn

import typer
from rich.console import Console

if TYPE_CHECKING:
    from beamaudit.api.settings import Settings

__all__ = [
    "EXIT_FAILURE",
    "EXIT_PARTIAL",
    "EXIT_USAGE",
    "console",
    "err_console",
    "fail",
    "load_settings",
]

#: Exit codes every command shares (0 is success).
EXIT_PARTIAL = 1  # some input was rejected, everything else done
EXIT_USAGE = 2  # bad usage, impossible input, unreachable database

console = Console()
err_console = Console(stderr=True, highlight=False, soft_wrap=True)


def fail(message: str, code: int = EXIT_USAGE) -> NoReturn:
    """Print one clear line on stderr and leave with ``code`` (no traceback)."""
    err_console.print(f"[bold red]error:[/] {message}", markup=True)
    raise typer.Exit(code)


EXIT_FAILURE = EXIT_USAGE


def load_settings(ctx: typer.Context | None = None) -> Settings:
    """The settings for this invocation: ``--config`` / ``BEAMAUDIT_CONFIG`` plus environment.

    A bad configuration file or value becomes a one-line error (exit 2).
    """
    from beamaudit.api.settings import SettingsError, load

    config: Path | None = None
    if ctx is not None:
        root = ctx.find_root()
        if root.obj and isinstance(root.obj, dict):
            config = root.obj.get("config")
    try:
        return load(config)
    except SettingsError as exc:
        fail(str(exc))


def _is_terminal() -> bool:
    return sys.stderr.isatty()
