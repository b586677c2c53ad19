"""``beamaudit serve``: the REST API and the dashboards."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer

from beamaudit.api.cli._common import console, fail, load_settings

__all__ = ["register"]


def serve_command(
    ctx: typer.Context,
    host: Annotated[str, typer.Option(help="Address to listen on.")] = "127.0.0.1",
    port: Annotated[int, typer.Option(min=1, max=65535, help="TCP port.")] = 8000,
    workers: Annotated[
        int | None,
        typer.Option(
            min=1,
            max=64,
            help="Server processes answering requests (default: one per core, at most 8; "
            "always one for a database in memory).",
        ),
    ] = None,
) -> None:
    """Apply migrations, mark review runs cut short as failed, then serve the API (/api/v1) and
    the dashboards (/)."""
    import logging
    import os

    import uvicorn

    from beamaudit.api.cli._serving import database_words, sign_in_words, sqlite_file
    from beamaudit.api.logs import configure_logging
    from beamaudit.api.runs.record import fail_interrupted_runs
    from beamaudit.api.store import (
        StoreError,
        check_connection,
        make_engine,
        make_session_factory,
        upgrade,
    )
    from beamaudit.api.web.app import create_app

    settings = load_settings(ctx)
    file = sqlite_file(settings.database_url)
    if file is not None and not file.exists():
        console.print(
            f"the database file {file} does not exist: a new, empty one is made (to serve "
            "another, set database_url in the settings file or BEAMAUDIT_DATABASE_URL)",
            highlight=False,
        )
    try:
        engine = make_engine(settings.database_url)
        check_connection(engine)
        upgrade(engine)
    except StoreError as exc:
        fail(str(exc))
    failed = fail_interrupted_runs(make_session_factory(engine), started="beamaudit serve")
    if failed:
        console.print(f"review runs cut short, now marked failed: {', '.join(map(str, failed))}")
    console.print(
        f"beamaudit serving on http://{host}:{port}/\ndatabase: "
        f"{database_words(settings.database_url)}\n{sign_in_words(host, port)}",
        highlight=False,
    )
    n_workers = workers if workers is not None else min(os.cpu_count() or 1, 8)
    if file is None and settings.backend == "sqlite":
        n_workers = 1  # a database in memory lives in one process
    if settings.metrics.enabled and settings.metrics.bind:
        from beamaudit.api.web.metrics import collector, start_metrics_server

        try:
            start_metrics_server(settings.metrics.bind, collector(make_session_factory(engine)))
        except OSError as exc:
            fail(f"cannot serve /metrics on {settings.metrics.bind}: {exc.strerror or exc}")
        console.print(f"metrics on http://{settings.metrics.bind}/metrics", highlight=False)
    if n_workers == 1:
        from beamaudit.api.web.app import warm_up_model

        app = create_app(settings, engine=engine)
        warm_up_model()
        config = uvicorn.Config(app, host=host, port=port, log_level="info")
    else:
        # each worker process makes the app from the same settings (its own engine and pool)
        root = ctx.find_root()
        config_file = root.obj.get("config") if isinstance(root.obj, dict) else None
        if config_file is not None:
            os.environ["BEAMAUDIT_CONFIG"] = str(Path(config_file).resolve())
        engine.dispose()
        config = uvicorn.Config(
            "beamaudit.api.web.app:create_app_from_environment",
            factory=True,
            host=host,
            port=port,
            workers=n_workers,
            log_level="info",
        )
    server = uvicorn.Server(config)  # uvicorn's logging is set up now: filter its handlers too
    configure_logging(logging.INFO)
    if n_workers == 1:
        server.run()
    else:
        from uvicorn.supervisors import Multiprocess

        Multiprocess(config, sockets=[config.bind_socket()]).run()


def register(app: typer.Typer) -> None:
    """Add ``serve`` to ``app``."""
    app.command("serve")(serve_command)
