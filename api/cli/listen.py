"""``beamaudit listen``: the C-STORE listener."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any

import typer

from beamaudit.api.cli._common import console, fail

if TYPE_CHECKING:
    from beamaudit.api.cli._store import OpenStore
    from beamaudit.api.intake.spool_worker import SpoolWorkerProcess
    from beamaudit.api.intake.spooling import Spool
    from beamaudit.api.settings import ListenerSettings, Settings
    from beamaudit.ingest.listener import Listener, ListenerConfig

__all__ = ["register"]


def listen_command(
    ctx: typer.Context,
    ae_title: Annotated[
        str | None, typer.Option(help="Our AE title (default from settings: BEAMAUDIT).")
    ] = None,
    port: Annotated[
        int | None, typer.Option(min=1, max=65535, help="TCP port (default 11112).")
    ] = None,
    host: Annotated[
        str | None, typer.Option(help="Address to bind (default from settings).")
    ] = None,
    allow: Annotated[
        list[str] | None,
        typer.Option("--allow", help="Accept only this calling AE title (repeatable)."),
    ] = None,
) -> None:
    """Receive images and dose reports by C-STORE; answer success once an object is safe in the
    listener's spool, and store it from there."""
    import logging

    from beamaudit.api.cli._store import open_store
    from beamaudit.api.cli.scan import pseudonym_key
    from beamaudit.api.intake.pipeline import Pipeline
    from beamaudit.api.intake.postprocess import Completion
    from beamaudit.api.intake.spooling import Spool, SpoolError, make_spooling_handler, spool_path
    from beamaudit.api.logs import configure_logging
    from beamaudit.ingest.errors import IngestError
    from beamaudit.ingest.listener import start_listener
    from beamaudit.ingest.pseudonym import Pseudonymiser

    configure_logging(logging.INFO)  # associations and stored objects, for the operator
    store = open_store(ctx)
    cfg = store.settings.listener
    try:
        config = _listener_config(cfg, ae_title=ae_title, host=host, port=port, allow=allow)
        spool = Spool(
            spool_path(listen_spool_dir(store.settings), store.settings.database_url, config.port),
            synchronous=cfg.spool_synchronous,
        )
        key = pseudonym_key(store.settings.secret_key_path)
        handler, _, _ = make_spooling_handler(
            spool,
            Pipeline(store.sessions, completion=Completion()),
            Pseudonymiser(key),
            max_spooled=cfg.max_spooled,
        )
        if spool.pending:
            console.print(
                f"{spool.pending} objects received before the last stop are stored first",
                highlight=False,
            )
        listener = start_listener(config, handler)
        # started once the port is ours; it parses and stores in a process of its own
        worker = _start_spool_worker(store.settings, spool, key)
    except (IngestError, SpoolError) as exc:
        fail(exc.reason if isinstance(exc, IngestError) else str(exc))
    _serve_listener_metrics(store, listener, worker, spool)
    console.print(
        f"listening as {config.ae_title} on {listener.address[0]}:{listener.port} "
        f"(database: {store.settings.backend}); Ctrl-C stops",
        highlight=False,
    )
    try:
        listener.wait()
    finally:
        # what was acknowledged and is still spooled is stored now, and the studies still
        # waiting for their quiet time are sized
        worker.close()
        spool.close()


def _listener_config(
    cfg: ListenerSettings,
    *,
    ae_title: str | None,
    host: str | None,
    port: int | None,
    allow: list[str] | None,
) -> ListenerConfig:
    """The listener's configuration: the command's options over the ``listener`` settings."""
    from beamaudit.ingest.listener import ListenerConfig

    allowed = allow or cfg.allowed_calling_aets
    return ListenerConfig(
        ae_title=ae_title or cfg.ae_title,
        host=host or cfg.host,
        port=port or cfg.port,
        allowed_calling_aets=frozenset(allowed) if allowed else None,
        max_associations=cfg.max_associations,
        max_associations_per_ae=min(cfg.max_associations_per_ae, cfg.max_associations),
        max_connections=cfg.max_connections,
        max_objects_in_flight=cfg.max_objects_in_flight,
        max_object_bytes=cfg.max_object_bytes,
        request_timeout_s=cfg.request_timeout_s,
        network_timeout_s=cfg.idle_timeout_s,
        association_timeout_s=cfg.association_timeout_s,
        decode_values=False,  # the spool's worker parses; what it cannot use is recorded
    )


def _start_spool_worker(settings: Settings, spool: Spool, key: bytes) -> SpoolWorkerProcess:
    """Start the process that parses and stores what the listener spooled."""
    from beamaudit.api.intake.spool_worker import SpoolWorkerProcess

    cfg = settings.listener
    return SpoolWorkerProcess(
        {
            "spool": str(spool.path),
            "synchronous": cfg.spool_synchronous,
            "database_url": settings.database_url,
            "key": key.hex(),
            "size_quiet_s": cfg.size_quiet_s,
            "max_spooled": cfg.max_spooled,
            "log_format": _log_format(),
        }
    )


def _serve_listener_metrics(
    store: OpenStore, listener: Listener, worker: SpoolWorkerProcess, spool: Spool
) -> None:
    """Serve ``/metrics`` for the listener when the settings ask for it; a port we cannot bind
    stops the listener and its worker with a one-line error."""
    metrics = store.settings.metrics
    if not (metrics.enabled and metrics.listener_bind):
        return
    from beamaudit.api.web.metrics import (
        AssociationCounter,
        collector,
        spooled_family,
        start_metrics_server,
    )

    counter = AssociationCounter()
    counter.bind(listener)
    try:
        start_metrics_server(
            metrics.listener_bind,
            collector(store.sessions, counter.family, spooled_family(spool)),
        )
    except OSError as exc:
        listener.stop()
        worker.close()
        fail(f"cannot serve /metrics on {metrics.listener_bind}: {exc.strerror or exc}")
    console.print(f"metrics on http://{metrics.listener_bind}/metrics", highlight=False)


def _log_format() -> str:
    """The format this process logs in (``--log-format``), for the worker process."""
    import logging

    from beamaudit.api.logs import JsonFormatter

    json_lines = any(isinstance(h.formatter, JsonFormatter) for h in logging.getLogger().handlers)
    return "json" if json_lines else "text"


def listen_spool_dir(settings: Any) -> Path:
    """The spool's folder: the setting, else beside the SQLite database file, else beside the
    pseudonymisation key (a PostgreSQL store, an in-memory SQLite database)."""
    if settings.listener.spool_dir is not None:
        return Path(settings.listener.spool_dir)
    return Path(settings.store_folder())


def register(app: typer.Typer) -> None:
    """Add ``listen`` to ``app``."""
    app.command("listen")(listen_command)
